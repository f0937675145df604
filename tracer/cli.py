"""The command line: parsing arguments and printing, nothing else.

Exit codes: 0 success, 2 bad input (one line on stderr, a traceback only with
``--debug``), 1 an internal fault, 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
import traceback
from pathlib import Path

from tracer import __version__

HIGH_VOLTAGE = 1000.0
CAUTION = ("CAUTION: this setup holds electrodes above 1 kV. Such voltages are lethal and electrons "
           "of a few keV make X-rays where they land; build and operate only under your local codes "
           "and licensed practice.")


class InputError(Exception):
    """Bad input found by the command line itself (a missing file, a bad option)."""


def _out_dir(args) -> Path:
    """The output folder: ``--out`` or ``CONFIG-stem.out`` beside the working directory."""
    if args.out:
        return Path(args.out)
    return Path(Path(args.config).stem + ".out")


def _load(path: str):
    from tracer.config import load

    if not Path(path).is_file():
        raise InputError(f"{path}: no such config file")
    return load(path)


def _progress(args, desc: str, unit: str = "map"):
    """A ``progress(done, total)`` callable drawing a bar on a terminal; None when quiet or piped."""
    if args.quiet or not sys.stderr.isatty():
        return None
    from tqdm import tqdm

    bar = None

    def update(done, total):
        nonlocal bar
        if bar is None:
            bar = tqdm(total=total, desc=desc, unit=unit, leave=False)
        bar.update(done - bar.n)
        if done >= total:
            bar.close()

    return update


def _cache_dir(args):
    if args.no_cache:
        return None
    from tracer.pipeline import default_cache_dir

    return Path(args.cache) if args.cache else default_cache_dir()


def _caution(setup, echo) -> None:
    if max((abs(e.voltage_V) for e in setup.electrodes), default=0.0) > HIGH_VOLTAGE:
        echo(CAUTION)


def cmd_check(args, echo) -> int:
    from tracer.report import describe

    setup = _load(args.config)
    echo(describe(setup))
    _caution(setup, echo)
    return 0


def cmd_solve(args, echo) -> int:
    from tracer.pipeline import solve, write_solve_outputs

    setup = _load(args.config)
    out = _out_dir(args)
    maps = solve(setup, cache_dir=_cache_dir(args), progress=_progress(args, "solving"))
    files = write_solve_outputs(setup, maps, out)
    for name, hist in zip(maps.names, maps.history):
        echo(f"  {name:<16s} {len(hist):3d} cycles, relative residual {hist[-1]:.1e}")
    for f in files:
        echo(f"wrote {f}")
    _caution(setup, echo)
    return 0


def _stage_progress(args):
    """A ``progress(stage, done, total)`` callable with one bar per stage; None when quiet or piped."""
    if args.quiet or not sys.stderr.isatty():
        return None
    bars = {}

    def update(stage, done, total):
        if stage not in bars:
            bars[stage] = _progress(args, "solving" if stage == "solve" else f"tracing {stage}",
                                    unit="map" if stage == "solve" else "ray")
        bars[stage](done, total)

    return update


def _run_config(setup, args, out: Path, echo) -> int:
    from tracer.pipeline import run, write_run_outputs
    from tracer.report import format_summary

    result = run(setup, cache_dir=_cache_dir(args), progress=_stage_progress(args))
    for summary in result.summary().values():
        echo(format_summary(summary))
        echo("")
    for f in write_run_outputs(result, out):
        echo(f"wrote {f}")
    _caution(setup, echo)
    return 0


def cmd_run(args, echo) -> int:
    setup = _load(args.config)
    return _run_config(setup, args, _out_dir(args), echo)


def cmd_demo(args, echo) -> int:
    from tracer.config import load
    from tracer.pipeline import DEMO_CONFIG

    out = Path(args.out or "tracer-demo")
    if out.exists() and any(out.iterdir()):
        raise InputError(f"--out {out}: folder exists and is not empty; name a fresh folder")
    setup = load(DEMO_CONFIG)
    echo(f"demo: {setup.title}")
    echo(f"config: {DEMO_CONFIG}")
    code = _run_config(setup, args, out, echo)
    echo(f"demo outputs are in {out.resolve()}/ (result.h5, landings.csv, *.png)")
    return code


COMMANDS = {
    "check": (cmd_check, "validate a config and describe it"),
    "solve": (cmd_solve, "solve the basis maps and draw the equipotentials"),
    "run": (cmd_run, "solve if needed, trace every beam, write the report"),
    "demo": (cmd_demo, "run a bundled example into a fresh folder"),
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tracer", description="Electrostatic ion and electron optics: fields, rays, beams.")
    parser.add_argument("--version", action="version", version=f"tracer {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, (_, help_text) in COMMANDS.items():
        p = sub.add_parser(name, help=help_text, description=help_text)
        if name != "demo":
            p.add_argument("config", metavar="CONFIG", help="the setup, a TOML file")
        p.add_argument("--debug", action="store_true", help="show tracebacks")
        p.add_argument("--quiet", action="store_true", help="no progress output")
        if name == "demo":
            p.add_argument("--out", metavar="DIR", help="a fresh output folder (default tracer-demo/)")
        elif name != "check":
            p.add_argument("--out", metavar="DIR", help="output folder (default CONFIG-stem.out/)")
        if name != "check":
            p.add_argument("--cache", metavar="DIR", default=None,
                           help="folder of cached basis maps (default $TRACER_CACHE or ~/.cache/tracer)")
            p.add_argument("--no-cache", action="store_true", help="solve again, cache nothing")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit code."""
    from tracer.config import ConfigError

    parser = build_parser()
    args = parser.parse_args(argv)
    func = COMMANDS[args.command][0]
    echo = print
    try:
        return func(args, echo)
    except (ConfigError, InputError) as exc:
        if args.debug:
            traceback.print_exc()
        print(f"tracer: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("tracer: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # an internal fault: say so plainly, keep the details for --debug
        if args.debug:
            traceback.print_exc()
        print(f"tracer: internal fault: {type(exc).__name__}: {exc} (run with --debug for details)",
              file=sys.stderr)
        return 1
