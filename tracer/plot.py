"""matplotlib figures: electrodes with equipotentials and rays, spots, histograms, scan curves.

Every picture has a function that returns it as a :class:`matplotlib.figure.Figure` (for a
notebook: ``tracer.plot.rays_figure(result.field, list(result.beams.values()))``), named
``<picture>_figure``, and returns None when there is nothing to show; :func:`write` saves one to a
PNG.  The ``plot_*`` functions and :func:`figure_jobs` write the pictures of the command line.
Figures are drawn with matplotlib's object-oriented API on its Agg canvas (no pyplot, no figure
registry, no screen); a Figure shows itself in Jupyter.

The figures
-----------
``rays_figure``
    The electrodes, equipotentials at round values and the rays at true scale, and beneath it the
    same stretched across the beam (its envelope), with the detector planes and the best focus of
    each (:class:`tracer.measure.PlaneStats` ``focus_z_m``) marked.
``spot_figure``
    At a plane: the x-y spot diagram with the d50 and d90 circles, and the radial current profile
    (current per unit area in rings about the centroid, and the share enclosed).
``phase_space_figure``, ``landing_energy_figure``, ``landing_positions_figure``,
``arrival_times_figure``, ``waveforms_figure``, ``magnetic_figure``, ``scan_figures`` (one
panel per figure that varies), ``tune_figure``, ``optics_figure``
    As their names say (each function's notes).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib
import matplotlib.patches
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib import ticker
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from tracer.measure import FILE_UNITS, arrival_times, counted, frame, grid_column, plane_figures, ray_weights
from tracer.schema import scan_column, scan_unit
from tracer.stats import mean, radius
from tracer.store.atomic import atomic_path

MM = 1e3
PNG_COMPRESSION = 1
"""zlib level of the PNG files: the same pixels as the default level 6 in about half the time, in
files 5 to 25 % larger."""


def new_figure(figsize) -> Figure:
    """A figure on an Agg canvas, with constrained layout so that labels and colour bars fit."""
    fig = Figure(figsize=figsize, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def save(fig, path, dpi=150) -> Path:
    """Write a figure to a PNG atomically (a temporary file renamed into place)."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi, format="png", pil_kwargs={"compress_level": PNG_COMPRESSION})
    return Path(path)


def write(fig, path, dpi=150) -> Path | None:
    """:func:`save` a figure; None (and no file) for None, a figure with nothing to show."""
    return None if fig is None else save(fig, path, dpi=dpi)


def round_levels(lo, hi, count):
    """About ``count`` round values (1, 2, 2.5 or 5 times a power of ten apart) strictly between
    ``lo`` and ``hi``: the equipotentials drawn."""
    levels = ticker.MaxNLocator(nbins=count + 1, steps=[1, 2, 2.5, 5, 10]).tick_values(lo, hi)
    return levels[(levels > lo) & (levels < hi)]


def _shape_outlines(table):
    """Yield (electrode index, (k, 2) array of outline points in metres) for every shape."""
    for i, kind in enumerate(table.kind):
        if kind == 0:
            s, c = table.start[i], table.count[i]
            yield table.owner[i], table.points[s:s + c]
        else:
            cz, rho_in, rho_out, t0, t1, cr = table.sector[i]
            t = np.linspace(t0, t1, 64)
            outer = np.column_stack([cz + rho_out * np.cos(t), cr + rho_out * np.sin(t)])
            inner = np.column_stack([cz + rho_in * np.cos(t[::-1]), cr + rho_in * np.sin(t[::-1])])
            yield table.owner[i], np.vstack([outer, inner])


def draw_electrodes(ax, table, labels=True) -> None:
    """Fill every electrode shape and label each electrode once, at its largest shape."""
    colours = matplotlib.colormaps["tab10"]
    biggest = {}
    for owner, pts in _shape_outlines(table):
        ax.fill(pts[:, 0] * MM, pts[:, 1] * MM, color=colours(owner % 10), alpha=0.85, lw=0.5,
                ec="black", zorder=3)
        area = np.ptp(pts[:, 0]) * np.ptp(pts[:, 1])
        if area >= biggest.get(owner, (-1.0, None))[0]:
            biggest[owner] = (area, pts.mean(axis=0))
    if labels:
        for owner, (_, centre) in biggest.items():
            ax.annotate(table.names[owner], centre * MM, fontsize=8, ha="center", va="center",
                        zorder=5, bbox=dict(boxstyle="round,pad=0.15", fc="white", alpha=0.8, lw=0))


