"""Tests of grouping electrodes by waveform: static + sum_k w_k(t) M_k equals BasisMaps.combine
with every electrode's voltage at t (the potential is linear in the voltages: superposition)."""

from dataclasses import replace

import numpy as np
import pytest

from tracer import groups
from tracer.fieldmap import BasisMaps
from tracer.groups import group_maps
from tracer.waveforms import Pulse, Sinusoid, Table, Waveform

NAMES = ("repeller", "grid", "ring", "cap_a", "cap_b", "lens")


def random_basis(seed=1, shape=(9, 7)):
    """Basis maps with random Hermite data (combination is linear algebra on the node data, so
    random data test it as well as solved maps do)."""
    rng = np.random.default_rng(seed)
    herm = rng.normal(size=(len(NAMES), 4) + shape)
    return BasisMaps(None, None, None, NAMES, (0.0, -100.0, 0.0, 0.0, 0.0, 350.0), None, herm, (),
                     "")


RF = Waveform(sinusoids=(Sinusoid(800.0, 1e6, 0.2),))
DRIVE = {
    "repeller": Waveform(dc_V=100.0, pulses=(Pulse(2000.0, 250e-9, rise_s=0.0, low_V=50.0),)),
    "ring": Waveform(dc_V=-3.0, sinusoids=RF.sinusoids),      # the RF on a DC offset
    "cap_a": RF.negated(),                                    # the opposite phase
    "cap_b": Waveform(dc_V=12.0, sinusoids=RF.sinusoids),
    "lens": Waveform(table=Table((0.0, 1e-6, 2e-6), (350.0, 400.0, 380.0))),
}
TIMES = np.r_[np.linspace(-0.5e-6, 3e-6, 37), 250e-9, 1e-6, 2e-6]


def test_grouped_field_equals_the_combined_field_at_every_time():
    """Grouped maps at t equal combine() with the voltages at t to round-off, and those voltages
    are each electrode's own waveform at t."""
    basis = random_basis()
    g = group_maps(basis, DRIVE)
    scale = np.abs(basis.hermite).max() * 4000.0
    for t in TIMES:
        volts = g.voltages(t)
        for name, v in zip(NAMES, volts):
            d = DRIVE.get(name, dict(zip(NAMES, basis.voltages))[name])
            own = d.value(t) if isinstance(d, Waveform) else d
            assert v == pytest.approx(own, rel=0, abs=1e-12 * 4000.0)
        ref = basis.combine(dict(zip(NAMES, volts)))
        got = g.at(t)
        assert np.abs(got.hermite - ref.hermite).max() < 1e-14 * scale
        assert got.voltages == volts


def test_shared_and_opposite_waveforms_share_one_map():
    """Three electrodes carrying the same RF (one with the opposite sign, two on DC offsets) make
    one group; the pulse and the table one each; the grid, a constant, none."""
    g = group_maps(random_basis(), DRIVE)
    assert len(g.waveforms) == 3 and g.driven.shape[0] == 3
    k = g.group[NAMES.index("ring")]
    assert [g.group[NAMES.index(n)] for n in ("cap_a", "cap_b")] == [k, k]
    assert [g.sign[NAMES.index(n)] for n in ("ring", "cap_a", "cap_b")] == [1.0, -1.0, 1.0]
    assert g.group[NAMES.index("grid")] == -1
    assert g.offsets[NAMES.index("cap_b")] == 12.0 and g.offsets[NAMES.index("repeller")] == 150.0
    herm = random_basis().hermite
    assert np.array_equal(g.driven[k], herm[2] - herm[3] + herm[4])
    assert g.arrays.max_step_s == pytest.approx(1e-6 / 16, rel=1e-6, abs=0)


def test_all_constant_is_the_combined_map_bit_for_bit():
    """With no varying voltage the static map is combine()'s, bit for bit (the same weighted sum),
    and there are no groups."""
    basis = random_basis(3)
    drive = {"grid": -250.0, "ring": Waveform(dc_V=40.0),
             "lens": Waveform(pulses=(Pulse(7.0, 1e-6, low_V=7.0),))}
    g = group_maps(basis, drive)
    ref = basis.combine({"grid": -250.0, "ring": 40.0, "lens": 7.0})
    assert g.waveforms == () and g.driven.shape[0] == 0
    assert np.array_equal(g.at(1.3e-6).hermite, ref.hermite)
    assert np.array_equal(g.static, ref.hermite)


def test_bad_drive():
    """An unknown electrode and a drive that is neither volts nor a Waveform are refused."""
    basis = random_basis()
    with pytest.raises(ValueError, match="unknown electrode 'rign'"):
        group_maps(basis, {"rign": 1.0})
    with pytest.raises(TypeError, match="'ring': expected volts or a Waveform, got str"):
        group_maps(basis, {"ring": "1 kV"})


def test_grouped_maps_of_an_earlier_set_are_reused_where_they_are_the_same(monkeypatch):
    """A set that changes only waveform parameters keeps the static and group maps of the set
    before; a new DC part rebuilds the static map alone; a changed grouping the group maps; other
    basis maps nothing.  Every result equals a fresh build bit for bit."""
    basis = random_basis()
    builds = []
    summed = groups.summed
    monkeypatch.setattr(groups, "summed", lambda w, h: builds.append(w.ndim) or summed(w, h))
    first = group_maps(basis, DRIVE)
    assert builds == [1, 2]                                    # the static map, the group maps
    later_pulse = (replace(DRIVE["repeller"].pulses[0], delay_s=300e-9),)
    cases = [  # (drive, builds it needs with the first set's maps at hand)
        (DRIVE | {"repeller": replace(DRIVE["repeller"], pulses=later_pulse)}, []),
        (DRIVE | {"ring": replace(DRIVE["ring"], dc_V=7.0)}, [1]),
        (DRIVE | {"cap_b": Waveform(dc_V=12.0, sinusoids=(Sinusoid(500.0, 1e6, 0.2),))}, [2]),
    ]
    for drive, needs in cases:
        del builds[:]
        again = group_maps(basis, drive, like=first)
        assert builds == needs
        fresh = group_maps(basis, drive)
        for key in ("static", "driven"):
            assert getattr(again, key).tobytes() == getattr(fresh, key).tobytes()
        assert again.waveforms == fresh.waveforms and again.group == fresh.group
    del builds[:]
    group_maps(random_basis(seed=2), DRIVE, like=first)
    assert builds == [1, 2]
