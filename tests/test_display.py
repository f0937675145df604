"""How results look from Python: a short repr and a small HTML table, whatever the data's size."""

import dataclasses

import numpy as np
import pytest

import tracer
from tracer.guns import GunResult
from tracer.tuning import TuneResult

from test_scans import lens_text

REPR_LIMIT = 2000
"""Bytes a repr may take: a few lines in a notebook (the run's repr was 6 MB with its kept paths)."""


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    setup = tracer.loads(lens_text(count=200))
    setup = dataclasses.replace(setup, trace=dataclasses.replace(setup.trace, keep_paths=200))
    maps = tracer.solve(setup)
    result = tracer.run(setup, maps=maps)
    lens = tracer.paraxial(result.field, species="p+", energy_eV=1000.0)
    scanned = tracer.scan(setup, maps, workers=1, out=tmp_path_factory.mktemp("scan"))
    return setup, maps, result, lens, scanned


def _shown(obj):
    text, page = repr(obj), obj._repr_html_()
    assert len(text.encode()) < REPR_LIMIT, text[:300]
    assert "\n" not in text and text.startswith(type(obj).__name__ + "(")
    return text, page


def test_every_public_result_has_a_short_repr_and_an_html_table(results):
    setup, maps, result, lens, scanned = results
    run = result.beams["protons"]
    assert len(run.paths) == 200  # the kept paths that made the old repr megabytes long

    text, page = _shown(result)
    assert repr(setup.title) in text and "200 rays of p+" in text
    assert page.count("<img src='data:image/png;base64,") == 1  # the rays over the equipotentials

    text, page = _shown(run)
    assert "rays=200" in text and "paths kept=200" in text and "ledger worst=" in text
    assert "<table>" in page and "<img" not in page

    text, _ = _shown(maps)
    assert f"electrodes={len(maps.names)}" in text and maps.geometry_hash[:12] in text
    assert "lens 700 V" in text  # the setup's voltage of the lens tube

    text, _ = _shown(maps.combine({"lens": 650.0}))
    assert "lens 650 V" in text

    text, _ = _shown(lens)
    assert f"f_image={lens.f_image_m * 1e3:.4g} mm" in text

    text, _ = _shown(scanned)
    assert f"sets={len(scanned.table)}" in text and "scan.csv" in text


def test_repr_does_not_grow_with_the_data():
    """Results built with large arrays (a long tuning history, a fine gun) keep the same repr size."""
    points = np.zeros(100_000, dtype=[("lens_V", "f8"), ("value", "f8"), ("objective", "f8")])
    tuned = TuneResult({"lens": 700.0}, 1e-4, 1e-4, "smallest_spot", "image_rms_radius_m", points, "Nelder-Mead")
    text, _ = _shown(tuned)
    assert "evaluations=100000" in text and "lens 700 V" in text
    gun = GunResult(current_A=1e-3, perveance_A_per_V1p5=1e-6, voltage_V=1e4, iterations=12,
                    converged=False, history=np.zeros(12), field=None,
                    space_charge_V=np.zeros((2000, 1000)), run=None, emission=np.zeros(50_000),
                    crossover_z_m=None, crossover_radius_m=None, warning="did not converge")
    text, page = _shown(gun)
    assert "crossover_z=none" in text and "converged=False" in text and "warning=did not converge" in text
    assert "<img" not in page  # no rays to draw
