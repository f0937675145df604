"""How results look from Python: a one-line ``repr`` and a small HTML table for notebooks.

A result class inherits :class:`Shown`, is declared with ``@dataclass(repr=False)`` (so that the
dataclass does not write its own ``__repr__``, which prints every array in full) and names its key
figures in ``_facts()``; a class with a picture also gives ``_figure_png()``.  The text form is
``Name(key=value, ...)`` and stays well under a kilobyte; the HTML form is the same facts as a
two-column table, then the picture.
"""

from __future__ import annotations

import base64
import html
import math
import tempfile
from pathlib import Path


class Shown:
    """Mixin: ``repr`` and ``_repr_html_`` from the class's ``_facts()``."""

    def _facts(self) -> dict:
        """The key figures as label -> text (numbers already formatted with their units)."""
        raise NotImplementedError

    def _figure_png(self) -> bytes | None:
        """A picture of the result as PNG bytes, or None (the default) when it has none."""
        return None

    def __repr__(self) -> str:
        facts = ", ".join(f"{label}={text}" for label, text in self._facts().items())
        return f"{type(self).__name__}({facts})"

    def _repr_html_(self) -> str:
        rows = "".join(f"<tr><th style='text-align:left'>{html.escape(label)}</th>"
                       f"<td style='text-align:left'>{html.escape(text)}</td></tr>"
                       for label, text in self._facts().items())
        out = f"<table><caption>{html.escape(type(self).__name__)}</caption>{rows}</table>"
        png = self._figure_png()
        if png:
            out += f"<img src='data:image/png;base64,{base64.b64encode(png).decode()}' style='max-width:100%'/>"
        return out


def number(value, unit: str = "", scale: float = 1.0) -> str:
    """``value * scale`` to 4 significant digits with its unit; "none" for None or NaN."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "none"
    text = f"{value * scale:.4g}"
    return f"{text} {unit}" if unit else text


def listing(items, limit: int = 6) -> str:
    """Up to ``limit`` names joined by commas, then how many more."""
    items = [str(i) for i in items]
    shown = ", ".join(items[:limit])
    return f"{shown}, ... ({len(items)} in all)" if len(items) > limit else shown or "none"


def grid_text(g) -> str:
    """A grid's symmetry, node counts and cell."""
    return f"{g.symmetry} {g.nz}x{g.nr} nodes, cell {number(g.hz, 'mm', 1e3)}"


def voltage_text(names_, volts, coils=()) -> str:
    """Electrode voltages as ``name V`` (a coil's current in A, a waveform parameter in its own
    unit: :func:`tracer.schema.scan_unit`), abbreviated past six electrodes."""
    from tracer.schema import scan_unit

    return listing(f"{n} {number(v, scan_unit(n, coils))}" for n, v in zip(names_, volts))


def megabytes(*arrays) -> str:
    """The memory the arrays hold."""
    return number(sum(a.nbytes for a in arrays) / 1e6, "MB")


def run_facts(title, field, runs) -> dict:
    """The facts of a run (traced, or read back from its file): title, grid, voltages, each beam."""
    return {"title": repr(title), "grid": grid_text(field.grid),
            "voltages": voltage_text(field.names, field.voltages)} | {
            run.name: f"{len(run.records)} rays of {run.species.name}, "
                      f"ledger worst {number(run.ledger.worst_eV, 'eV')}" for run in runs}


def rays_png(field, runs, title=None) -> bytes:
    """The run's rays over the equipotentials (the ``rays.png`` of :func:`tracer.plot.figure_jobs`)."""
    from tracer.plot import figure_jobs

    name, draw = figure_jobs(field, runs, title=title)[0]
    with tempfile.TemporaryDirectory() as folder:
        return draw(Path(folder) / name).read_bytes()