def _equipotentials(ax, zz, rr, v, levels):
    """Equipotential contours at round values, labelled in volts (none in a field without any)."""
    lo, hi = float(v.min()), float(v.max())
    values = round_levels(lo, hi, levels) if hi > lo else ()
    if len(values):
        cs = ax.contour(zz * MM, rr * MM, v, levels=values, cmap="viridis", linewidths=0.7, zorder=2)
        ax.clabel(cs, cs.levels[::3], fmt="%.6g V", fontsize=6)


def _plane_marks(runs):
    """(name, z, best focus z or NaN) of each z = const plane of the runs, in order, once each."""
    marks = {}
    for run in runs:
        for plane in run.planes:
            if plane in marks or plane in getattr(run, "tilted_planes", ()):
                continue
            rows = run.at_plane(plane)
            if len(rows):
                marks[plane] = (float(np.median(rows["z_m"])), plane_figures(run, plane).focus_z_m)
    return [(name, z, focus) for name, (z, focus) in marks.items()]


def rays_figure(field, runs=(), title: str | None = None, levels: int = 24) -> Figure:
    """Electrodes, equipotentials at round values and the rays of ``runs`` (module notes).

    Parameters
    ----------
    field : PotentialMap
    runs : sequence of tracer.beam.BeamRun
        Traced beams (or beams read back from a result file); their kept paths are drawn, their
        planes and best foci marked.  None given: the electrodes and equipotentials alone.
    title : str, optional
    levels : int
        About how many equipotentials.

    Returns
    -------
    matplotlib.figure.Figure
        One panel at true scale; with rays a second, stretched across the beam.
    """
    g = field.grid
    paths = [_path_zr(p, g.symmetry) for run in runs for p in run.paths if len(p)]
    z = np.linspace(g.z0, g.z1, min(g.nz, 800))
    r = np.linspace(g.r0, g.r1, min(g.nr, 400))
    zz, rr = np.meshgrid(z, r, indexing="ij")
    v = field.potential(zz.ravel(), rr.ravel()).reshape(zz.shape)
    span = (g.z1 - g.z0) / (g.r1 - g.r0)
    width = 12.0
    # the axes (about 0.8 in narrower than the figure) at equal aspect, with room for the labels
    true_height = min(8.0, max(2.0, 0.9 + (width - 0.8) / span))
    fig = new_figure((width, true_height + (3.2 if paths else 0.0)))
    axes = fig.subplots(2 if paths else 1, 1, squeeze=False,
                        height_ratios=[true_height, 3.2] if paths else None)[:, 0]
    side = "r" if g.symmetry == "axial" else "y"
    marks = _plane_marks(runs)
    for k, ax in enumerate(axes):
        _equipotentials(ax, zz, rr, v, levels)
        draw_electrodes(ax, field.table, labels=k == 0)
        if paths:
            ax.add_collection(LineCollection([p * MM for p in paths], colors="crimson", linewidths=0.5,
                                             alpha=0.8, zorder=4), autolim=False)
        ax.set_xlabel("z (mm)")
        ax.set_ylabel(f"{side} (mm)")
        ax.set_xlim(g.z0 * MM, g.z1 * MM)
    axes[0].set_ylim(g.r0 * MM, g.r1 * MM)
    axes[0].set_aspect("equal")
    axes[0].set_title(title or "electrodes and equipotentials", fontsize=10)
    if paths:
        ax = axes[1]
        low = min(float(p[:, 1].min()) for p in paths)
        high = max(float(p[:, 1].max()) for p in paths)
        pad = 0.1 * (high - low) or 0.1 * max(abs(high), g.cell) or 1e-6
        ax.set_ylim(max(low - pad, g.r0) * MM, min(high + pad, g.r1) * MM)
        ax.set_title("stretched across the beam (its envelope), planes and best foci marked", fontsize=9)
        for name, zp, focus in marks:
            ax.axvline(zp * MM, color="black", lw=0.8, ls="--", zorder=5)
            ax.annotate(f" {name}", (zp * MM, 0.03), xycoords=("data", "axes fraction"), fontsize=7,
                        ha="left", va="bottom", zorder=6)
            if np.isfinite(focus) and g.z0 <= focus <= g.z1:
                ax.plot([focus * MM], [0.0 if g.symmetry == "axial" else np.mean(ax.get_ylim())],
                        marker="X", ms=8, color="black", zorder=6, ls="none", clip_on=False,
                        label=f"best focus from {name}: z = {focus * MM:.4g} mm")
        if any(line.get_label()[:1] != "_" for line in ax.get_lines()):
            ax.legend(fontsize=7, loc="upper right")
    return fig


def plot_field(field, path, runs=(), title: str | None = None, levels: int = 24) -> Path:
    """Write :func:`rays_figure` to a PNG (``path``)."""
    return save(rays_figure(field, runs, title=title, levels=levels), path)


