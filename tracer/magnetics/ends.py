"""Whether each round magnetic source has faded at the ends of the domain's axis.

A coil's or an axial field's B reaches beyond any domain; tracer sees it only inside.  Rays meet
none of it beyond the ends, and the paraxial optics take the ends of the axis as field-free, so
the focal lengths, foci and principal planes for an object at infinity (and the image rotation
over the whole axis) are those of the lens cut there.  :func:`cut_fields` names each source whose
|B| on the axis at an end of the domain is above :data:`END_SHARE` of its largest |B| on the axis
within the domain (the config's warning).
"""

from __future__ import annotations

import numpy as np

END_SHARE = 0.01
"""The share of a source's peak |B| on the axis above which its field at a domain end counts as
cut (a loop's far field falls as z^-3, so 1 % of the peak leaves about 1 % of its integral of B
beyond that end: common practice)."""


class CutFieldWarning(UserWarning):
    """A coil's or axial field's |B| at an end of the domain is not small against its peak."""


def _candidates(source, z0, z1):
    """The points of the axis where a source's |B| within [z0, z1] may be largest, and the ends: a
    winding's on-axis field is largest at its centre (a sum of loop fields symmetric about it), a
    Glaser bell's at its centre, a table's at one of its nodes."""
    fit = getattr(source, "fit", None)
    if fit is not None:
        inner = np.asarray(fit.z, dtype=float)
    elif hasattr(source, "center_z_m"):
        inner = np.array([source.center_z_m])
    else:
        inner = np.array([0.5 * (source.z_m[0] + source.z_m[1])])
    return np.concatenate([[z0, z1], np.clip(inner, z0, z1)])


def _on_axis(source, z):
    """|B_z| on the axis of a coil (at 1 A: the share does not depend on the current) or an axial
    field."""
    if hasattr(source, "on_axis"):
        return np.abs(source.on_axis(z))
    from tracer.magnetics.coil import coil_field

    return np.abs(coil_field(source, z, np.zeros_like(z), current_A=1.0)[1])


def cut_fields(spec, z_span):
    """The round sources whose field has not faded at an end of the axis.

    Parameters
    ----------
    spec : tracer.schema.MagneticSpec
        Its coils and axial fields (uniform fields have no far field to cut).
    z_span : (float, float)
        The domain's z range (m).

    Returns
    -------
    list of str
        One message per cut source, naming its config key and giving |B| at each cut end as a
        share of its peak on the axis (and where the peak is).
    """
    z0, z1 = z_span
    found = []
    for key, sources in (("coil", spec.coils), ("axial_field", spec.profiles)):
        for i, source in enumerate(sources):
            z = _candidates(source, z0, z1)
            b = _on_axis(source, z)
            peak = float(b.max())
            if not peak > 0.0:
                continue
            ends = [(share, at) for share, at in ((b[0] / peak, z0), (b[1] / peak, z1)) if share > END_SHARE]
            if not ends:
                continue
            where = " and ".join(f"{share:.1%} at z = {at * 1e3:g} mm" for share, at in ends)
            found.append(
                f"{key}[{i}] ({source.name!r}): |B| on the axis is {where}, of its peak (at z = "
                f"{float(z[np.argmax(b)]) * 1e3:g} mm): the domain cuts the field there. Rays meet none "
                "of it beyond, and the paraxial optics take the ends as field-free (the focal lengths "
                "for an object at infinity are those of the cut lens); extend domain.z_mm until it is "
                f"below {END_SHARE:.0%} where that matters")
    return found
