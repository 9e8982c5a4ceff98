"""Bodies of a truth model against the voids found in the inverted cube.

Used by the demo chain (:mod:`plan.demo`) and its tests to say, honestly,
which of the invented bodies the inversion found. The rule:

1. **Fill class.** A truth body faster than the background rock (air) should
   appear as a body of fill ``air`` (:data:`reconstruct.interpret.bodies.FILL_AIR`), a
   slower one (clay, water) as one of fill ``water_or_clay``
   (:data:`reconstruct.interpret.bodies.FILL_WATER_OR_CLAY`).
   Velocities of the fills: Davis and Annan (1989).
2. **Position.** A found body is a candidate for a truth body when it has the
   right fill class and its centroid lies within ``reach`` of the truth
   centre: the body's largest half-size plus ``tolerance_m`` (a centroid
   inside the body's bounding sphere, grown by the tolerance). The caller
   chooses the tolerance; the demo uses two model cells, the accuracy the
   end-to-end test asks of the strongest void (common practice, no published
   source).
3. **One to one.** Pairs are taken nearest first; a found body matches at
   most one truth body and a truth body at most one found body.
4. **Found or not.** A matched body with status ``resolved`` (a void) counts
   as found; a matched body with status ``unresolved`` (smaller than the
   resolution at its depth) is reported as an indication, not as found. A body of the wrong fill class
   near a truth body is named in the note but never counts.

Whether a body was *expected* to be resolved is the caller's figure: the
body's largest extent (twice its largest half-size) against the resolution
at its depth (the first Fresnel zone width written by the void search,
Williamson 1991).

References
----------
Davis, J. L. and Annan, A. P. (1989), Ground-penetrating radar for
high-resolution mapping of soil and rock stratigraphy, Geophysical
Prospecting 37(5), 531-551.
Williamson, P. R. (1991), A guide to the limits of resolution imposed by
scattering in ray tomography, Geophysics 56(2), 202-207.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reconstruct.interpret.bodies import FILL_AIR, FILL_WATER_OR_CLAY, STATUS_RESOLVED

from plan.synthetic.truth import Body

__all__ = ["TruthMatch", "expected_fill", "match_truth_bodies"]

_FILL_WORDS = {FILL_AIR: "air-filled", FILL_WATER_OR_CLAY: "water- or clay-filled"}


@dataclass(frozen=True)
class TruthMatch:
    """How one truth body fared; lengths in m, volumes in m^3.

    ``outcome`` is ``found``, ``indication`` (matched by an unresolved
    indication only) or ``not found``.
    """

    name: str
    expected_fill: str
    truth_centre_m: tuple
    truth_volume_m3: float
    reach_m: float
    outcome: str
    body_id: int | None = None
    offset_m: float | None = None
    found_volume_m3: float | None = None
    found_centre_m: tuple | None = None
    expected_resolved: bool | None = None
    note: str = ""
    truth_roof_depth_m: float | None = None
    found_roof_depth_m: float | None = None

    @property
    def found(self) -> bool:
        return self.outcome == "found"

    def line(self) -> str:
        """One line of the summary: the body, the outcome and its figures."""
        if self.outcome == "not found":
            text = f"{self.name}: not found"
            if self.expected_resolved is False:
                text += ", as expected (smaller than the resolution at its depth)"
        else:
            word = "found" if self.outcome == "found" else "only an unresolved indication"
            text = (f"{self.name}: {word} (body {self.body_id}), centre {self.offset_m:.1f} m off, "
                    f"volume {self.found_volume_m3:.0f} vs {self.truth_volume_m3:.0f} m3")
            if self.outcome == "found" and self.expected_resolved is False:
                text += " (found although smaller than the resolution at its depth)"
        return text + (f"; {self.note}" if self.note else "")

    def as_dict(self) -> dict:
        return {
            "name": self.name, "outcome": self.outcome, "expected_fill": self.expected_fill,
            "truth_centre_m": list(self.truth_centre_m), "truth_volume_m3": self.truth_volume_m3,
            "reach_m": self.reach_m, "body_id": self.body_id, "offset_m": self.offset_m,
            "found_volume_m3": self.found_volume_m3,
            "found_centre_m": None if self.found_centre_m is None else list(self.found_centre_m),
            "expected_resolved": self.expected_resolved, "note": self.note, "summary": self.line(),
            "truth_roof_depth_m": self.truth_roof_depth_m, "found_roof_depth_m": self.found_roof_depth_m,
        }


def expected_fill(body: Body, background_velocity_m_per_ns: float) -> str:
    """The fill class a truth body should show: ``air`` (faster than the background) or ``water_or_clay``."""
    return FILL_AIR if body.velocity_m_per_ns > background_velocity_m_per_ns else FILL_WATER_OR_CLAY


def _optional_float(value) -> float | None:
    return None if value is None or not math.isfinite(float(value)) else float(value)


def _centre(row) -> np.ndarray:
    return np.array([float(row["centroid_x_m"]), float(row["centroid_y_m"]), float(row["centroid_z_m"])])


def match_truth_bodies(truth_bodies, found_rows, *, background_velocity_m_per_ns: float, tolerance_m: float,
                       expected_resolved=None, truth_roof_depths_m=None) -> list[TruthMatch]:
    """Match truth bodies to found bodies (see the module notes for the rule).

    Parameters
    ----------
    truth_bodies : sequence of plan.synthetic.truth.Body
    found_rows : sequence of mapping
        Rows of the void table (:func:`reconstruct.interpret.bodies.void_table_rows`, or
        the ``bodies`` of ``voids.json``): keys ``body_id``, ``status``, ``fill``,
        ``volume_m3``, ``centroid_x_m``, ``centroid_y_m``, ``centroid_z_m``.
    background_velocity_m_per_ns : float
        Background rock velocity of the truth model (decides fast or slow).
    tolerance_m : float
        Added to each body's largest half-size to give its reach, m (>= 0).
    expected_resolved : sequence of bool or None, optional
        Per truth body, whether it is larger than the resolution at its depth.
    truth_roof_depths_m : sequence of float or None, optional
        Per truth body, the depth of its top below the ground surface, m; kept
        beside the found body's ``roof_depth_m`` (when its row has one).

    Returns
    -------
    list of TruthMatch, in the order of ``truth_bodies``.
    """
    bodies = list(truth_bodies)
    rows = list(found_rows)
    if not (math.isfinite(tolerance_m) and tolerance_m >= 0):
        raise ValueError(f"tolerance_m must be a number >= 0 (got {tolerance_m!r})")
    if expected_resolved is None:
        expected_resolved = [None] * len(bodies)
    if truth_roof_depths_m is None:
        truth_roof_depths_m = [None] * len(bodies)
    for name, values in (("expected_resolved", expected_resolved), ("truth_roof_depths_m", truth_roof_depths_m)):
        if len(values) != len(bodies):
            raise ValueError(f"{name} has {len(values)} entries, expected {len(bodies)}")
    fills = [expected_fill(b, background_velocity_m_per_ns) for b in bodies]
    reach = [max(b.half_size_m) + tolerance_m for b in bodies]
    centres = [_centre(r) for r in rows]
    distance = np.array([[float(np.linalg.norm(c - np.asarray(b.centre_m))) for c in centres] for b in bodies])
    distance = distance.reshape(len(bodies), len(rows))
    candidates = sorted(
        (distance[i, j], i, j) for i in range(len(bodies)) for j in range(len(rows))
        if rows[j]["fill"] == fills[i] and distance[i, j] <= reach[i])
    chosen: dict[int, int] = {}
    used: set[int] = set()
    for _, i, j in candidates:
        if i not in chosen and j not in used:
            chosen[i] = j
            used.add(j)
    matches = []
    for i, body in enumerate(bodies):
        common = dict(name=body.name, expected_fill=fills[i], truth_centre_m=tuple(body.centre_m),
                      truth_volume_m3=float(body.volume_m3), reach_m=float(reach[i]),
                      expected_resolved=expected_resolved[i],
                      truth_roof_depth_m=None if truth_roof_depths_m[i] is None else float(truth_roof_depths_m[i]))
        if i in chosen:
            j = chosen[i]
            row = rows[j]
            outcome = "found" if row["status"] == STATUS_RESOLVED else "indication"
            matches.append(TruthMatch(**common, outcome=outcome, body_id=int(row["body_id"]),
                                      offset_m=float(distance[i, j]), found_volume_m3=float(row["volume_m3"]),
                                      found_centre_m=tuple(float(v) for v in centres[j]),
                                      found_roof_depth_m=_optional_float(row.get("roof_depth_m"))))
            continue
        wrong = [j for j in range(len(rows)) if rows[j]["fill"] != fills[i] and distance[i, j] <= reach[i]]
        if wrong:
            j = min(wrong, key=lambda k: distance[i, k])
            note = (f"body {rows[j]['body_id']} lies {distance[i, j]:.1f} m from its centre but its fill is "
                    f"{_FILL_WORDS.get(rows[j]['fill'], rows[j]['fill'])}, the wrong fill class")
        else:
            note = f"no {_FILL_WORDS.get(fills[i], fills[i])} body within {reach[i]:.1f} m of its centre"
        matches.append(TruthMatch(**common, outcome="not found", note=note))
    return matches