def magnetic_figure(spec, field) -> Figure | None:
    """The coils' winding sections beside the electrodes in the (z, r) half-plane, and |B| on
    the axis of the coils and axial fields below it (None when there are neither)."""
    if not (spec.coils or spec.profiles):
        return None
    g = field.grid
    z = np.linspace(g.z0, g.z1, 2001)
    fig = new_figure((10.0, 6.0))
    top, bottom = fig.subplots(2, 1, sharex=True)
    draw_electrodes(top, field.table, labels=False)
    reach = g.r1
    for c in spec.coils:
        (z0, z1), (r0, r1) = c.z_m, c.r_m
        w, h = max(z1 - z0, 2e-3 * (g.z1 - g.z0)), max(r1 - r0, 2e-3 * (g.z1 - g.z0))
        top.add_patch(matplotlib.patches.Rectangle((z0 * MM, r0 * MM), w * MM, h * MM, fc="peru",
                                                   ec="black", lw=0.5, zorder=4))
        top.annotate(f"{c.name}\n{c.turns} x {c.current_A:g} A", ((z0 + z1) / 2 * MM, r1 * MM),
                     fontsize=7, ha="center", va="bottom", zorder=5)
        reach = max(reach, r1 + h)
    top.set_xlim(g.z0 * MM, g.z1 * MM)
    top.set_ylim(0.0, reach * 1.15 * MM)
    top.set_ylabel("r (mm)")
    top.set_title("coils and electrodes", fontsize=10)
    from tracer.magnetics.profile import axial_field_T

    b = np.abs(axial_field_T(spec, z))
    scale, unit = (1e3, "mT") if b.max() < 0.1 else (1.0, "T")
    bottom.plot(z * MM, b * scale, color="navy", lw=1.0)
    bottom.set_xlabel("z (mm)")
    bottom.set_ylabel(f"|B| on the axis ({unit})")
    bottom.grid(alpha=0.3)
    return fig


def _path_zr(path, symmetry):
    """(z, r) points of a ray path record array (r = hypot(x, y) in axial, y in planar)."""
    return np.column_stack([path["z_m"], radius(path, symmetry)])


