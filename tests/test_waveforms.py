"""Tests of the waveform model: its checks, its CSV tables and its numba evaluation against
direct formulas (numpy.interp for tables, the trapezoid written with clips for pulses)."""

import math

import numpy as np
import pytest

from tracer import waveforms as wf
from tracer.waveforms import Pulse, Sinusoid, Table, Waveform, WaveformError, read_table


def trapezoid(t, p):
    """A single pulse written directly: low + (high - low) (clip of the rise - clip of the fall)."""
    t = np.asarray(t, dtype=float)
    up = np.clip((t - p.delay_s) / p.rise_s, 0, 1) if p.rise_s else (t >= p.delay_s) * 1.0
    off = p.delay_s + p.rise_s + p.width_s
    down = np.clip((t - off) / p.fall_s, 0, 1) if p.fall_s else (t >= off) * 1.0
    return p.low_V + (p.high_V - p.low_V) * (up - down)


def direct(t, w):
    """A waveform evaluated part by part without the kernel arrays (numpy.interp holds the end
    values outside the table, as the model says)."""
    v = w.dc_V + sum(s.amplitude_V * np.cos(2 * np.pi * s.frequency_Hz * t + s.phase_rad)
                     for s in w.sinusoids)
    for p in w.pulses:
        for n in range(p.count):
            v = v + trapezoid(t, Pulse(p.high_V - p.low_V, p.delay_s + n * (p.period_s if n else 0),
                                       p.rise_s, p.width_s, p.fall_s))
            if n == 0:
                v = v + p.low_V
    if w.table is not None:
        v = v + np.interp(t, w.table.time_s, w.table.voltage_V)
    return v


EXAMPLE = Waveform(
    dc_V=15.0,
    sinusoids=(Sinusoid(40.0, 1.1e6, 0.4), Sinusoid(-7.0, 3.3e6)),
    pulses=(Pulse(2000.0, 300e-9, rise_s=0.0, width_s=1e-6, fall_s=50e-9, low_V=-5.0),
            Pulse(100.0, 1.2e-6, rise_s=20e-9, width_s=0.0, fall_s=20e-9, period_s=200e-9, count=3)),
    table=Table((0.0, 0.4e-6, 2.0e-6), (0.0, 30.0, -12.0)))


def test_value_matches_the_parts_written_out():
    """The kernel's value equals the sum of the parts evaluated directly, off the corners and on
    them (both from the right: a jump has happened at its own time), to round-off."""
    a = EXAMPLE.arrays()
    t = np.r_[np.linspace(-1e-6, 3e-6, 2001), a.corner]
    got = EXAMPLE.value(t)
    assert np.abs(got - direct(t, EXAMPLE)).max() < 1e-12 * 2000


def test_rate_is_the_derivative_of_the_value():
    """dw/dt against a central difference of w between corners (h = 0.1 ns, error O(h^2 w''')),
    and the sinusoid rate -A omega sin written out."""
    a = EXAMPLE.arrays()
    t = np.linspace(-1e-6, 3e-6, 997)
    h = 1e-10
    clear = np.array([np.abs(a.corner - x).min() > 2 * h for x in t])
    diff = (EXAMPLE.value(t + h) - EXAMPLE.value(t - h)) / (2 * h)
    scale = 40.0 * 2 * np.pi * 3.3e6
    assert np.abs(EXAMPLE.rate(t) - diff)[clear].max() < 1e-5 * scale
    s = Waveform(sinusoids=(Sinusoid(3.0, 2e6, 1.0),))
    assert np.allclose(s.rate(t), -3.0 * 2 * np.pi * 2e6 * np.sin(2 * np.pi * 2e6 * t + 1.0),
                       rtol=0, atol=1e-14 * 3.0 * 2 * np.pi * 2e6)


LONG = np.finfo(np.longdouble).eps < 1e-18    # x86's 80-bit long double: 64-bit mantissa


