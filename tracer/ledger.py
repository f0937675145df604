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

What the ledger proves, and what it does not
--------------------------------------------
The ledger checks the integration against the interpolated map: V and the force both come from
the same C1 interpolant (E = -grad V exactly), so a small residual says the Runge–Kutta steps
followed the equations of motion *in that map*. It cannot see the map's own error, the difference
between the interpolated potential and the true solution of Laplace's (or Poisson's) equation for
the electrodes, which is a discretisation error of the grid. That error is what grid refinement
measures: solve again with a finer (or coarser) ``cell_mm`` and compare, as the grid error bars of
:mod:`tracer.errorbars` do.

Voltages that change in time
----------------------------
With electrode voltages w_k(t) (:mod:`tracer.waveforms`) the potential is
V(x, t) = V_static(x) + sum_k w_k(t) phi_k(x), phi_k the map of the electrodes that share waveform
k (:mod:`tracer.groups`), and the field is still E = -grad V: the fields are *quasi-static*, valid
while the device is small against the wavelength c / (2 pi f) (no induced field from a changing
magnetic field, no radiation). The rate of work on a charge is q E . v = -q dV/dt + q dV/dt|_x,
the total change along the path less the explicit time derivative, so over a path from (x0, t0)
to (x1, t1)

    ΔKE = -q [V(x1, t1) - V(x0, t0)] + q ∫ dV/dt|_x dt + q sum_s [V(x_s, t_s+) - V(x_s, t_s-)],

the last sum over the switches s with zero rise time passed on the way (at a jump the potential
changes at once and the kinetic energy does not). The ledger of such a ray is

    ledger = ΔKE + q (V_now - V_start) - q W,    W = ∫ dV/dt|_x dt + sum_s jump_s,

(:func:`time_ledger_J`), with V taken on the side of each switch the ray is on. W is summed
step by step, with :func:`jump_work` at the corners a step ends on; steps never straddle a
corner, so the integrand dV/dt|_x = sum_k (dw_k/dt) phi_k(x(t)) is smooth on every step.

A whole step's work is one more component of the state, integrated by the Runge–Kutta step
itself: at each stage j the kernel evaluates the group maps for the force anyway
(:mod:`tracer.motion.drive`), and the same values weighed by dw_k/dt give the rate g_j of the work
there, so the step's work is h sum_j b_j g_j with the Dormand–Prince fifth-order weights b_j
(:func:`tracer.motion.stepper.stage_work`; the last stage's g is the next step's first, as the
rates of the state are, except on entering a cell or after a corner, where the first rate is
taken anew). On a sinusoid alone over a step of 1.1/16 of its period, the longest a step may be
(1/16, stretched by up to a tenth to reach a cell wall), the weights' error is below 2.4e-8 of
max |dw/dt| x step over all phases (1.5e-8 at 1/16); along the path the error is of the step's
order, five, as the state's. The work is not part of the step's error norm (the norm and with it
every step stay those of the motion). Along the bundled ion trap's ions (configs/ion_trap.toml,
200 rays) the worst ledger is 1.0e-10 of the scale (2.8e-12 with the Gauss rule below on every
step), the delayed-extraction source's 1.4e-10 (1.3e-10).

Part of a step, up to an event (a plane crossing, a landing, leaving the domain), takes
:func:`time_work` instead: the integral along the step's dense output by Gauss–Legendre
quadrature with ``GAUSS_POINTS`` = 3 nodes (exact for polynomials of degree 2 GAUSS_POINTS - 1 =
5 in time; on a sinusoid over a step of 1.1/16 of its period its error is below 3.3e-9 of
max |dw/dt| x step, 1.9e-9 at 1/16, over all phases, with the map value constant along the step;
the path's own motion adds harmonics, and along an ion held in a trap at q_z = 0.5 the ledger
closes to 1.7e-9 of the work exchanged, tests/test_ledger.py: far below the default threshold).
The continuous extension's weights applied to the stages' g_j would be only fourth order (up to
3e-6 of max |dw/dt| x step at 1.1/16 of a period), and a step that leaves the domain has its
later stages past the edge, where the map is clamped and g has a kink, which the weights spread
over the whole step: with them, 100 V at 100 MHz on the tests' three-tube lens left 11 of 300 rays
suspects at their ends (worst 8.9e-6 of the scale), with the rule none (7.9e-8).

