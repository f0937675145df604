"""The user's guide names every config key the reader accepts (docs/reference.md), so it cannot
drift from the schema unseen."""

import re
from pathlib import Path

import pytest

from tracer import config
from tracer.pipeline import CONFIGS

GUIDE = Path(__file__).resolve().parents[1] / "docs" / "reference.md"


def accepted_keys(monkeypatch):
    """Every key of every table the config reader checked while reading the bundled examples,
    except the tables whose keys are the user's own names (electrodes in [scan], [tune] vary)."""
    seen = set()
    table = config._Table.__init__

    def record(self, value, path, keys, what="unknown key", hints=None, shown=None):
        if what == "unknown key" or what == "unknown top-level key":
            seen.update(keys)
        return table(self, value, path, keys, what, hints, shown)

    monkeypatch.setattr(config._Table, "__init__", record)
    for path in sorted(CONFIGS.glob("*.toml")):
        config.load(path)
    return seen


def test_every_key_the_reader_accepts_is_in_the_guide(monkeypatch):
    keys = accepted_keys(monkeypatch)
    assert {"energy_sigma_eV", "sigma_mm", "edges", "rect", "keep_paths"} <= keys   # the walk saw the sections
    text = GUIDE.read_text(encoding="utf-8")
    missing = sorted(k for k in keys if not re.search(rf"(?<![\w.]){re.escape(k)}(?!\w)", text))
    assert not missing, f"docs/reference.md does not name {missing}"


@pytest.mark.parametrize("doc", ["README.md", "docs/reference.md"])
def test_the_guide_names_no_refused_key(doc):
    """A key the reader refuses (energy_spread_eV) is named only as refused."""
    text = (Path(__file__).resolve().parents[1] / doc).read_text(encoding="utf-8")
    for line in text.splitlines():
        if "energy_spread_eV" in line:
            assert "refused" in line or "σ or FWHM" in line, line


def test_every_exit_code_and_run_file_is_in_the_guide():
    """The exit codes the command line documents (tracer/cli.py) and the run's manifest are named
    in docs/reference.md's exit-code line and file list."""
    from tracer import cli
    from tracer.pipeline import RUN_FILES

    codes = re.findall(r"(?<![\w.])(\d+) [a-z]", cli.__doc__.split("Exit codes:")[1].split("\n\n")[0])
    assert {"0", "1", "2", "130"} <= set(codes)
    text = GUIDE.read_text(encoding="utf-8")
    line = " ".join(text.split("Exit codes:")[1].split("\n\n")[0].split())
    missing = [c for c in codes if not re.search(rf"(?<![\w.]){c} [a-z]", line)]
    assert not missing, f"docs/reference.md's exit codes lack {missing}"
    assert f"`{RUN_FILES}`" in text
