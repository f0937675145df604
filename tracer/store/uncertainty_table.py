"""The error bars of a beam's figures as a table in ``result.h5`` (``/tracer/result/uncertainty/<k>``).

One row per figure of the beam summary's planes and landings that has error bars
(:mod:`tracer.errorbars`): where it is (``section``, ``where``, ``figure``: the summary's
``summary[section][where][figure]``), its ``value`` (all rays, the config's cell), ``grid_error``
(Roache's GCI), ``monte_carlo_error`` (the jackknife over ten groups of rays), the re-traced rays' figure on each grid
(``value_h``, ``value_2h``, ``value_third``: NaN with two grids), ``observed_order``, ``safety``
and ``flag``.  Strings are UTF-8.
"""

from __future__ import annotations

import h5py
import numpy as np

_TEXT = h5py.string_dtype()

UNCERTAINTY_DTYPE = np.dtype([
    ("section", _TEXT), ("where", _TEXT), ("figure", _TEXT), ("value", np.float64),
    ("grid_error", np.float64), ("monte_carlo_error", np.float64), ("value_h", np.float64),
    ("value_2h", np.float64), ("value_third", np.float64), ("observed_order", np.float64),
    ("safety", np.float64), ("flag", _TEXT)])
"""The columns of the table."""


def uncertainty_rows(summary) -> np.ndarray:
    """The table of a beam summary that carries ``"uncertainty"`` (:meth:`tracer.pipeline.RunResult.summary`)."""
    u = summary["uncertainty"]
    rows = [(section, where, name, summary[section][where][name], bar["grid"], bar["monte_carlo"],
             bar["fine"], bar["coarse"], bar["third"], bar["observed_order"], bar["safety"], bar["flag"])
            for section in ("planes", "landing") for where, figs in u[section].items()
            for name, bar in figs.items()]
    return np.array(rows, dtype=UNCERTAINTY_DTYPE)


def write_uncertainty(group, k, summary) -> None:
    """Write the k-th beam's table into tracer's result group, with the cells and rays as attributes."""
    data = group.create_dataset(f"uncertainty/{k}", data=uncertainty_rows(summary))
    data.attrs["cells_m"] = np.asarray(summary["uncertainty"]["cells_m"], dtype=np.float64)
    data.attrs["rays"] = summary["uncertainty"]["rays"]
    data.attrs["beam"] = summary["beam"]
