"""Nodes placed in blast holes: found so that the planner can warn about radio near explosives.

Radio-frequency energy can fire electric detonators, and the nodes talk by
radio. A node string in a blast hole must come out before the hole is
charged, and nodes and radios must keep the separation distances of the
applicable standard from charged or primed holes: for example BS 6657,
"Assessment of inadvertent initiation of bridge wire electro-explosive
devices by radio-frequency radiation", or the explosives industry's guide to
radio-frequency risks with commercial electric detonators (both cited from
memory, not checked). The site's explosives rules prevail.

A node counts as placed in a blast hole when it lies within
:data:`IN_HOLE_TOLERANCE_M` of the axis of

* a borehole of kind ``blast_hole`` (``boreholes[i].kind``), along its
  surveyed or planned path, or
* a planned hole of a blast pattern (``planned_works[i].holes``), between its
  collar and its toe (``hole_depth_m + subdrill_m`` below the collar).
"""

from __future__ import annotations

import numpy as np

from reconstruct.io.site import Site

__all__ = ["IN_HOLE_TOLERANCE_M", "RADIO_NEAR_EXPLOSIVES", "nodes_in_blast_holes", "blast_hole_warning"]

#: Largest distance (m) from a hole's axis at which a node counts as in the hole: a string in a hole
#: of 0.1-0.2 m diameter lies within centimetres of its axis; 0.5 m allows for collar survey error
#: (common practice, no published source).
IN_HOLE_TOLERANCE_M = 0.5

#: What to do about it, in words (the planner prints it after the list of nodes).
RADIO_NEAR_EXPLOSIVES = (
    "radio-frequency energy can fire electric detonators: take these nodes out before the holes are "
    "charged, keep nodes and radios at least the separation distances of the applicable standard (for "
    "example BS 6657, or the explosives industry's guide to radio-frequency risks with commercial "
    "electric detonators; cited from memory) from charged or primed holes, and follow the site's "
    "explosives rules"
)


def _in_borehole(hole, xyz: np.ndarray, tolerance_m: float) -> np.ndarray:
    along = hole.depth_nearest_m(xyz)
    return np.linalg.norm(hole.point_at(along) - xyz, axis=1) <= tolerance_m


def nodes_in_blast_holes(site: Site, ids, xyz_m, tolerance_m: float = IN_HOLE_TOLERANCE_M) -> list[tuple[str, str]]:
    """The nodes placed in a blast hole, drilled or planned.

    Parameters
    ----------
    site : Site
    ids : sequence of str
        Node ids.
    xyz_m : array_like (n, 3)
        Node positions, m.
    tolerance_m : float
        Largest distance from a hole's axis, m.

    Returns
    -------
    list of (str, str)
        ``(node id, where)`` in node order, ``where`` naming the hole(s),
        e.g. ``"blast hole B07"`` or ``"planned hole B07 of 'next blast'"``.
    """
    xyz = np.atleast_2d(np.asarray(xyz_m, dtype=float))
    where = [[] for _ in range(len(xyz))]
    if len(xyz) == 0:
        return []
    for hole in site.boreholes:
        if hole.kind == "blast_hole":
            for k in np.flatnonzero(_in_borehole(hole, xyz, tolerance_m)):
                where[k].append(f"blast hole {hole.id}")
    for work in site.planned_works:
        if not work.has_holes:
            continue
        columns = work.hole_columns_m()
        for hole, (collar_z, _, toe_z) in zip(work.holes, columns):
            plan = np.hypot(xyz[:, 0] - hole.collar_m[0], xyz[:, 1] - hole.collar_m[1])
            inside = ((plan <= tolerance_m) & (xyz[:, 2] <= collar_z + tolerance_m)
                      & (xyz[:, 2] >= toe_z - tolerance_m))
            for k in np.flatnonzero(inside):
                where[k].append(f"planned hole {hole.id} of '{work.name}'")
    return [(str(ids[k]), " and ".join(w)) for k, w in enumerate(where) if w]


def blast_hole_warning(site: Site, ids, xyz_m) -> str | None:
    """The warning, in words, about the nodes placed in blast holes; None when none is.

    Lists every such node with its hole(s) (:func:`nodes_in_blast_holes`),
    then :data:`RADIO_NEAR_EXPLOSIVES`.
    """
    found = nodes_in_blast_holes(site, ids, xyz_m)
    if not found:
        return None
    listed = "; ".join(f"{node} in {where}" for node, where in found)
    return (f"{len(found)} node{'s are' if len(found) > 1 else ' is'} placed in blast holes ({listed}). "
            f"{RADIO_NEAR_EXPLOSIVES[0].upper()}{RADIO_NEAR_EXPLOSIVES[1:]}.")