@pytest.mark.skipif(not LONG, reason="needs numpy's long double with a 64-bit mantissa")
def test_a_turn_keeps_cosine_and_sine_to_round_off():
    """waveforms.turn (cos and sin of a + d from those of a, cos d and sin d by their Taylor
    series) against numpy's cosine and sine in long double of the exact a + d (numpy, 64-bit
    mantissa), over angles a of a trace's whole clock (a thousand RF periods and more) and every
    turn a step can take (0 <= d <= MAX_TURN): within 6 units of 2^-53 (measured 5.2; 2.0 for
    |a| < 4 pi), where the cosine of the double nearest a + d is off by up to ulp(a + d) / 2 from
    the sum's rounding alone (measured here: thousands of units); beyond the series' range it
    fails."""
    rng = np.random.default_rng(21)
    a = rng.uniform(-1e4, 1e4, 200_000)
    d = rng.uniform(0.0, wf.MAX_TURN, a.size)
    d[:3] = 0.0, wf.MAX_TURN, wf.MAX_TURN * (1 - 1e-16)
    c, s = turns(a, d)
    exact = a.astype(np.longdouble) + d.astype(np.longdouble)
    unit = 2.0 ** -53
    assert float(np.abs(c - np.cos(exact)).max()) < 6 * unit
    assert float(np.abs(s - np.sin(exact)).max()) < 6 * unit
    assert float(np.abs(np.cos(a + d) - np.cos(exact)).max()) > 1e3 * unit
    c, s = turns(a[:1000], 3 * wf.MAX_TURN + 0 * a[:1000])
    assert float(np.abs(c - np.cos(a[:1000].astype(np.longdouble) + 3 * wf.MAX_TURN)).max()) > 1e3 * unit


def turns(a, d):
    """waveforms.turn at angles a (cos a and sin a from numpy) through turns d."""
    out = [wf.turn(math.cos(x), math.sin(x), y) for x, y in zip(a, d)]
    return np.array([o[0] for o in out]), np.array([o[1] for o in out])


def test_corners_pieces_and_jumps():
    """Corners are the switching times, the ends of rises and falls and the table points, merged
    and sorted; a zero rise is a jump of high - low, a ramp is none; a piece's line continued to
    its end gives the value just before the corner."""
    a = EXAMPLE.arrays()
    expect = {300e-9, 1.3e-6, 1.35e-6, 0.0, 0.4e-6, 2.0e-6}
    for n in range(3):
        on = 1.2e-6 + n * 200e-9
        expect |= {on, on + 20e-9, on + 40e-9}
    assert np.allclose(a.corner, sorted(expect), rtol=1e-15, atol=0)
    assert wf.jump_at(a, 0, 300e-9) == 2005.0             # -5 V -> 2000 V at once
    assert wf.jump_at(a, 0, 1.3e-6) == 0.0                # a 50 ns fall starts: no jump
    assert wf.jump_at(a, 0, 1.2e-6) == 0.0 and wf.jump_at(a, 0, 1.31e-6) == 0.0
    assert np.count_nonzero(a.jump) == 1
    for m in range(1, a.corner.size):
        t = a.corner[m]
        left = wf.value(a, 0, m, t)                         # piece m ends at corner m
        # 10 zs before the corner: the steepest slope (40 V/ns) moves w by < 1e-6 V
        assert left == pytest.approx(direct(t - 1e-17, EXAMPLE), abs=1e-6)
        assert wf.piece(a, t) == m + 1
        assert wf.next_corner(a, a.corner[m - 1]) == t
        assert wf.value(a, 0, m + 1, t) - left == pytest.approx(wf.jump_at(a, 0, t), abs=1e-9)
    assert wf.next_corner(a, a.corner[-1]) == math.inf
    assert wf.next_corner(a, -1.0) == a.corner[0]


def test_fall_time_zero_is_a_jump_and_a_held_pulse_has_no_fall():
    """A zero fall time drops at once; width inf keeps the pulse on; before its first point a table
    holds the first value and after its last the last (no extrapolation)."""
    w = Waveform(pulses=(Pulse(10.0, 1e-6, width_s=1e-6),))
    a = w.arrays()
    assert list(a.corner) == [1e-6, 2e-6]
    assert wf.jump_at(a, 0, 2e-6) == -10.0
    held = Waveform(pulses=(Pulse(10.0, 1e-6, rise_s=1e-7),))
    assert list(held.arrays().corner) == [1e-6, 1.1e-6]
    assert list(held.value([0.0, 1.05e-6, 5.0])) == pytest.approx([0.0, 5.0, 10.0])
    tab = Waveform(table=Table((1e-6, 2e-6), (3.0, 5.0)))
    assert list(tab.value([-1.0, 1.5e-6, 1.0])) == pytest.approx([3.0, 4.0, 5.0])
    assert list(tab.rate([-1.0, 1.5e-6, 1.0])) == pytest.approx([0.0, 2e6, 0.0])


