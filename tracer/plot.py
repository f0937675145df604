"""matplotlib figures: electrodes with equipotentials and rays, histograms, scan curves.

Every figure is written to a PNG file with labelled axes and units; the functions
return the path they wrote.  The Agg backend is used, so no screen is needed.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

MM = 1e3


def _shape_outlines(table):
    """Yield (electrode index, (k, 2) array of outline points in metres) for every shape."""
    for i, kind in enumerate(table.kind):
        if kind == 0:
            s, c = table.start[i], table.count[i]
            yield table.owner[i], table.points[s:s + c]
        else:
            cz, rho_in, rho_out, t0, t1 = table.sector[i]
            t = np.linspace(t0, t1, 64)
            outer = np.column_stack([cz + rho_out * np.cos(t), rho_out * np.sin(t)])
            inner = np.column_stack([cz + rho_in * np.cos(t[::-1]), rho_in * np.sin(t[::-1])])
            yield table.owner[i], np.vstack([outer, inner])


def draw_electrodes(ax, table, labels=True) -> None:
    """Fill every electrode shape and label each electrode once, at its largest shape."""
    colours = plt.get_cmap("tab10")
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


def plot_field(field, path, paths=(), title: str | None = None, levels: int = 24) -> Path:
    """Electrodes, labelled equipotential contours and (optionally) ray paths.

    Parameters
    ----------
    field : PotentialMap
    path : str or Path
        The PNG to write.
    paths : sequence of (n, 2) arrays
        Ray paths as (z, r) points in metres.
    title : str, optional
    levels : int
        Number of equipotential contours.
    """
    g = field.grid
    nz = min(g.nz, 800)
    nr = min(g.nr, 400)
    z = np.linspace(g.z0, g.z1, nz)
    r = np.linspace(g.r0, g.r1, nr)
    zz, rr = np.meshgrid(z, r, indexing="ij")
    v = field.potential(zz.ravel(), rr.ravel()).reshape(zz.shape)
    span = (g.z1 - g.z0) / (g.r1 - g.r0)
    width = 12.0
    fig, ax = plt.subplots(figsize=(width, min(8.0, max(2.5, 1.4 + width / span))),
                           layout="constrained")
    lo, hi = float(v.min()), float(v.max())
    if hi > lo:
        cs = ax.contour(zz * MM, rr * MM, v, levels=np.linspace(lo, hi, levels + 2)[1:-1],
                        cmap="viridis", linewidths=0.7, zorder=2)
        ax.clabel(cs, cs.levels[::3], fmt="%.4g V", fontsize=6)
    draw_electrodes(ax, field.table)
    for p in paths:
        ax.plot(p[:, 0] * MM, p[:, 1] * MM, color="crimson", lw=0.5, alpha=0.8, zorder=4)
    side = "r" if g.symmetry == "axial" else "y"
    ax.set_xlabel("z (mm)")
    ax.set_ylabel(f"{side} (mm)")
    ax.set_xlim(g.z0 * MM, g.z1 * MM)
    ax.set_ylim(g.r0 * MM, g.r1 * MM)
    ax.set_aspect("equal")
    ax.set_title(title or "electrodes and equipotentials", fontsize=10)
    fig.savefig(path, dpi=150)
    plt.close(fig)
    return Path(path)


def _path_zr(path, symmetry):
    """(z, r) points of a ray path record array (r = hypot(x, y) in axial, y in planar)."""
    r = path["y_m"] if symmetry == "planar" else np.hypot(path["x_m"], path["y_m"])
    return np.column_stack([path["z_m"], r])


def plot_landing_energy(runs, path) -> Path | None:
    """Histograms of the landing kinetic energy, one panel per beam, one colour per electrode."""
    panels = [(run, run.records[run.records["status"] == "landed"]) for run in runs]
    panels = [(run, rows) for run, rows in panels if len(rows)]
    if not panels:
        return None
    fig, axes = plt.subplots(len(panels), 1, figsize=(7, 2.8 * len(panels)), layout="constrained",
                             squeeze=False)
    for ax, (run, rows) in zip(axes[:, 0], panels):
        for name in np.unique(rows["electrode"]):
            e = rows["energy_eV"][rows["electrode"] == name]
            ax.hist(e, bins=min(60, max(10, len(e) // 10)), histtype="step", lw=1.2,
                    label=f"{name} ({len(e)})")
        ax.set_xlabel("landing kinetic energy (eV)")
        ax.set_ylabel("rays")
        ax.set_title(f"beam {run.name}: landing energies", fontsize=10)
        ax.legend(fontsize=8)
    fig.savefig(path, dpi=150)
    plt.close(fig)
    return Path(path)


def plot_landing_positions(runs, path) -> Path | None:
    """Where rays landed: z against r (or y) of each landing, one colour per electrode."""
    rows = [(run, run.records[run.records["status"] == "landed"]) for run in runs]
    rows = [(run, r) for run, r in rows if len(r)]
    if not rows:
        return None
    fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
    side = "y" if rows[0][0].symmetry == "planar" else "r"
    for run, r in rows:
        zr = _path_zr(r, run.symmetry)
        for name in np.unique(r["electrode"]):
            sel = r["electrode"] == name
            ax.scatter(zr[sel, 0] * MM, zr[sel, 1] * MM, s=4, label=f"{run.name} on {name}")
    ax.set_xlabel("z (mm)")
    ax.set_ylabel(f"{side} (mm)")
    ax.set_title("landing positions", fontsize=10)
    ax.legend(fontsize=8, markerscale=3)
    fig.savefig(path, dpi=150)
    plt.close(fig)
    return Path(path)


def plot_phase_space(run, plane, path) -> Path | None:
    """Transverse phase space at a plane: (r, r') in axial symmetry, (y, y') in planar."""
    rows = run.at_plane(plane)
    if not len(rows):
        return None
    if run.symmetry == "planar":
        u, slope, side = rows["y_m"], rows["py"] / rows["pz"], "y"
    else:
        u = np.hypot(rows["x_m"], rows["y_m"])
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = np.where(u > 0, (rows["x_m"] * rows["px"] + rows["y_m"] * rows["py"])
                             / (u * rows["pz"]), 0.0)
        side = "r"
    fig, ax = plt.subplots(figsize=(5.5, 4.2), layout="constrained")
    ax.scatter(u * MM, slope * 1e3, s=3, c=rows["energy_eV"], cmap="viridis")
    ax.set_xlabel(f"{side} (mm)")
    ax.set_ylabel(f"{side}' (mrad)")
    ax.set_title(f"beam {run.name} at plane {plane}", fontsize=10)
    fig.savefig(path, dpi=150)
    plt.close(fig)
    return Path(path)


def run_figures(field, runs, out, title=None) -> list[Path]:
    """All pictures of a run: rays over the equipotentials, landings, phase space at each plane."""
    out = Path(out)
    paths = [_path_zr(p, run.symmetry) for run in runs for p in run.paths]
    files = [plot_field(field, out / "rays.png", paths=paths, title=title),
             plot_landing_energy(runs, out / "landing_energy.png"),
             plot_landing_positions(runs, out / "landing_positions.png")]
    files += [plot_phase_space(run, plane, out / f"phase_{run.name}_{plane}.png")
              for run in runs for plane in run.planes]
    return [f for f in files if f is not None]