def landing_energy_figure(runs) -> Figure | None:
    """Histograms of the landing kinetic energy, one panel per beam, one colour per electrode;
    weighted by each ray's current (A per bin) when the beam has one, else rays per bin.  None when
    no ray landed."""
    panels = [(run, run.records[run.records["status"] == "landed"]) for run in runs]
    panels = [(run, rows) for run, rows in panels if len(rows)]
    if not panels:
        return None
    fig = new_figure((7, 2.8 * len(panels)))
    axes = fig.subplots(len(panels), 1, squeeze=False)
    for ax, (run, rows) in zip(axes[:, 0], panels):
        weighted = bool((rows["weight_A"] > 0).all())
        for name in np.unique(rows["electrode"]):
            sel = rows["electrode"] == name
            e = rows["energy_eV"][sel]
            ax.hist(e, bins=min(60, max(10, len(e) // 10)), histtype="step", lw=1.2,
                    weights=rows["weight_A"][sel] if weighted else None, label=f"{name} ({len(e)} rays)")
        ax.set_xlabel("landing kinetic energy (eV)")
        ax.set_ylabel("current per bin (A)" if weighted else "rays per bin")
        ax.set_title(f"beam {run.name}: landing energies", fontsize=10)
        ax.legend(fontsize=8)
    return fig


def landing_positions_figure(runs, symmetry="axial") -> Figure | None:
    """Where rays landed, one colour per beam and electrode: z against r (or y) of each landing,
    and in axial symmetry beside it the x-y map seen along the axis (the spot on a flat target).
    None when no ray landed."""
    rows = [(run, run.records[run.records["status"] == "landed"]) for run in runs]
    rows = [(run, r) for run, r in rows if len(r)]
    if not rows:
        return None
    axial = symmetry != "planar"
    fig = new_figure((11, 4.2) if axial else (7, 4))
    axes = fig.subplots(1, 2 if axial else 1, squeeze=False)[0]
    side = "r" if axial else "y"
    for run, r in rows:
        zr = _path_zr(r, symmetry)
        for name in np.unique(r["electrode"]):
            sel = r["electrode"] == name
            axes[0].scatter(zr[sel, 0] * MM, zr[sel, 1] * MM, s=4, label=f"{run.name} on {name}")
            if axial:
                axes[1].scatter(r["x_m"][sel] * MM, r["y_m"][sel] * MM, s=4)
    axes[0].set_xlabel("z (mm)")
    axes[0].set_ylabel(f"{side} (mm)")
    axes[0].set_title("landing positions", fontsize=10)
    axes[0].legend(fontsize=8, markerscale=3)
    if axial:
        axes[1].set_aspect("equal", adjustable="datalim")
        axes[1].set_xlabel("x (mm)")
        axes[1].set_ylabel("y (mm)")
        axes[1].set_title("seen along the axis (x-y)", fontsize=10)
    return fig


def phase_space_figure(run, plane, symmetry="axial") -> Figure | None:
    """Transverse phase space at a plane with its rms ellipse: (x, x') in axial symmetry (the
    plane the summary's emittance is quoted in), (y, y') in planar, (v, v') along a tilted plane's
    line (:func:`tracer.beam.plane_coordinates`), of the crossings that count for the plane's
    figures (:func:`tracer.measure.counted`).  The legend gives the rms emittance in mm mrad, π not
    in the unit, and the normalised one, βγ times it: the plane's figures (:mod:`tracer.measure`,
    weighted by the rays' current when they carry one, as the ellipse).

    ``run`` is a BeamRun (traced, or read back from a result file).  None when no crossing counts."""
    rows = counted(run, plane)
    if not len(rows):
        return None
    tilted = plane in getattr(run, "tilted_planes", ())
    if symmetry == "planar" or tilted:
        _, u, _, pv, pn = frame(rows)
        slope, side = pv / pn, "v" if tilted else "y"
    else:
        side = "x"
        u, slope = rows["x_m"], rows["px"] / rows["pz"]
    fig = new_figure((5.5, 4.2))
    ax = fig.subplots()
    # filled dots of 3.2 pt without an outline: one colour each, so every dot is a path of its own,
    # and stroking 10^4 outlines would double the drawing time
    dots = ax.scatter(u * MM, slope * 1e3, s=10.5, c=rows["energy_eV"], cmap="viridis", linewidths=0)
    fig.colorbar(dots, ax=ax, label="kinetic energy (eV)")
    stats = plane_figures(run, plane)
    eps, norm = ((stats.emittance_x_m_rad, stats.norm_emittance_x_m_rad) if side == "x"
                 else (stats.emittance_y_m_rad, stats.norm_emittance_y_m_rad))
    ellipse = rms_ellipse(u, slope, ray_weights(run.records, rows))
    if ellipse is not None:
        ax.plot(ellipse[0] * MM, ellipse[1] * 1e3, color="crimson", lw=1.2,
                label=f"rms ellipse: ε = {eps * 1e6:.4g} mm mrad (π not in the unit),\n"
                      f"normalised βγε = {norm * 1e6:.4g} mm mrad")
        ax.legend(fontsize=7, loc="upper left")
    ax.set_xlabel(f"{side} (mm)")
    ax.set_ylabel(f"{side}' (mrad)")
    ax.set_title(f"beam {run.name} at plane {plane} ({run.crossing_rule(plane).label})", fontsize=10)
    return fig


def plot_phase_space(run, plane, path, symmetry="axial") -> Path | None:
    """Write :func:`phase_space_figure` to a PNG (None and no file when it has nothing to show)."""
    return write(phase_space_figure(run, plane, symmetry), path)


def spot_figure(run, plane, symmetry="axial") -> Figure | None:
    """The spot at a plane and its radial current profile, of the crossings that count there.

    Left (axial symmetry): the x-y spot diagram (u-v on a tilted plane) with the circles about the
    centroid that hold 50 % and 90 % of the current (d50, d90 of :class:`tracer.measure.PlaneStats`).
    Right: the current per unit area in rings about the centroid (rays per mm² when the rays carry
    no current) and, on the right-hand scale, the share enclosed within each radius; in planar
    symmetry the profile across y (per mm of y) and the share within |y - <y>|.

    Returns
    -------
    matplotlib.figure.Figure or None
        None when no crossing counts.
    """
    rows = counted(run, plane)
    if not len(rows):
        return None
    stats = plane_figures(run, plane)
    x, y = frame(rows)[:2]
    w = ray_weights(run.records, rows)
    charged = w is not None
    w = w if charged else np.ones(len(rows))
    planar = symmetry == "planar"
    fig = new_figure((5.5, 4.0) if planar else (10.5, 4.2))
    axes = fig.subplots(1, 1 if planar else 2, squeeze=False)[0]
    if not planar:
        ax = axes[0]
        ax.scatter(x * MM, y * MM, s=3, c="tab:blue", linewidths=0)
        angle = np.linspace(0.0, 2.0 * np.pi, 181)
        for share, d, colour in ((50, stats.d50_m, "crimson"), (90, stats.d90_m, "darkorange")):
            ax.plot((stats.centroid_x_m + d / 2 * np.cos(angle)) * MM,
                    (stats.centroid_y_m + d / 2 * np.sin(angle)) * MM, color=colour, lw=1.2,
                    label=f"d{share} = {d * MM:.4g} mm")
        ax.set_aspect("equal", adjustable="datalim")
        side = "u" if plane in getattr(run, "tilted_planes", ()) else "x"
        ax.set_xlabel(f"{side} (mm)")
        ax.set_ylabel(f"{'v' if side == 'u' else 'y'} (mm)")
        ax.set_title("spot diagram", fontsize=9)
        ax.legend(fontsize=7, loc="upper right")
    ax = axes[-1]
    distance = np.abs(y - stats.centroid_y_m) if planar else np.hypot(x - stats.centroid_x_m,
                                                                       y - stats.centroid_y_m)
    edges = np.linspace(0.0, float(distance.max()) or 1e-9, min(40, max(8, len(rows) // 25)) + 1)
    per_bin, _ = np.histogram(distance, bins=edges, weights=w)
    size = 2.0 * np.diff(edges) if planar else np.pi * np.diff(edges ** 2)      # m of y, or m² of ring
    ax.stairs(per_bin / (size * (1e3 if planar else 1e6)), edges * MM, color="tab:blue", lw=1.2)
    ax.set_xlabel("|y - <y>| (mm)" if planar else "r about the centroid (mm)")
    unit = ("A" if charged else "rays") + (" / mm" if planar else " / mm²")
    ax.set_ylabel(f"{'current' if charged else 'ray'} density ({unit})")
    share = ax.twinx()
    order = np.argsort(distance)
    share.plot(distance[order] * MM, np.cumsum(w[order]) / w.sum(), color="black", lw=1.0)
    share.set_ylim(0.0, 1.05)
    share.set_ylabel(f"share of the {'current' if charged else 'rays'} enclosed")
    for d, colour in ((stats.d50_m, "crimson"), (stats.d90_m, "darkorange")):
        ax.axvline(d / 2 * MM, color=colour, lw=0.8, ls="--")
    ax.set_title("profile across y" if planar else "radial profile", fontsize=9)
    fig.suptitle(f"beam {run.name} at plane {plane} ({run.crossing_rule(plane).label})", fontsize=10)
    return fig


def rms_ellipse(u, slope, weights=None, points=181):
    """The rms ellipse of a phase-space distribution: the points (u, u') with
    d^T S^-1 d = 1, d the offset from the centroid and S the covariance of (u, u') (its area is
    π times the rms emittance; Lapostolle 1971), both weighted by ``weights`` (the rays' currents)
    when given.  None for fewer than two rays or a degenerate S."""
    if len(u) < 2:
        return None
    cov = np.cov(np.stack([u, slope]), bias=True, aweights=weights)
    try:
        root = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        return None
    angle = np.linspace(0.0, 2.0 * np.pi, points)
    circle = np.stack([np.cos(angle), np.sin(angle)])
    return root @ circle + np.array([[mean(u, weights)], [mean(slope, weights)]])


def waveforms_figure(grouped, runs, points=20_001) -> Figure | None:
    """The voltage of every electrode whose voltage changes, over the time the rays were traced
    (from the first start to the last end), one line each; waveform corners are sampled exactly.

    ``grouped`` is a :class:`tracer.groups.GroupedMaps`.  None when no voltage changes."""
    driven = [i for i, k in enumerate(grouped.group) if k >= 0]
    if not driven or not runs:
        return None
    t0 = min(float(run.starts["time_s"].min(initial=np.inf)) for run in runs)
    t1 = max(float(run.records["time_s"].max(initial=-np.inf)) for run in runs)
    if not t1 > t0:
        return None
    corners = grouped.arrays.corner
    times = np.union1d(np.linspace(t0, t1, points), corners[(corners >= t0) & (corners <= t1)])
    volts = np.array([grouped.voltages(t) for t in times])
    fig = new_figure((7, 3.5))
    ax = fig.subplots()
    for i in driven:
        ax.plot(times * 1e6, volts[:, i], lw=1.0, label=grouped.names[i])
    ax.set_xlabel("time (us)")
    ax.set_ylabel("voltage (V)")
    ax.set_title("electrode voltages over the traced time", fontsize=10)
    ax.legend(fontsize=8)
    return fig


def arrival_times_figure(run, plane) -> Figure | None:
    """Histogram of the arrival times at a plane (the crossings that count for its figures; on the
    clock, or each ray's flight time from its start when the run has no time zero,
    :func:`tracer.measure.arrival_times`), with the width Δt_FWHM and the resolving power
    t / (2 Δt_FWHM) of :class:`tracer.measure.PlaneStats`.  None for fewer than two crossings."""
    rows = counted(run, plane)
    if len(rows) < 2:
        return None
    stats = plane_figures(run, plane)
    times, _ = arrival_times(run, rows)
    fig = new_figure((6, 3.5))
    ax = fig.subplots()
    ax.hist(times * 1e9, bins=min(80, max(10, len(rows) // 10)), histtype="step", lw=1.2)
    ax.set_xlabel("arrival time (ns)" if run.time_zero_s is not None else "flight time from each ray's start (ns)")
    ax.set_ylabel("rays")
    ax.set_title(f"beam {run.name} at plane {plane}: FWHM {stats.time_fwhm_s * 1e9:.4g} ns, "
                 f"t / (2 FWHM) = {stats.resolving_power:.4g}", fontsize=10)
    return fig


def figure_jobs(field, runs, title=None, grouped=None, magnetic=None) -> list:
    """The pictures of a run, each as ``(file name, draw)``: ``draw(path)`` writes the picture and
    returns the path (or None when it has nothing to show).  Rays over the equipotentials come
    first (the only picture that evaluates the potential map), then landing energies, landing
    positions, and at each plane the phase space, the spot and the arrival times (in a static
    field each ray's flight time from its start); with voltages that change in time (``grouped``,
    a :class:`tracer.groups.GroupedMaps`) also the waveforms; with coils or axial fields (``magnetic``, a :class:`tracer.schema.MagneticSpec`)
    the coils and |B| on the axis.

    ``runs`` are BeamRuns or beams read back from a result file (``name``, ``records``,
    ``crossings``, ``paths``, ``planes``)."""
    sym = field.grid.symmetry
    jobs = [("rays.png", lambda path: plot_field(field, path, runs=runs, title=title)),
            ("landing_energy.png", lambda path: write(landing_energy_figure(runs), path)),
            ("landing_positions.png", lambda path: write(landing_positions_figure(runs, sym), path))]
    for run in runs:
        for plane in run.planes:
            jobs += [(f"phase_{run.name}_{plane}.png",
                      lambda path, run=run, plane=plane: plot_phase_space(run, plane, path, sym)),
                     (f"spot_{run.name}_{plane}.png",
                      lambda path, run=run, plane=plane: write(spot_figure(run, plane, sym), path)),
                     (f"arrival_{run.name}_{plane}.png",
                      lambda path, run=run, plane=plane: write(arrival_times_figure(run, plane), path))]
    if grouped is not None:
        jobs.append(("waveforms.png", lambda path: write(waveforms_figure(grouped, runs), path)))
    if magnetic:
        jobs.append(("magnetic.png", lambda path: write(magnetic_figure(magnetic, field), path)))
    return jobs


def run_figures(field, runs, out, title=None) -> list[Path]:
    """Draw all pictures of a run (:func:`figure_jobs`) into a folder; return the paths written."""
    files = [draw(Path(out) / name) for name, draw in figure_jobs(field, runs, title=title)]
    return [f for f in files if f is not None]


_UNITS = ((("_mrad", 1.0, "mrad"),) + tuple((si, 10.0 ** power, unit[1:]) for si, unit, power in FILE_UNITS)
          + (("_eV", 1.0, "eV"), ("_V", 1.0, "V"), ("_A", 1.0, "A")))
"""(SI suffix, factor, unit shown) of a scan column: the scan files' units (mm, ns, mrad)."""


_WORDS = {"transmission": "transmission (share of the rays)", "spot_rms": "rms spot radius",
          "centroid_x": "centroid x", "centroid_y": "centroid y", "divergence_x": "rms divergence x'",
          "divergence_y": "rms divergence y'", "energy_mean": "mean kinetic energy",
          "energy_std": "kinetic energy spread (std)", "tof_mean": "mean time of flight",
          "tof_std": "time-of-flight spread (std)", "tof_fwhm": "time-of-flight FWHM",
          "resolving_power": "resolving power t / (2 FWHM)", "d50": "d50 (50 % of the current)",
          "d90": "d90 (90 % of the current)", "fwhm_x": "FWHM of x", "fwhm_y": "FWHM of y",
          "focus_z": "best focus z (rms)", "focus_d50_z": "best focus z (d50)",
          "landed": "landed (share of the rays)", "landing_mean": "mean landing energy",
          "landing_std": "landing energy spread (std)", "left": "left the domain (share of the rays)",
          "ledger_worst": "worst energy-ledger residual"}
"""Words for the figures of a scan table (:mod:`tracer.measure`), by name without the unit."""


def _scaled(name):
    """(factor, axis label) of a table column: the figure in words, where it is (``[beam.][where.]``
    of :mod:`tracer.measure`), and the display unit from the name's suffix (fractions have none)."""
    where, _, figure = name.rpartition(".")
    factor, unit = 1.0, ""
    for suffix, f, u in _UNITS:
        if figure.endswith(suffix):
            factor, unit, figure = f, u, figure.removesuffix(suffix)
            break
    words = _WORDS.get(figure, figure.replace("_", " "))
    label = (f"{where}: " if where else "") + words
    return factor, f"{label} ({unit})" if unit else label


def _grid_of(x, y, v):
    """The values as a 2-D array when the sets are the product of the unique x and y, else None."""
    ux, uy = np.unique(x), np.unique(y)
    if len(ux) * len(uy) != len(x):
        return None
    ix, iy = np.searchsorted(ux, x), np.searchsorted(uy, y)
    if len(np.unique(ix * len(uy) + iy)) != len(x):
        return None
    grid = np.full((len(ux), len(uy)), np.nan)
    grid[ix, iy] = v
    return ux, uy, grid


def _scan_panel(fig, ax, table, names, figure, coils=()):
    factor, label = _scaled(figure)
    v = table[figure] * factor
    if len(names) == 1:
        x = table[scan_column(names[0], coils)]
        order = np.argsort(x, kind="stable")
        ax.plot(x[order], v[order], marker=".", lw=1)
        if grid_column(figure) in table.dtype.names:      # the grid error of each set, as a band
            err = table[grid_column(figure)][order] * factor
            ax.fill_between(x[order], v[order] - err, v[order] + err, alpha=0.3, lw=0, label="± grid")
        ax.set_xlabel(f"{names[0]} ({scan_unit(names[0], coils)})")
        ax.set_ylabel(label, fontsize=8)
        return
    x, y = table[scan_column(names[0], coils)], table[scan_column(names[1], coils)]
    grid = _grid_of(x, y, v)
    if grid is None:
        art = ax.scatter(x, y, c=v, s=16, cmap="viridis")
    else:
        art = ax.pcolormesh(grid[0], grid[1], grid[2].T, shading="nearest", cmap="viridis")
    fig.colorbar(art, ax=ax, label=label)
    ax.set_xlabel(f"{names[0]} ({scan_unit(names[0], coils)})")
    ax.set_ylabel(f"{names[1]} ({scan_unit(names[1], coils)})")


def varying(table, names):
    """The figure columns of a scan table worth a panel: not NaN at every set and not the same
    value at every set (a constant, such as a transmission of 1 throughout, says nothing a curve
    shows), and not a grid-error column (:func:`tracer.measure.grid_column`, drawn as a band about
    its figure)."""
    out = []
    errors = {grid_column(figure) for figure in table.dtype.names}
    for figure in table.dtype.names[len(names):]:
        values = table[figure][np.isfinite(table[figure])]
        if len(values) and values.min() != values.max() and figure not in errors:
            out.append(figure)
    return out


def scan_figures(table, names, title=None, coils=()) -> dict:
    """Scan pictures: each figure that varies (:func:`varying`) against the voltage or current (one
    varied name) or as a map (two), one panel each, titled in words with its unit.

    One figure per group of columns that share a prefix (the unprefixed figures, then one per
    ``[beam.][where.]`` of :mod:`tracer.measure`).  A figure's grid error (its
    :func:`tracer.measure.grid_column`, ``[grid_error] scan_rows``) is drawn as a band about its curve.

    Parameters
    ----------
    table : numpy structured array
        ``ScanResult.table``.
    names : sequence of str
        The varied electrodes and coils (1 or 2; none are drawn for more).
    title : str, optional
    coils : sequence of str
        The names among ``names`` that are coils (currents, A).

    Returns
    -------
    dict of str to matplotlib.figure.Figure
        By file stem: ``scan`` for the unprefixed figures, ``scan_<prefix>`` for the others (dots
        as underscores).
    """
    if len(names) not in (1, 2) or not len(table):
        return {}
    groups = {}
    for figure in varying(table, names):
        groups.setdefault(figure.rpartition(".")[0], []).append(figure)
    out = {}
    for prefix, figures in groups.items():
        cols = min(len(figures), 3 if len(names) == 1 else 2)
        rows = -(-len(figures) // cols)
        fig = new_figure((4.2 * cols, 2.9 * rows))
        axes = fig.subplots(rows, cols, squeeze=False)
        for ax, figure in zip(axes.ravel(), figures):
            _scan_panel(fig, ax, table, names, figure, coils)
            ax.set_title(_scaled(figure)[1], fontsize=8)
        for ax in axes.ravel()[len(figures):]:
            ax.set_visible(False)
        fig.suptitle(title or (f"scan: {prefix}" if prefix else "scan"), fontsize=10)
        out["scan" if not prefix else f"scan_{prefix.replace('.', '_')}"] = fig
    return out


def plot_scan(table, names, out, title=None, coils=()) -> list[Path]:
    """Write :func:`scan_figures` as ``<stem>.png`` files into the folder ``out``; the paths."""
    return [save(fig, Path(out) / f"{stem}.png", dpi=120)
            for stem, fig in scan_figures(table, names, title, coils).items()]


def tune_figure(result) -> Figure:
    """The trials of a tune: the figure against the voltage (one varied electrode) or against the
    trial number (several), with the best trial marked.

    Parameters
    ----------
    result : tracer.tuning.TuneResult
    """
    points = result.points
    names = list(result.voltages)
    factor, label = _scaled(result.figure)
    best = int(np.argmin(points["objective"]))
    fig = new_figure((6.5, 4))
    ax = fig.subplots()
    x = points[scan_column(names[0], result.coils)] if len(names) == 1 else np.arange(1, len(points) + 1)
    ax.scatter(x, points["value"] * factor, s=10, label="trials")
    ax.scatter([x[best]], [points["value"][best] * factor], s=60, marker="*", color="crimson",
               label="best: " + ", ".join(f"{n} = {v:.6g} {scan_unit(n, result.coils)}"
                                          for n, v in result.voltages.items()))
    ax.set_xlabel(f"{names[0]} ({scan_unit(names[0], result.coils)})" if len(names) == 1 else "trial")
    ax.set_ylabel(label)
    ax.set_title(f"tune: {result.goal}", fontsize=10)
    ax.legend(fontsize=8)
    return fig


def plot_tune(result, path) -> Path:
    """Write :func:`tune_figure` to a PNG (``path``)."""
    return save(tune_figure(result), path)


def optics_figure(props) -> Figure:
    """The axial potential and its first two derivatives, and the fundamental paraxial rays.

    Parameters
    ----------
    props : tracer.optics.LensProperties
    """
    z = props.z_m * MM
    fig = new_figure((9, 6.5))
    top, bottom = fig.subplots(2, 1, sharex=True)
    top.plot(z, props.axial[0], color="black", label="V (V)")
    twin = top.twinx()
    twin.plot(z, props.axial[1], color="tab:blue", lw=0.9, label="V' (V/m)")
    twin.plot(z, props.axial[2] * 1e-3, color="tab:orange", lw=0.9, label="V'' (kV/m²)")
    top.set_ylabel("axial potential V (V)")
    twin.set_ylabel("V' (V/m), V'' (kV/m²)")
    lines = top.get_lines() + twin.get_lines()
    top.legend(lines, [l.get_label() for l in lines], fontsize=8, loc="best")
    if props.mirror:
        top.axvline(props.turning_z_m * MM, color="crimson", ls="--")
        top.set_title(f"{props.species} at {props.energy_eV:g} eV turns back at "
                      f"z = {props.turning_z_m * MM:.4g} mm (a mirror)", fontsize=10)
    else:
        top.set_title(f"{props.species} at {props.energy_eV:g} eV: f = {props.f_image_m * MM:.4g} mm"
                      f" (image side), Cs = {props.cs_m * MM:.4g} mm, Cc = {props.cc_m * MM:.4g} mm",
                      fontsize=10)
        bottom.plot(z, props.ray_g, label="g: enters parallel at unit height")
        bottom.plot(z, props.ray_gbar, label="ḡ: leaves parallel at unit height")
        if np.isfinite(props.object_z_m):
            scale = np.nanmax(np.abs(props.ray_h)) or 1.0
            bottom.plot(z, props.ray_h / scale, label="h: from the object (scaled)")
        marks = [("F_o", props.focus_object_z_m), ("P_o", props.principal_object_z_m),
                 ("P_i", props.principal_image_z_m), ("F_i", props.focus_image_z_m),
                 ("object", props.object_z_m), ("image", props.image_z_m)]
        for label, zm in marks:
            if np.isfinite(zm) and z[0] <= zm * MM <= z[-1]:
                bottom.axvline(zm * MM, color="grey", lw=0.6, ls=":")
                bottom.annotate(label, (zm * MM, 1.02), xycoords=("data", "axes fraction"),
                                fontsize=7, ha="center")
        bottom.axhline(0.0, color="black", lw=0.5)
        bottom.legend(fontsize=8)
    bottom.set_xlabel("z (mm)")
    bottom.set_ylabel("ray height (relative)")
    return fig


def plot_optics(props, path) -> Path:
    """Write :func:`optics_figure` to a PNG (``path``)."""
    return save(optics_figure(props), path)