def test_coinciding_corners_of_two_pulses_merge():
    """A triangle wave (rise + fall = period, zero width) has one corner per peak and trough; two
    pulses that switch at the same time give one corner with the summed jump."""
    tri = Pulse(1.0, 0.0, rise_s=1e-6, width_s=0.0, fall_s=1e-6, period_s=2e-6, count=3)
    k = tri.knots()
    assert list(k[:, 0]) == pytest.approx([0, 1e-6, 2e-6, 3e-6, 4e-6, 5e-6, 6e-6])
    both = Waveform(pulses=(Pulse(3.0, 1e-6), Pulse(-1.0, 1e-6, width_s=1e-6)))
    a = both.arrays()
    assert list(a.corner) == [1e-6, 2e-6] and wf.jump_at(a, 0, 1e-6) == 2.0


def test_several_waveforms_share_one_list_of_corners():
    """Arrays of K waveforms: the corners of all merged; each waveform's jump only at its own
    switch; each evaluates as it does alone."""
    w1 = Waveform(pulses=(Pulse(5.0, 1e-6),))
    w2 = Waveform(dc_V=1.0, sinusoids=(Sinusoid(2.0, 1e6),), table=Table((0.0, 2e-6), (0.0, 4.0)))
    a = wf.wave_arrays([w1, w2])
    assert list(a.corner) == [0.0, 1e-6, 2e-6]
    assert wf.jump_at(a, 0, 1e-6) == 5.0 and wf.jump_at(a, 1, 1e-6) == 0.0
    t = np.linspace(-1e-6, 3e-6, 101)
    for k, w in enumerate((w1, w2)):
        assert np.allclose(wf.sample(a, k, t)[0], w.value(t), rtol=0, atol=1e-13)
    assert a.max_step_s == pytest.approx(1e-6 / wf.STEPS_PER_PERIOD, rel=1e-6, abs=0)
    empty = wf.wave_arrays([])
    assert empty.level.shape == (0, 1) and wf.next_corner(empty, 0.0) == math.inf


def test_max_step_resolves_the_fastest_sinusoid():
    """The step bound is the shortest period / STEPS_PER_PERIOD; without sinusoids, none."""
    w = Waveform(sinusoids=(Sinusoid(1.0, 1e6), Sinusoid(1.0, 4e6)))
    assert w.max_step_s == pytest.approx(0.25e-6 / wf.STEPS_PER_PERIOD, rel=1e-6, abs=0)
    assert Waveform(pulses=(Pulse(1.0, 0.0),)).max_step_s == math.inf


def test_split_negate_and_peak():
    """w = offset + varying part; the varying part is zero before its first corner and equal
    descriptions compare equal; negation is exact; the peak bounds |w|."""
    offset, var = EXAMPLE.split()
    assert offset == 15.0 - 5.0 + 0.0
    t = np.linspace(-1e-6, 3e-6, 501)
    assert np.allclose(offset + var.value(t), EXAMPLE.value(t), rtol=0, atol=1e-12)
    assert var.dc_V == 0.0 and var.pulses[0].low_V == 0.0
    assert Waveform(dc_V=3.0, pulses=(Pulse(2.0, 1e-6, low_V=2.0),)).split() == (5.0, None)
    neg = EXAMPLE.negated()
    assert np.array_equal(neg.value(t), -EXAMPLE.value(t))
    assert neg.negated() == EXAMPLE and hash(neg.negated()) == hash(EXAMPLE)
    assert np.abs(EXAMPLE.value(t)).max() <= EXAMPLE.peak_V
    assert Table((0, 1), (1, 2), source="a.csv") == Table((0, 1), (1, 2))


