"""Energy bookkeeping of traced rays.

In an electrostatic field the kinetic energy a charge gains equals minus its charge times the change
of potential. At every accepted step (and at every recorded event) the tracer computes the residual

    ledger = ΔKE − qΔV,    ΔKE = KE_now − KE_start,    qΔV = −q (V_now − V_start),

with KE = (gamma − 1) m c^2 from the momentum and V from the same interpolant the force comes from,
and keeps each ray's worst |ledger| in eV (``ledger_eV``). A ray is a *suspect* when its worst
residual exceeds ``threshold`` times its energy scale,

    scale = max(KE_start, |q| · max_k |V_k|, |q| · 1 V),

the larger of its start kinetic energy and the largest energy any electrode voltage can give it
(the last term only keeps the scale positive when everything is at 0 V). The default threshold is
1e-6.
"""

from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy import constants

DEFAULT_THRESHOLD = 1e-6


@njit(cache=True)
def kinetic_energy_J(px, py, pz, mass):
    """Relativistic kinetic energy (gamma − 1) m c^2 from a momentum, in joules.

    Written as p^2 / ((gamma + 1) m), which keeps full precision for slow particles.
    """
    p2 = px * px + py * py + pz * pz
    gamma = np.sqrt(1.0 + p2 / (mass * constants.c) ** 2)
    return p2 / ((gamma + 1.0) * mass)


def energy_scale_eV(start_energy_eV, charge_C, voltages):
    """Energy scale of each ray (eV): max(start KE, |q| max|V_electrode|, |q| · 1 V).

    Parameters
    ----------
    start_energy_eV : array_like
        Start kinetic energy of each ray, eV.
    charge_C : float
        Charge of the species, coulomb.
    voltages : sequence of float
        Electrode voltages, volts.
    """
    q_e = abs(charge_C) / constants.e
    v_max = max((abs(v) for v in voltages), default=0.0)
    return np.maximum(np.asarray(start_energy_eV, dtype=float), q_e * max(v_max, 1.0))


@dataclass(frozen=True)
class LedgerReport:
    """Summary of the energy ledger of a beam.

    Attributes
    ----------
    worst_eV : float
        The largest |ΔKE − qΔV| over all traced rays, eV.
    worst_relative : float
        The largest ratio of a ray's worst residual to its energy scale.
    threshold : float
        Relative threshold above which a ray is a suspect.
    suspects : int
        Number of rays whose worst residual exceeds threshold × their energy scale.
    suspect_rays : numpy.ndarray
        Indices of those rays.
    """

    worst_eV: float
    worst_relative: float
    threshold: float
    suspects: int
    suspect_rays: np.ndarray

    @property
    def warning(self):
        """A one-line warning when rays break the ledger, else ""."""
        if self.suspects == 0:
            return ""
        return (f"energy ledger: {self.suspects} ray(s) above {self.threshold:.0e} of their energy "
                f"scale (worst {self.worst_relative:.2e}); tighten rtol or refine the grid")


def ledger_report(ledger_eV, scale_eV, threshold=DEFAULT_THRESHOLD, traced=None):
    """Count the rays whose worst ledger residual exceeds ``threshold`` of their energy scale.

    Parameters
    ----------
    ledger_eV, scale_eV : array_like
        Per ray: worst |ΔKE − qΔV| and energy scale, eV.
    threshold : float
        Relative threshold (default 1e-6).
    traced : array_like of bool, optional
        Rays to count (e.g. not those that started inside an electrode); all by default.
    """
    ledger_eV = np.asarray(ledger_eV, dtype=float)
    if traced is not None:
        ledger_eV = np.where(traced, ledger_eV, 0.0)
    rel = ledger_eV / np.asarray(scale_eV, dtype=float)
    bad = np.flatnonzero(rel > threshold)
    return LedgerReport(
        worst_eV=float(ledger_eV.max(initial=0.0)),
        worst_relative=float(rel.max(initial=0.0)),
        threshold=float(threshold),
        suspects=int(bad.size),
        suspect_rays=bad,
    )
