"""Tests for plan.synthetic.truth_match: truth bodies against the voids found.

The fill classes follow the velocities of Davis and Annan (1989): air
(0.2998 m/ns) is faster than limestone (about 0.115 m/ns), clay (0.06 m/ns)
slower. Distances are checked against numpy's Euclidean norm. Body positions
and sizes are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from plan.synthetic.truth import FILL_VELOCITY_M_PER_NS, Body
from plan.synthetic.truth_match import expected_fill, match_truth_bodies
from reconstruct.interpret.bodies import FILL_AIR, FILL_WATER_OR_CLAY, STATUS_UNRESOLVED, STATUS_RESOLVED

ROCK = 0.115


def _body(name, centre, half, fill):
    return Body(name, "ellipsoid", tuple(centre), tuple(half), fill, FILL_VELOCITY_M_PER_NS[fill])


def _row(body_id, centre, fill, volume=100.0, status=STATUS_RESOLVED):
    x, y, z = centre
    return {"body_id": body_id, "status": status, "fill": fill, "volume_m3": volume,
            "centroid_x_m": x, "centroid_y_m": y, "centroid_z_m": z}


AIR = _body("air cavity", (42, 16, 90), (4, 3.5, 2.5), "air")
CLAY = _body("clay pocket", (31, 7, 84), (4.5, 3.5, 3), "clay")


def test_fill_class_from_the_velocity_against_the_rock():
    # Davis and Annan (1989): air faster, clay and water slower than rock
    assert expected_fill(AIR, ROCK) == FILL_AIR
    assert expected_fill(CLAY, ROCK) == FILL_WATER_OR_CLAY
    assert expected_fill(_body("w", (0, 0, 0), (1, 1, 1), "water"), ROCK) == FILL_WATER_OR_CLAY


def test_found_void_reports_offset_and_volumes():
    found = (43.0, 15.0, 89.0)
    [match] = match_truth_bodies([AIR], [_row(1, found, FILL_AIR, volume=180.0)], background_velocity_m_per_ns=ROCK,
                                 tolerance_m=4.0)
    assert match.found and match.body_id == 1
    assert match.offset_m == pytest.approx(np.linalg.norm(np.subtract(found, AIR.centre_m)))
    assert match.truth_volume_m3 == pytest.approx(4 / 3 * math.pi * 4 * 3.5 * 2.5)
    assert match.reach_m == pytest.approx(4.0 + 4.0)
    assert "found (body 1), centre 1.7 m off, volume 180 vs 147 m3" in match.line()


def test_wrong_fill_class_never_counts():
    [match] = match_truth_bodies([CLAY], [_row(1, CLAY.centre_m, FILL_AIR)], background_velocity_m_per_ns=ROCK,
                                 tolerance_m=4.0)
    assert match.outcome == "not found"
    assert "wrong fill class" in match.note


def test_body_beyond_the_reach_is_not_a_match():
    far = (42.0, 16.0, 90.0 - 4.0 - 2.01)  # largest half-size 4 m plus tolerance 2 m, just beyond
    [match] = match_truth_bodies([AIR], [_row(1, far, FILL_AIR)], background_velocity_m_per_ns=ROCK, tolerance_m=2.0)
    assert match.outcome == "not found"
    near = (42.0, 16.0, 90.0 - 5.99)
    [match] = match_truth_bodies([AIR], [_row(1, near, FILL_AIR)], background_velocity_m_per_ns=ROCK, tolerance_m=2.0)
    assert match.found


def test_unresolved_indication_is_not_found():
    rows = [_row(3, CLAY.centre_m, FILL_WATER_OR_CLAY, volume=24.0, status=STATUS_UNRESOLVED)]
    [match] = match_truth_bodies([CLAY], rows, background_velocity_m_per_ns=ROCK, tolerance_m=4.0)
    assert match.outcome == "indication" and not match.found
    assert "only an unresolved indication" in match.line()


def test_one_found_body_matches_one_truth_body_nearest_first():
    twin = _body("second air cavity", (46, 16, 90), (4, 3.5, 2.5), "air")
    rows = [_row(1, (45.0, 16.0, 90.0), FILL_AIR)]
    first, second = match_truth_bodies([AIR, twin], rows, background_velocity_m_per_ns=ROCK, tolerance_m=4.0)
    assert second.found and second.offset_m == pytest.approx(1.0)
    assert not first.found


def test_expected_below_resolution_is_said_in_the_line():
    small = _body("small cavity", (54.5, 22.5, 80.5), (0.75, 0.75, 0.75), "air")
    [missed] = match_truth_bodies([small], [], background_velocity_m_per_ns=ROCK, tolerance_m=4.0,
                                  expected_resolved=[False])
    assert missed.line().startswith("small cavity: not found, as expected")
    [seen] = match_truth_bodies([small], [_row(2, (54.0, 22.0, 81.0), FILL_AIR)], background_velocity_m_per_ns=ROCK,
                                tolerance_m=4.0, expected_resolved=[False])
    assert "found although smaller than the resolution" in seen.line()


def test_bad_arguments_are_refused():
    with pytest.raises(ValueError, match="tolerance_m"):
        match_truth_bodies([AIR], [], background_velocity_m_per_ns=ROCK, tolerance_m=-1.0)
    with pytest.raises(ValueError, match="expected_resolved"):
        match_truth_bodies([AIR], [], background_velocity_m_per_ns=ROCK, tolerance_m=1.0,
                           expected_resolved=[True, False])


def test_roof_depths_of_the_truth_and_of_the_body_found_are_kept_side_by_side():
    # the truth roof depth is the caller's (ground minus the top of the body); the found one is the
    # void table's roof_depth_m; a body not found has none
    row = dict(_row(1, (42.5, 16.0, 90.0), FILL_AIR), roof_depth_m=7.0)
    air_roof = 100.0 - (AIR.centre_m[2] + AIR.half_size_m[2])
    matches = match_truth_bodies([AIR, CLAY], [row], background_velocity_m_per_ns=ROCK, tolerance_m=4.0,
                                 truth_roof_depths_m=[air_roof, 10.0])
    assert matches[0].truth_roof_depth_m == pytest.approx(7.5) and matches[0].found_roof_depth_m == 7.0
    assert matches[1].outcome == "not found" and matches[1].found_roof_depth_m is None
    assert matches[1].as_dict()["truth_roof_depth_m"] == 10.0
    with pytest.raises(ValueError, match="truth_roof_depths_m has 1 entries, expected 2"):
        match_truth_bodies([AIR, CLAY], [row], background_velocity_m_per_ns=ROCK, tolerance_m=4.0,
                           truth_roof_depths_m=[1.0])