In a trap the net energy gained can be near zero while the charge exchanges much more with the
RF field, so the tolerance is relative to the work exchanged as well: the ray's scale becomes
max(scale, |q| ∫ |dV/dt|_x| dt) (:func:`energy_scale_in_time_eV`), with the waveforms' peak
voltages (``Waveform.peak_V``) among the electrode voltages. The integral of |dV/dt|_x| is a
scale, not an accurate figure: over a whole step the fifth-order weights applied to |g_j| (one of
them is negative, and |g| has a kink where g changes sign), over part of a step the rule applied
to |dV/dt|_x|.
"""

from dataclasses import dataclass

import numpy as np
from scipy import constants

from tracer.jit import njit
from tracer.waveforms import jump_at, rate

DEFAULT_THRESHOLD = 1e-6

GAUSS_POINTS = 3
"""Nodes of the Gauss–Legendre rule that integrates the dV/dt work of part of a step."""

_nodes, _weights = np.polynomial.legendre.leggauss(GAUSS_POINTS)
GAUSS_THETA = 0.5 * (_nodes + 1.0)
"""The nodes on [0, 1]: fractions of a step at which the kernel evaluates the group maps."""
GAUSS_WEIGHT = 0.5 * _weights
"""Their weights on [0, 1] (summing to 1)."""


@njit(cache=True)
def kinetic_energy_J(px, py, pz, mass):
    """Relativistic kinetic energy (gamma − 1) m c^2 from a momentum, in joules.

    Written as p^2 / ((gamma + 1) m), which keeps full precision for slow particles.
    """
    p2 = px * px + py * py + pz * pz
    gamma = np.sqrt(1.0 + p2 / (mass * constants.c) ** 2)
    return p2 / ((gamma + 1.0) * mass)


@njit(cache=True)
def residual_J(ke_start, ke_now, charge, v_start, v_now):
    """The ledger ΔKE − qΔV = (KE_now − KE_start) + q (V_now − V_start) of a ray, joules (signed;
    the kernel keeps its worst magnitude)."""
    return (ke_now - ke_start) + charge * (v_now - v_start)


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


# --------------------------------------------------------------------------------------------
# Voltages that change in time (module docstring)


@njit(cache=True, error_model="numpy", inline="always")
def time_work(w, m, t0, h, phi):
    """The dV/dt work of (part of) a step: ∫ dV/dt|_x dt and ∫ |dV/dt|_x| dt over [t0, t0 + h],
    volts.

    Parameters
    ----------
    w : tracer.waveforms.WaveArrays
        The K waveforms.
    m : int
        The waveform piece the step lies on (``waveforms.piece`` at its start); the step must not
        straddle a corner.
    t0, h : float
        Start and length of the step, seconds.
    phi : float64[GAUSS_POINTS, K]
        ``phi[i, k]``: the map of group k at the step's dense output at t0 + GAUSS_THETA[i] h.

    Returns
    -------
    (work, magnitude) : tuple of float
        Multiply by the charge for joules. ``magnitude`` is the rule applied to |dV/dt|, a scale
        for the ledger's tolerance, not an accurate integral.
    """
    work = 0.0
    magnitude = 0.0
    for i in range(GAUSS_POINTS):
        t = t0 + GAUSS_THETA[i] * h
        d = 0.0
        for k in range(phi.shape[1]):
            d += rate(w, k, m, t) * phi[i, k]
        work += GAUSS_WEIGHT[i] * d
        magnitude += GAUSS_WEIGHT[i] * abs(d)
    return work * h, magnitude * h


@njit(cache=True, error_model="numpy")
def jump_work(w, t, phi):
    """V(x, t+) - V(x, t-) at a corner t of the waveforms: sum_k jump_k(t) phi[k], volts
    (phi[k]: the map of group k at the point x)."""
    s = 0.0
    for k in range(phi.size):
        s += jump_at(w, k, t) * phi[k]
    return s


@njit(cache=True, error_model="numpy")
def time_ledger_J(ke_start, ke_now, charge, v_start, v_now, work_V):
    """The ledger ΔKE + q (V_now - V_start) - q W of a ray in fields that change in time, joules.

    ``work_V`` is W, the sum of the steps' dV/dt work (the module's docstring) and of
    :func:`jump_work` over the ray's steps so far; with W = 0 this is the static ledger
    :func:`residual_J`.
    """
    return residual_J(ke_start, ke_now, charge, v_start, v_now) - charge * work_V


def energy_scale_in_time_eV(start_energy_eV, charge_C, peaks_V, magnitude_V):
    """Energy scale of each ray with waveforms: max(:func:`energy_scale_eV`, |q| ∫|dV/dt| dt).

    ``start_energy_eV`` and ``charge_C`` are those of :func:`energy_scale_eV`, ``peaks_V`` its
    voltages: the constant electrodes' and the waveforms' ``peak_V``; ``magnitude_V`` is, per ray,
    the sum of the magnitudes of its steps' dV/dt work (volts; the module's docstring).
    """
    return np.maximum(energy_scale_eV(start_energy_eV, charge_C, peaks_V),
                      abs(charge_C) / constants.e * np.asarray(magnitude_V, dtype=float))
