"""The command line: parsing arguments and printing, nothing else.

Exit codes: 0 success, 2 bad input (one line on stderr, a traceback only with
``--debug``), 1 an internal fault or a full disk (one line naming the file not written), 3 a
scan's cluster lost its workers (the finished rows are kept), 130 interrupted (Ctrl-C or
SIGTERM), 141 the reader of the output went away.

A command that writes into an output folder holds a lock on it (``flock`` on the folder) for its
whole run: a second process on the same folder stops at once with exit 2, and the first step
under the lock cleans up after writers that were killed (:func:`tracer.store.atomic.locked_folder`).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
import traceback
import warnings
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


WRITES_OUT = ("solve", "run", "scan", "tune", "optics", "gun")
"""The commands that write into ``--out`` and lock it (``demo`` writes only into a fresh folder)."""


def _lock_out(args, stack) -> None:
    """Lock the output folder of a command that writes one, for as long as ``stack`` is open."""
    if args.command not in WRITES_OUT:
        return
    from tracer.pipeline import RUN_FILES
    from tracer.store.atomic import FolderBusy, locked_folder

    out = _out_dir(args)
    try:
        stack.enter_context(locked_folder(out, RUN_FILES, reenter=True))
    except FolderBusy:
        raise InputError(f"--out {out}: another tracer process is writing to this folder; "
                         "wait for it to end or choose another --out") from None
    except OSError as exc:
        raise InputError(f"--out {out}: cannot write there ({exc.strerror or exc})") from None


def _one_line_warnings(stack) -> None:
    """Show tracer's own warnings (their text starts with ``WARNING: ``) as that one line on
    stderr, others as Python does, while ``stack`` is open."""
    shown = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if str(message).startswith("WARNING: "):
            print(message, file=sys.stderr if file is None else file)
        else:
            shown(message, category, filename, lineno, file, line)

    warnings.showwarning = show
    stack.callback(setattr, warnings, "showwarning", shown)


def _load(args):
    """The setup of ``args.config``; on a terminal, the first-compile notice once it is read."""
    from tracer.config import load

    path = args.config
    if not Path(path).is_file():
        raise InputError(f"{path}: no such config file")
    setup = load(path)
    _compile_notice(args)
    return setup


def _compile_notice(args) -> None:
    """One line on a terminal when the kernels are still to compile (the first run of an install).

    Printed after the config is read, so a refused config is never preceded by it, and only where
    progress bars are drawn (not with --quiet, not when stderr is piped)."""
    if args.command in NO_KERNELS or args.quiet or not sys.stderr.isatty():
        return
    from tracer.warmup import notice

    line = notice()
    if line:
        print(line, file=sys.stderr, flush=True)


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


def _caution(voltages, echo) -> None:
    """The high-voltage caution when any of these voltages exceeds 1 kV."""
    if max((abs(float(v)) for v in voltages), default=0.0) > HIGH_VOLTAGE:
        echo(CAUTION)


def _volts(setup):
    """The setup's electrode voltages (a bound on each waveform's magnitude, ``Waveform.peak_V``)."""
    return [e.voltage_V if e.waveform is None else e.waveform.peak_V for e in setup.electrodes]


def cmd_check(args, echo) -> int:
    from tracer.report import describe

    setup = _load(args)
    echo(describe(setup))
    _caution(_volts(setup), echo)
    return 0


def cmd_solve(args, echo) -> int:
    from tracer.pipeline import solve, write_solve_outputs

    setup = _load(args)
    out = _out_dir(args)
    maps = solve(setup, cache_dir=_cache_dir(args), progress=_progress(args, "solving"))
    files = write_solve_outputs(setup, maps, out)
    for name, hist in zip(maps.names, maps.history):
        echo(f"  {name:<16s} {len(hist):3d} cycles, relative residual {hist[-1]:.1e}")
    for f in files:
        echo(f"wrote {f}")
    _caution(_volts(setup), echo)
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


def _run_config(setup, config, args, out: Path, echo) -> int:
    from tracer import footprint
    from tracer.pipeline import run, solve, with_grids, with_rays, write_run_outputs
    from tracer.report import format_summary
    from tracer.warmup import rays_beside

    if args.rays is not None and args.rays < 1:
        raise InputError(f"--rays: {args.rays} must be a positive number of rays")
    setup = with_grids(with_rays(setup, args.rays), args.grids)
    footprint.check(setup)
    progress = _stage_progress(args)
    with rays_beside(config):     # on a first run, the ray kernel compiles beside the solve
        maps = solve(setup, cache_dir=_cache_dir(args),
                     progress=None if progress is None else lambda done, total: progress("solve", done, total))
    result = run(setup, maps=maps, cache_dir=_cache_dir(args), progress=progress)
    for summary in result.summary().values():
        echo(format_summary(summary))
        echo("")
    for f in write_run_outputs(result, out):
        echo(f"wrote {f}")
    _caution(_volts(setup), echo)
    return 0


def cmd_run(args, echo) -> int:
    setup = _load(args)
    if not setup.beams:
        what = "; tracer gun traces its [gun]" if setup.gun is not None else ""
        raise InputError(f"{args.config}: no [[beam]] to trace (give one, or use tracer solve for the "
                         f"maps alone{what})")
    return _run_config(setup, args.config, args, _out_dir(args), echo)


def cmd_demo(args, echo) -> int:
    from tracer.config import load
    from tracer.pipeline import DEMO_CONFIG, demo_folder

    out = demo_folder(args.out)
    if out is None:
        raise InputError(f"--out {args.out}: folder exists and is not empty; name a fresh folder")
    setup = load(DEMO_CONFIG)
    _compile_notice(args)
    echo(f"demo: {setup.title}")
    echo(f"config: {DEMO_CONFIG}")
    code = _run_config(setup, DEMO_CONFIG, args, out, echo)
    echo(f"demo outputs are in {out.resolve()}/ (result.h5, landings.csv, *.png)")
    return code


def cmd_gun(args, echo) -> int:
    import numpy as np

    from tracer.guns import gun
    from tracer.pipeline import RunResult, write_run_outputs
    from tracer.plot import plot_field
    from tracer.report import format_summary

    setup = _load(args)
    if setup.gun is None:
        raise InputError(f"{args.config}: no [gun] section")
    out = _out_dir(args)
    result = gun(setup, cache_dir=_cache_dir(args),
                 progress=_progress(args, "gun iterations", unit="iteration"))
    per = "A/m" if setup.domain.symmetry == "planar" else "A"
    state = "converged" if result.converged else "NOT converged"
    echo(f"{setup.title}\n  {state} after {result.iterations} iterations "
         f"(current {', '.join(f'{h:.4g}' for h in result.history['current_A'])} {per})")
    echo(f"  current {result.current_A:.5g} {per}, perveance {result.perveance_A_per_V1p5:.4g} "
         f"{per}/V^1.5 at {result.voltage_V:g} V")
    echo("  emission across the cathode:   z (mm)    r (mm)   J (A/cm^2)  limit")
    rows = result.emission
    for row in rows[np.unique(np.linspace(0, len(rows) - 1, min(len(rows), 8)).astype(int))]:
        limit = "space charge" if row["limited"] else "temperature"
        echo(f"  {'':29s}{row['z_m'] * 1e3:8.3f}  {row['r_m'] * 1e3:8.3f}  "
             f"{row['density_A_per_m2'] * 1e-4:11.4g}  {limit}")
    if result.crossover_z_m is None:
        echo("  crossover: none inside the domain")
    else:
        echo(f"  crossover at z = {result.crossover_z_m * 1e3:.3f} mm, "
             f"rms radius {result.crossover_radius_m * 1e3:.4g} mm")
    if result.run is not None:      # the emitted beam's summary, as tracer run prints it (weighted by current)
        echo("")
        echo(format_summary(result.run.summary()))
    if result.warning:
        echo(f"warning: {result.warning}")
    if result.run is None:          # nothing emitted: the field alone, to see why
        out.mkdir(parents=True, exist_ok=True)
        echo(f"wrote {plot_field(result.field, out / 'rays.png', title=setup.title)}")
    else:                           # the emitted beam's files and figures, as tracer run writes them
        for f in write_run_outputs(RunResult(setup, None, result.field, {result.run.name: result.run}), out):
            echo(f"wrote {f}")
    _caution(_volts(setup), echo)
    return 0


def cmd_show(args, echo) -> int:
    from tracer.plot import run_figures
    from tracer.report import format_summary
    from tracer.store import StoreError
    from tracer.store.result_file import read_result
    from tracer.store.trust import printable

    if not Path(args.config).is_file():
        raise InputError(f"{args.config}: no such result file")
    try:
        result = read_result(args.config)
    except StoreError as exc:
        raise InputError(str(exc)) from exc
    texts = []
    for name, summary in result.summaries.items():   # the file's text, its control characters escaped
        try:
            texts.append(printable(format_summary(summary)))
        except (KeyError, TypeError, ValueError, AttributeError, IndexError, RecursionError):
            raise InputError(f"{args.config}: the stored summary of beam {name!r} is not as tracer "
                             "writes it") from None
    echo(result.title)
    echo("")
    for text in texts:
        echo(text)
        echo("")
    out = Path(args.out) if args.out else Path(args.config).parent
    out.mkdir(parents=True, exist_ok=True)
    for f in run_figures(result.field, list(result.beams.values()), out, title=result.title):
        echo(f"wrote {f}")
    _caution(result.field.voltages, echo)
    return 0


CLUSTER_LOST = 3
"""Exit code of a scan whose cluster lost its workers (module notes)."""


def cmd_scan(args, echo) -> int:
    import contextlib

    from tracer import footprint
    from tracer.executors import ClusterError, ClusterLost, cluster_executor
    from tracer.pipeline import solve
    from tracer.measure import file_column
    from tracer.plot import plot_scan
    from tracer.scans import scan, voltage_sets
    from tracer.schema import scan_column, scan_unit
    from tracer.warmup import rays_beside

    setup = _load(args)
    if setup.scan is None:
        raise InputError(f"{args.config}: no [scan] section")
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers: {args.workers} must be at least 1")
    out = _out_dir(args)
    footprint.check(setup, scan=True, workers=None if args.scheduler else args.workers or os.cpu_count() or 1)
    voltage_sets(setup)   # a bad row of a CSV of sets is refused before any work
    with rays_beside(args.config):   # a first scan's workers then load the ray kernel compiled
        maps = solve(setup, cache_dir=_cache_dir(args), progress=_progress(args, "solving"))
    try:
        with cluster_executor(args.scheduler) if args.scheduler else contextlib.nullcontext() as executor:
            result = scan(setup, maps, executor, out=out, workers=args.workers,
                          progress=_progress(args, "scanning", unit="set"))
    except ClusterError as exc:
        raise InputError(f"--scheduler {exc}") from None
    except ClusterLost as exc:
        print(f"tracer: {exc} ({out / 'scan.csv'})", file=sys.stderr)
        return CLUSTER_LOST
    except KeyboardInterrupt:
        print(f"tracer: the finished sets are kept in {out / 'scan.csv'}; run the same command "
              "again to continue", file=sys.stderr)
        raise
    table = result.table
    for source, target in result.moved:
        whose = "this config's earlier table, resumed" if source.count(".") > 1 else "another config's table, kept"
        echo(f"moved {out / source} to {target} ({whose})")
    echo(f"{setup.title}\n  {len(table)} voltage sets of {', '.join(result.names)} "
         f"({result.resumed} from an earlier run) in {result.elapsed_s:.1f} s")
    for figure in (f for f in result.figures if f.rpartition(".")[2] == "spot_rms_m"):
        best = result.smallest(figure)
        if best is not None:
            at = ", ".join(f"{n} = {v:g} {scan_unit(n, result.coils)}" for n, v in best[1].items())
            echo(f"  smallest {file_column(figure)[0]}: {best[0] * 1e3:.4g} mm at {at}")
    for f in result.files + tuple(plot_scan(table, result.names, out, title=setup.title, coils=result.coils)):
        echo(f"wrote {f}")
    _caution(_volts(setup) + [v for n in result.names if scan_unit(n, result.coils) == "V"
                              for v in table[scan_column(n)]], echo)
    return 0


def cmd_tune(args, echo) -> int:
    from tracer.pipeline import solve
    from tracer.plot import plot_tune
    from tracer.report import figure_text
    from tracer.schema import scan_unit
    from tracer.tuning import tune
    from tracer.warmup import rays_beside

    setup = _load(args)
    if setup.tune is None:
        raise InputError(f"{args.config}: no [tune] section")
    out = _out_dir(args)
    with rays_beside(args.config):   # on a first run, the ray kernel compiles beside the solve
        maps = solve(setup, cache_dir=_cache_dir(args), progress=_progress(args, "solving"))
    result = tune(setup, maps)
    where = f" at {setup.tune.at}" if setup.tune.at else ""
    echo(f"{setup.title}\n  goal {result.goal}{where}: {figure_text(result.figure, result.value)} "
         f"after {result.evaluations} voltage sets ({result.method})")
    for name, volts in result.voltages.items():
        echo(f"  {name:<16s} {volts:12.4f} {scan_unit(name, result.coils)}")
    out.mkdir(parents=True, exist_ok=True)
    echo(f"wrote {plot_tune(result, out / 'tune.png')}")
    _caution(_volts(setup) + [v for n, v in result.voltages.items() if scan_unit(n, result.coils) == "V"], echo)
    return 0


def cmd_optics(args, echo) -> int:
    from tracer.optics import OpticsError
    from tracer.pipeline import lens, optics_error_bars, solve, with_grids
    from tracer.plot import plot_optics
    from tracer.report import format_optics

    setup = with_grids(_load(args), args.grids)
    if setup.optics is None:
        raise InputError(f"{args.config}: no [optics] table (species, energy_eV, object_z_mm)")
    maps = solve(setup, cache_dir=_cache_dir(args), progress=_progress(args, "solving"))
    try:
        props = lens(setup, maps.combine(), _cache_dir(args))
    except OpticsError as exc:
        raise InputError(f"optics: {exc}") from exc
    echo(format_optics(props, optics_error_bars(setup, props, cache_dir=_cache_dir(args))))
    out = _out_dir(args)
    out.mkdir(parents=True, exist_ok=True)
    echo(f"wrote {plot_optics(props, out / 'optics.png')}")
    _caution(_volts(setup), echo)
    return 0


def _age(seconds):
    """A duration in the largest whole unit: "40 s", "3 min", "5 h", "2 days"."""
    for unit, size in (("days", 86400), ("h", 3600), ("min", 60)):
        if seconds >= size:
            return f"{seconds / size:.0f} {unit}"
    return f"{seconds:.0f} s"


def cmd_cache(args, echo) -> int:
    import time

    from tracer.cache import ENTRY_FILES, cache_entries, clear_cache

    folder = _cache_dir(args)
    if folder is None:
        raise InputError("--no-cache: there is no cache to show")
    entries = clear_cache(folder) if args.clear else cache_entries(folder)
    total = sum(e.size_bytes for e in entries)
    counts = ", ".join(f"{sum(e.kind == kind for e in entries)} {kind} file(s)" for kind in ENTRY_FILES)
    if args.clear:
        echo(f"cache {folder}: deleted {counts}, {total / 1e6:.1f} MB")
        return 0
    echo(f"cache {folder}: {counts}, {total / 1e6:.1f} MB")
    now = time.time()
    for e in entries:
        echo(f"  {e.path.name}  {e.size_bytes / 1e6:8.1f} MB  written {_age(now - e.modified_s)} ago")
    return 0


def cmd_warmup(args, echo) -> int:
    from tracer.warmup import warmup

    echo("compiling every kernel into numba's cache (once per install)")
    warmup(echo)
    return 0


COMMANDS = {
    "check": (cmd_check, "validate a config and describe it"),
    "solve": (cmd_solve, "solve the basis maps and draw the equipotentials"),
    "run": (cmd_run, "solve if needed, trace every beam, write the report"),
    "show": (cmd_show, "print the summary of a result file and draw its pictures again"),
    "demo": (cmd_demo, "run a bundled example into a fresh folder"),
    "scan": (cmd_scan, "trace the beams at every voltage set of [scan]; resumes where it stopped"),
    "tune": (cmd_tune, "find the voltages of [tune] that best meet its goal"),
    "optics": (cmd_optics, "paraxial lens properties and aberrations on the axis"),
    "gun": (cmd_gun, "iterate a gun's emission with its space charge until the current settles"),
    "warmup": (cmd_warmup, "compile the kernels ahead, for an install script or a cluster image"),
    "cache": (cmd_cache, "show the cached basis maps and coil fields (entries, size, age); --clear deletes them"),
}

# Commands that compile no kernel before they finish (no first-compile notice).
NO_KERNELS = ("check", "show", "warmup", "cache")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tracer", description="Electrostatic ion and electron optics: fields, rays, beams.")
    parser.add_argument("--version", action="version", version=f"tracer {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, (_, help_text) in COMMANDS.items():
        p = sub.add_parser(name, help=help_text, description=help_text)
        if name == "show":
            p.add_argument("config", metavar="RESULT", help="a result.h5 file written by tracer run")
        elif name not in ("demo", "warmup", "cache"):
            p.add_argument("config", metavar="CONFIG", help="the setup, a TOML file")
        p.add_argument("--debug", action="store_true", help="show tracebacks")
        p.add_argument("--quiet", action="store_true", help="no progress output")
        if name == "demo":
            p.add_argument("--out", metavar="DIR", help="a fresh output folder (default: tracer-demo/, or the next free tracer-demo-N/)")
        elif name == "show":
            p.add_argument("--out", metavar="DIR", help="folder for the pictures (default: beside RESULT)")
        elif name == "cache":
            p.add_argument("--clear", action="store_true", help="delete the cached maps files")
        elif name not in ("check", "warmup"):
            p.add_argument("--out", metavar="DIR", help="output folder (default CONFIG-stem.out/)")
        if name not in ("check", "show", "warmup"):
            p.add_argument("--cache", metavar="DIR", default=None,
                           help="folder of cached basis maps (default $TRACER_CACHE or ~/.cache/tracer)")
            p.add_argument("--no-cache", action="store_true", help="solve again, cache nothing")
        if name in ("run", "demo"):
            p.add_argument("--rays", type=int, metavar="N", help="trace at most N rays per beam")
        if name in ("run", "demo", "optics"):
            p.add_argument("--grids", type=int, choices=(1, 2, 3), metavar="N",
                           help="grid error bars: 1 none, 2 cells h and 2h, 3 a third grid to observe "
                                "the order (default: the config's [grid_error] grids, else 2)")
        if name == "scan":
            p.add_argument("--workers", type=int, metavar="N",
                           help="local worker processes (default: the CPU count; 1: in this process)")
            p.add_argument("--scheduler", metavar="ADDRESS",
                           help="run the sets on a dask.distributed scheduler (the cluster extra: pip install 'dask[distributed]')")
    return parser


def _interrupted() -> int:
    """A handled Ctrl-C or SIGTERM: one line, exit code 130."""
    from tracer.interrupts import forget_unhandled

    forget_unhandled()
    print("tracer: interrupted", file=sys.stderr)
    return 130


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit code."""
    from tracer.interrupts import by_interrupt, stopping

    try:
        with contextlib.ExitStack() as stack:
            stack.enter_context(stopping())   # SIGTERM stops as Ctrl-C does (exit 130), from here on
            from tracer.schema import ConfigError
            from tracer.store.atomic import no_space

            for stream in (sys.stdout, sys.stderr):   # a terminal that cannot show a character gets an escape
                if hasattr(stream, "reconfigure"):
                    stream.reconfigure(errors="backslashreplace")
            parser = build_parser()
            args = parser.parse_args(argv)
            func = COMMANDS[args.command][0]
            _one_line_warnings(stack)
            _lock_out(args, stack)
            code = func(args, print)
        sys.stdout.flush()  # a closed pipe shows here, not at the interpreter's exit
        return code
    except KeyboardInterrupt:   # first: a Ctrl-C in the imports above leaves ConfigError unset
        return _interrupted()
    except BrokenPipeError:  # e.g. ``tracer run ... | head``: stop quietly, as pipes expect
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141
    except (ConfigError, InputError) as exc:
        if args.debug:
            traceback.print_exc()
        print(f"tracer: error: {exc}", file=sys.stderr)
        return 2
    except Exception as exc:  # an internal fault: say so plainly, keep the details for --debug
        if by_interrupt(exc):  # numba's parallel kernels hand a Ctrl-C back inside a SystemError
            return _interrupted()
        if args.debug:
            traceback.print_exc()
        if no_space(exc):      # a full disk: the writers name the file; what was there is kept
            print(f"tracer: error: no space left on the device: {exc.filename or 'an output file'} was not "
                  "written; the files there before are kept (free some space and run again)", file=sys.stderr)
            return 1
        print(f"tracer: internal fault: {type(exc).__name__}: {exc} (run with --debug for details)",
              file=sys.stderr)
        return 1
