"""The adaptive Runge–Kutta ray kernel and its event location (numba).

Rays move by the relativistic equations of motion in momentum form,

    dx/dt = p / (gamma m),     dp/dt = F(x, v, t),     gamma = sqrt(1 + (|p| / (m c))^2),

in 3-D Cartesian coordinates (x, y, z), z along the axis; F = q (E(x) + v x B(x)) from a (z, r)
potential map and the magnetic sources (none in an electric-only run). The rooms of the kernel, each one idea:

* :mod:`~tracer.motion.bundles` — the named tuples the kernels take (:class:`Nodes`,
  :class:`Shapes`), the end codes, the state-row and count layouts, the lane workspace and the
  lane loop's state (named rows);
* :mod:`~tracer.motion.tableau` — the Dormand–Prince 5(4) coefficients as data;
* :mod:`~tracer.motion.symmetry` — axial, planar and mirrored planar maps seen from 3-D;
* :mod:`~tracer.motion.force` — the one seam where the field and the force are evaluated;
* :mod:`~tracer.motion.stepper` — one step in every lane, and the one step-size controller;
* :mod:`~tracer.motion.events` — leaving the domain, landings and plane crossings on the dense
  output;
* :mod:`~tracer.motion.walls` — steps that end on cell walls, and the kink past a wall;
* the phases of a round of the lane loop: :mod:`~tracer.motion.rays` (lanes take rays and hand in
  their results), :mod:`~tracer.motion.choose` (each lane's next step),
  :mod:`~tracer.motion.check` (each trial step's error and cell walls),
  :mod:`~tracer.motion.settle` (the cell ahead entered, or the step cut back to a wall);
* :mod:`~tracer.motion.lanes` — the lane loop (the phases in order, then the accepted steps'
  events, ledger and move) and the parallel driver :func:`trace_rays`.
"""

from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_ELECTRODE, C_EVALS, C_PATH,
                                   C_REJECTED, C_STEPS, INSIDE, LANDED, LANES, LEFT, PLANE,
                                   ROW_KE, ROW_LEDGER, ROW_LEN, ROW_STATE, ROW_T, RUNNING, STALLED,
                                   TIME, Magnet, Nodes, Shapes, magnet_of, nodes_of,
                                   shapes_of)
from tracer.motion.events import quiet_cells
from tracer.motion.lanes import trace_rays
from tracer.motion.symmetry import SYMMETRY_CODE

__all__ = ["C_CODE", "C_CROSSINGS", "C_ELECTRODE", "C_EVALS", "C_PATH", "C_REJECTED", "C_STEPS",
           "ROW_KE", "ROW_LEDGER", "ROW_LEN", "ROW_STATE", "ROW_T", "INSIDE", "LANDED", "LANES", "LEFT", "PLANE", "RUNNING", "STALLED", "SYMMETRY_CODE",
           "TIME", "Magnet", "Nodes", "Shapes", "magnet_of", "nodes_of", "quiet_cells", "shapes_of", "trace_rays"]
