"""Work that cannot fit in memory is refused before any work (tracer.footprint): one line naming
the key, the estimate and what would fit, exit code 2, nothing solved or written; and what real
work needs is admitted."""

import dataclasses

import pytest

from test_bad_input import TRAP, assert_refused
from tracer import footprint, load
from tracer.cli import main
from tracer.config import loads
from tracer.pipeline import CONFIGS
from tracer.schema import ConfigError

SCAN = "\n[scan]\ncap_in = [0.0, 100.0, 100000]\nring = [0.0, 1.0, 100000]\ncap_out = [0.0, 10.0, 100000]\n"


@pytest.fixture
def cache(tmp_path, monkeypatch):
    path = tmp_path / "cache"
    monkeypatch.setenv("TRACER_CACHE", str(path))
    return path


@pytest.mark.parametrize("text, options, key, fragment", [
    (TRAP + SCAN, [], "scan", "1,000,000,000,000,000 voltage sets need about"),
    (TRAP + "\n[scan]\ncap_in = [0.0, 100.0, 3]\n", ["--workers", "10000000"], "--workers",
     "10000000 worker processes need about"),
], ids=["scan-sets", "workers"])
def test_a_scan_that_cannot_fit_is_refused_before_any_work(tmp_path, cache, capsys, text, options, key, fragment):
    config = tmp_path / "big.toml"
    config.write_text(text)
    out = tmp_path / "out"
    code = main(["scan", str(config), "--out", str(out), "--quiet", *options])
    captured = capsys.readouterr()
    assert_refused(code, captured.out, captured.err, key, fragment)
    assert "GB of memory" in captured.err and "at most about" in captured.err
    assert not out.exists() and not cache.exists()


def test_a_gun_of_a_billion_rays_is_refused():
    setup = load(CONFIGS / "pierce_gun.toml")
    footprint.check(setup, beams=False, gun=True)          # the bundled gun fits
    huge = dataclasses.replace(setup, gun=dataclasses.replace(setup.gun, rays=10**9))
    with pytest.raises(ConfigError) as error:
        footprint.check(huge, beams=False, gun=True)
    assert error.value.key == "gun.rays" and "1,000,000,000 rays with their paths need about" in str(error.value)


def test_what_real_work_needs_is_admitted(monkeypatch):
    """A million rays with the default 50 kept paths and three planes, or a scan of 10,000 sets on
    8 workers, fit in 8 GB (half of a 16 GB workstation; common practice for such work)."""
    monkeypatch.setattr(footprint, "memory_limit", lambda: 8e9)
    setup = loads(TRAP.replace("count = 200", "count = 1000000") + "\n[scan]\ncap_in = [0.0, 100.0, 100]\n"
                  "ring = [0.0, 1.0, 100]\n")
    footprint.check(setup)
    footprint.check(dataclasses.replace(setup, beams=setup.beams[:2]), scan=True, workers=8)
    with pytest.raises(ConfigError, match=r"^beam\[2\]\.count: "):    # and refused with 2 GB
        monkeypatch.setattr(footprint, "memory_limit", lambda: 2e9)
        footprint.check(setup)


def test_crossings_are_refused_only_when_they_cannot_be_kept(monkeypatch):
    """A ray oscillating in a trap may cross a plane a hundred thousand times: the second pass's
    room for it and every crossing's row are counted against the limit (here 10 MB)."""
    import numpy as np

    monkeypatch.setattr(footprint, "memory_limit", lambda: 1e7)
    footprint.check_crossings(np.array([0, 20, 3] * 100), 16, 80)     # about 1.3 MB
    with pytest.raises(ConfigError) as error:                          # about 59 MB
        footprint.check_crossings(np.array([0, 100_000, 3]), 16, 80)
    assert error.value.key == "plane"
    assert "crossed the planes 100,003 times (one ray 100,000 times)" in str(error.value)
    assert "needs about 0.0592 GB, more than 0.01 GB" in str(error.value)