@pytest.mark.parametrize("make, field", [
    (lambda: Sinusoid(1.0, 0.0), "frequency_Hz"),
    (lambda: Sinusoid(math.nan, 1.0), "amplitude_V"),
    (lambda: Sinusoid(1.0, 1.0, math.inf), "phase_rad"),
    (lambda: Pulse(1.0, 0.0, rise_s=-1e-9), "rise_s"),
    (lambda: Pulse(1.0, 0.0, fall_s=math.inf), "fall_s"),
    (lambda: Pulse(1.0, 0.0, width_s=-1.0), "width_s"),
    (lambda: Pulse("high", 0.0), "high_V"),
    (lambda: Pulse(1.0, math.nan), "delay_s"),
    (lambda: Pulse(1.0, 0.0, count=0), "count"),
    (lambda: Pulse(1.0, 0.0, count=2.5), "count"),
    (lambda: Pulse(1.0, 0.0, count=2), "width_s"),
    (lambda: Pulse(1.0, 0.0, width_s=1.0, count=2), "period_s"),
    (lambda: Pulse(1.0, 0.0, width_s=1.0, rise_s=0.5, period_s=1.2, count=2), "period_s"),
    (lambda: Pulse(1.0, 0.0, width_s=1.0, period_s=2.0, count=10**6), "count"),
    (lambda: Table((0.0,), (1.0,)), "time_s"),
    (lambda: Table((0.0, 1.0), (1.0,)), "voltage_V"),
    (lambda: Table((0.0, 1.0, 1.0), (1.0, 2.0, 3.0)), "time_s[2]"),
    (lambda: Table((0.0, 1.0), (1.0, math.nan)), "voltage_V[1]"),
    (lambda: Waveform(dc_V=math.inf), "dc_V"),
    (lambda: Waveform(sinusoids=(Pulse(1.0, 0.0),)), "sinusoids[0]"),
    (lambda: Waveform(pulses=(Pulse(1.0, 0.0), 3.0)), "pulses[1]"),
    (lambda: Waveform(table=(0.0, 1.0)), "table"),
])
def test_bad_descriptions_name_the_field(make, field):
    """Every check raises a WaveformError whose field is the bad one and whose text shows it."""
    with pytest.raises(WaveformError) as info:
        make()
    assert info.value.field == field
    assert str(info.value).startswith(field + ": ")


def test_period_equal_to_the_pulse_is_allowed_and_single_pulses_ignore_it():
    """A square wave (width = period / 2, zero rise and fall) repeats without overlap; a single
    pulse may have any period."""
    sq = Pulse(1.0, 0.0, width_s=1e-6, period_s=2e-6, count=2)
    assert list(sq.knots()[:, 0]) == pytest.approx([0.0, 1e-6, 2e-6, 3e-6])
    assert Pulse(1.0, 0.0, period_s=1e-9).count == 1


def test_read_table(tmp_path):
    """A CSV table: comments and blank lines skipped, the time unit from the header."""
    f = tmp_path / "ramp.csv"
    f.write_text("# an illustrative extraction ramp\ntime_ns,voltage_V\n0,0\n\n100,2000.5\n"
                 "# held\n250, 2000.5\n")
    t = read_table(f)
    assert t.time_s == pytest.approx((0.0, 100e-9, 250e-9), rel=1e-6, abs=0) and t.voltage_V == (0.0, 2000.5, 2000.5)
    assert t.source == str(f)
    f.write_text("time_us,voltage_V\n0,1\n1.5,2\n")
    assert read_table(f).time_s == pytest.approx((0.0, 1.5e-6))


@pytest.mark.parametrize("text, words", [
    ("", "no header"),
    ("t,V\n0,1\n1,2\n", "header must be"),
    ("time_ms,voltage_V\n0,1\n", "header must be"),
    ("time_ns,voltage_V\n0,1\n1,2,3\n", "line 3: 3 fields"),
    ("time_ns,voltage_V\n0,1\n1,x\n", "line 3: '1,x' is not two finite numbers"),
    ("time_ns,voltage_V\n0,1\n1,inf\n", "line 3"),
    ("time_ns,voltage_V\n0,1\n0,2\n", "times must increase"),
    ("time_ns,voltage_V\n0,1\n", "at least two points"),
])
def test_bad_table_files_name_file_and_line(tmp_path, text, words):
    """A malformed table file raises a WaveformError naming the file (and the line)."""
    f = tmp_path / "bad.csv"
    f.write_text(text)
    with pytest.raises(WaveformError) as info:
        read_table(f)
    assert words in str(info.value) and "bad.csv" in str(info.value)
