"""Electrodes grouped by waveform: one static map and one map per distinct waveform.

The potential is linear in the electrode voltages, V = sum_i v_i(t) phi_i (``BasisMaps``), so with
each electrode's voltage split into a constant and a varying part, v_i(t) = c_i + s_i w_k(i)(t)
(``Waveform.split``; s_i = +1, or -1 for an electrode driven with the negative of another's
waveform, as the two halves of an RF pair),

    V(x, t) = V_static(x) + sum_k w_k(t) M_k(x),   V_static = sum_i c_i phi_i,   M_k = sum_{i in k} s_i phi_i.

Electrodes with a constant voltage, and the constant parts of all the others, fold into the one
static map; every group of electrodes that shares a varying part (up to its sign) is one map more.
The ray kernel then evaluates 1 + K maps per stage, K the number of distinct waveforms, however
many electrodes carry them.
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping
from dataclasses import dataclass, replace

import numpy as np

from tracer.fieldmap import PotentialMap
from tracer.waveforms import Waveform, WaveArrays, piece, value, wave_arrays


@dataclass(frozen=True, eq=False)
class GroupedMaps:
    """The static map and one map per group of electrodes that share a waveform.

    Attributes
    ----------
    basis : tracer.fieldmap.BasisMaps
        The basis maps they were combined from.
    offsets : tuple of float
        Constant part c_i of each electrode's voltage (electrode order of ``basis.names``).
    group : tuple of int
        The group k of each electrode, -1 for a constant one.
    sign : tuple of float
        s_i: +1.0, or -1.0 where the electrode carries the negative of its group's waveform (0.0
        for a constant electrode).
    waveforms : tuple of Waveform
        The varying part w_k of each group (zero before its first corner; no DC part).
    static : float64[4, nz, nr]
        Hermite node data of V_static.
    driven : float64[K, 4, nz, nr]
        Hermite node data of each group's map M_k.
    arrays : tracer.waveforms.WaveArrays
        ``waveforms`` as kernel arrays.
    """

    basis: object
    offsets: tuple
    group: tuple
    sign: tuple
    waveforms: tuple
    static: np.ndarray
    driven: np.ndarray
    arrays: WaveArrays

    @property
    def grid(self):
        """The node grid of the maps."""
        return self.basis.grid

    @property
    def table(self):
        """The electrode shapes of the maps."""
        return self.basis.table

    @property
    def raster(self):
        """The rasterized geometry of the maps."""
        return self.basis.raster

    @property
    def names(self) -> tuple:
        """The electrode names, in the order of the maps."""
        return self.basis.names

    @property
    def in_time(self) -> bool:
        """True when some electrode's voltage changes in time (K > 0)."""
        return len(self.waveforms) > 0

    def peaks_V(self) -> tuple:
        """A bound on each electrode's |voltage| over all times: |c_i| + the peak of its varying
        part (the voltages of the ledger's energy scale)."""
        peaks = [w.peak_V for w in self.waveforms] + [0.0]   # group -1 reads the 0.0
        return tuple(abs(c) + peaks[k] for c, k in zip(self.offsets, self.group))

    def weights(self, t: float) -> np.ndarray:
        """w_k(t) of every group (at a corner, the value just after), volts."""
        m = piece(self.arrays, t)
        return np.array([value(self.arrays, k, m, t) for k in range(len(self.waveforms))])

    def voltages(self, t: float) -> tuple:
        """Each electrode's voltage at time t: c_i + s_i w_k(t)."""
        w = np.r_[self.weights(t), 0.0]                       # group -1 reads the 0.0
        return tuple(float(c + s * w[k]) for c, s, k in zip(self.offsets, self.sign, self.group))

    def at(self, t: float) -> PotentialMap:
        """The potential map at time t: V_static + sum_k w_k(t) M_k."""
        w = self.weights(t)
        hermite = self.static + np.tensordot(w, self.driven, axes=1) if w.size else self.static
        b = self.basis
        return PotentialMap(b.grid, b.table, b.raster, b.names, self.voltages(t), hermite)


def with_voltages(drives: Mapping[str, float | Waveform], voltages: Mapping[str, float] | None) -> dict:
    """The drives with the given voltages set: a number replaces a constant voltage and the DC
    part (``dc_V``) of a waveform, whose other parts stay."""
    out = dict(drives)
    for name, volts in (voltages or {}).items():
        drive = out.get(name)
        out[name] = replace(drive, dc_V=float(volts)) if isinstance(drive, Waveform) else volts
    return out


def group_maps(basis, drive: Mapping[str, float | Waveform] | None = None,
               like: GroupedMaps | None = None) -> GroupedMaps:
    """Fold the constant electrodes into one map and group the others by waveform.

    Parameters
    ----------
    basis : tracer.fieldmap.BasisMaps
    drive : mapping of electrode name to volts or Waveform, optional
        Electrodes not named keep the setup's voltage (``basis.voltages``).
    like : GroupedMaps, optional
        Grouped maps of the same ``basis`` from before (another voltage set's): its static map is
        taken as it is when the constant parts c_i are the same, its group maps when the groups
        are (the same electrodes in each, with the same signs; the waveforms may differ), instead
        of summing the basis maps again.  The result is the same, bit for bit.

    Raises
    ------
    ValueError
        For a name that is not an electrode of the maps.
    TypeError
        For a drive that is neither a number nor a Waveform.
    """
    drives = basis.settings(drive)
    for name, d in drives.items():
        if not isinstance(d, (Waveform, numbers.Real)):
            raise TypeError(f"electrode {name!r}: expected volts or a Waveform, "
                            f"got {type(d).__name__}")
    offsets, group, sign, waveforms = [], [], [], []
    for name in basis.names:
        d = drives[name]
        offset, varying = d.split() if isinstance(d, Waveform) else (float(d), None)
        offsets.append(offset)
        k, s = -1, 0.0
        if varying is not None:
            if varying in waveforms:
                k, s = waveforms.index(varying), 1.0
            elif varying.negated() in waveforms:
                k, s = waveforms.index(varying.negated()), -1.0
            else:
                k, s = len(waveforms), 1.0
                waveforms.append(varying)
        group.append(k)
        sign.append(s)
    offsets, group, sign = tuple(offsets), tuple(group), tuple(sign)
    same = like is not None and like.basis is basis
    if same and like.offsets == offsets:
        static = like.static
    else:
        static = summed(np.array(offsets), basis.hermite)
    if same and (like.group, like.sign) == (group, sign):
        driven = like.driven
    else:
        members = np.zeros((len(waveforms), len(basis.names)))
        for i, (k, s) in enumerate(zip(group, sign)):
            if k >= 0:
                members[k, i] = s
        driven = summed(members, basis.hermite)
    return GroupedMaps(basis, offsets, group, sign, tuple(waveforms), static, driven, wave_arrays(waveforms))


def summed(weights, hermite):
    """The node data of the basis maps ``hermite`` (float64[n, 4, nz, nr]) summed with ``weights``
    (float64[n], or [K, n] for K sums): the one place grouped maps are built from the basis."""
    return np.tensordot(weights, hermite, axes=1)
