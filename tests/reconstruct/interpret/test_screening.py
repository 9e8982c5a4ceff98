"""Tests for ``reconstruct.interpret.screening``: scaled span, critical span, factor of safety, ranking, holes.

Outside sources:

* the scaled span formula of Carter (1992, 2014),
  C_s = S sqrt(gamma / (T (1 + S/L) (1 - 0.4 cos theta))), the critical span
  S_c = 3.3 Q^0.43 sinh^0.0016(Q) and the factor of safety FoS = S_c / C_s,
  all written from memory (see the module docstring); we could not check a
  worked example printed in the papers, so the expected values below are
  worked by hand from those formulas, step by step in the comments;
* the acceptance classes A-G of Carter (2014), "Guidelines for use of the
  Scaled Span Method for surface crown pillar assessment": the FoS ranges
  A < 0.5, B 0.5-1.0, C 1.0-1.3, D 1.3-1.5, E 1.5-1.8, F 1.8-2.0, G > 2.0
  (from memory, not checked against the paper);
* distances between blast holes and a body against scipy.optimize (a
  general-purpose minimiser) and plain geometry;
* rule-of-thumb flags are marked as common practice.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from reconstruct.errors import InputError
from reconstruct.interpret.estimates import Estimate
from reconstruct.interpret.screening import (
    CROWN_CLASSES,
    RANKING_RULE,
    SCREENING_COLUMNS,
    ScreeningEntry,
    ScreeningOptions,
    critical_span_m,
    crown_class,
    crown_factor_of_safety,
    hole_distances_m,
    scaled_span_m,
    screen_voids,
)
from reconstruct.io.site import BlastHole, PlannedWork
from reconstruct.interpret.bodies import (
    FILL_AIR,
    FILL_WATER_OR_CLAY,
    STATUS_UNRESOLVED,
    STATUS_RESOLVED,
    VoidBody,
)


def test_scaled_span_worked_by_hand():
    # S = 10, T = 10, L = 10 (S_R = 1), gamma = 2.7, theta = 0:
    # 10 sqrt(2.7 / (10 * 2 * 0.6)) = 10 sqrt(0.225) = 4.7434
    assert scaled_span_m(10, 10, 10, 2.7, 0.0) == pytest.approx(4.7434, abs=1e-4)
    # vertical walls, theta = 90: 1 - 0.4 cos 90 = 1; S = 6, T = 24, L = 12, gamma = 2.6
    # 6 sqrt(2.6 / (24 * 1.5 * 1)) = 6 * 0.26874 = 1.6125
    assert scaled_span_m(6, 24, 12, 2.6, 90.0) == pytest.approx(1.6125, abs=1e-4)
    assert math.isinf(scaled_span_m(6, 0.0, 12))  # no roof at all


def test_critical_span_worked_by_hand():
    # Q = 1: 3.3 * 1 * sinh(1)^0.0016 = 3.3 * 1.17520^0.0016 = 3.3 * 1.000258 = 3.30085
    assert critical_span_m(1.0) == pytest.approx(3.30085, abs=1e-4)
    # Q = 10: 3.3 * 10^0.43 * sinh(10)^0.0016 = 3.3 * 2.691535 * 1.015002 = 9.0153
    assert critical_span_m(10.0) == pytest.approx(9.0153, abs=1e-3)


def _body(**changes):
    base = dict(
        body_id=1, status=STATUS_RESOLVED, fill=FILL_AIR, n_cells=100, volume_m3=100.0,
        centroid_m=(0.0, 0.0, 80.0), bbox_min_m=(-3.0, -2.0, 78.0), bbox_max_m=(3.0, 2.0, 82.0),
        roof_elevation_m=82.0, roof_depth_m=18.0, roof_thickness_m=18.0, nearest_work=None,
        standoff_m=math.inf, roof_below_work_m=math.inf, roof_below_work_name=None,
        span_m=7.2, width_m=4.0, length_m=6.0, equivalent_diameter_m=5.8, resolution_m=6.0,
        mean_velocity_m_per_ns=0.2, extreme_velocity_m_per_ns=0.25, background_velocity_m_per_ns=0.115,
        peak_anomaly_ns_per_m=-4.0, threshold_ns_per_m=0.3, ray_covered_fraction=0.9, mean_ray_count=20.0,
        confidence="high", confidence_reason="test")
    base.update(changes)
    return VoidBody(**base)


def test_ranking_puts_works_then_thin_roofs_first_with_indications_among_voids():
    deep = _body(body_id=1)
    thin = _body(body_id=2, roof_thickness_m=2.0)  # thinner than its 4 m width
    under_road = _body(body_id=3, roof_thickness_m=2.0, nearest_work="haul road", standoff_m=2.0,
                       roof_below_work_m=2.0, roof_below_work_name="haul road")
    small = _body(body_id=4, status=STATUS_UNRESOLVED, roof_thickness_m=0.5, confidence="low")
    ranked = screen_voids([deep, small, thin, under_road])
    # under a work first; then, with no work near, by the roof: the indication's 0.5 m roof before 2 m and 18 m
    assert [e.body_id for e in ranked] == [3, 4, 2, 1]
    assert [e.rank for e in ranked] == [1, 2, 3, 4]
    assert "under 'haul road'" in ranked[0].reasons and "thinner than the body is wide" in ranked[0].reasons
    assert "below the resolution" in ranked[1].reasons
    assert ranked[0].thinnest_roof_m == pytest.approx(2.0)
    assert ranked[0].roof_thickness_m == pytest.approx(2.0) and ranked[0].roof_below_work_m == pytest.approx(2.0)
    assert ranked[3].roof_below_work_m is None and ranked[3].standoff_m is None  # no work near body 1
    # scaled span of body 1 by the formula: S 4, T 18, L 6
    assert ranked[3].scaled_span_m == pytest.approx(4 * math.sqrt(2.7 / (18 * (1 + 4 / 6) * 0.6)))
    assert all(e.bounds.startswith("none available") for e in ranked)


def test_critical_span_only_with_q_and_slow_bodies_named():
    body = _body(fill=FILL_WATER_OR_CLAY, roof_thickness_m=3.0, width_m=8.0, length_m=8.0)
    assert screen_voids([body])[0].critical_span_m is None
    entry = screen_voids([body], ScreeningOptions(rock_mass_q=0.1))[0]
    assert entry.critical_span_m == pytest.approx(critical_span_m(0.1))
    assert "exceeds the critical span" in entry.reasons and "water- or clay-filled" in entry.reasons


def test_close_standoff_is_a_concern():
    near = _body(nearest_work="blast", standoff_m=3.0)  # closer than its 7.2 m span
    far = dataclasses.replace(near, body_id=2, standoff_m=30.0)
    ranked = screen_voids([far, near])
    assert ranked[0].body_id == 1 and "closer than its own span" in ranked[0].reasons


def test_bad_options_name_the_field():
    with pytest.raises(InputError, match="specific_gravity must be between 1 and 5"):
        ScreeningOptions(specific_gravity=0.2)
    with pytest.raises(InputError, match="dip_deg"):
        ScreeningOptions(dip_deg=120)
    with pytest.raises(InputError, match="rock_mass_q"):
        ScreeningOptions(rock_mass_q=-1)


def test_factor_of_safety_worked_by_hand():
    # S = 10, T = 10, L = 10, gamma 2.7, theta 0: C_s = 4.7434 (above); Q = 10: S_c = 9.0153 (above)
    # FoS = 9.0153 / 4.7434 = 1.9006, in class F (1.8-2.0) of Carter (2014, from memory)
    fos = crown_factor_of_safety(critical_span_m(10.0), scaled_span_m(10, 10, 10, 2.7, 0.0))
    assert fos == pytest.approx(1.9006, abs=1e-3)
    assert crown_class(fos).letter == "F"
    # Q = 1 over the same crown: 3.30085 / 4.7434 = 0.6959, class B (0.5-1.0)
    fos = crown_factor_of_safety(critical_span_m(1.0), scaled_span_m(10, 10, 10, 2.7, 0.0))
    assert fos == pytest.approx(0.6959, abs=1e-3) and crown_class(fos).letter == "B"
    assert crown_factor_of_safety(5.0, math.inf) == 0.0  # no rock left: the lowest class
    assert crown_class(0.0).letter == "A"


@pytest.mark.parametrize("fos, letter", [
    # the class boundaries of Carter (2014), from memory; the lower bound belongs to the class
    (0.49, "A"), (0.5, "B"), (0.99, "B"), (1.0, "C"), (1.29, "C"), (1.3, "D"), (1.49, "D"), (1.5, "E"),
    (1.79, "E"), (1.8, "F"), (1.99, "F"), (2.0, "G"), (50.0, "G"), (math.inf, "G")])
def test_crown_class_boundaries(fos, letter):
    assert crown_class(fos).letter == letter


def test_crown_classes_cover_every_factor_of_safety_once():
    # Carter (2014), from memory: seven classes A-G, probability of failure falling as FoS rises
    assert [c.letter for c in CROWN_CLASSES] == list("ABCDEFG")
    assert CROWN_CLASSES[0].fos_low == 0.0 and math.isinf(CROWN_CLASSES[-1].fos_high)
    assert all(a.fos_high == b.fos_low for a, b in zip(CROWN_CLASSES, CROWN_CLASSES[1:]))
    assert CROWN_CLASSES[0].public_access == "forbidden" and CROWN_CLASSES[-1].public_access == "free"


def test_with_q_unknown_no_factor_of_safety_is_given_in_words():
    entry = screen_voids([_body()])[0]
    assert entry.crown_fos is None and entry.crown_class is None and entry.critical_span_m is None
    assert "factor of safety cannot be given" in entry.crown_assessment
    assert f"scaled span {entry.scaled_span_m:.1f} m only" in entry.crown_assessment
    given = screen_voids([_body()], ScreeningOptions(rock_mass_q=4.0))[0]
    sc = 3.3 * 4.0**0.43 * math.sinh(4.0) ** 0.0016  # Carter's S_c written out (from memory)
    assert given.crown_fos == pytest.approx(sc / given.scaled_span_m)
    assert given.crown_class == crown_class(given.crown_fos).letter
    assert f"class {given.crown_class}" in given.crown_assessment and "from memory" in given.crown_assessment


@dataclasses.dataclass(frozen=True)
class _Refined:
    """The fields of a body's fit that the screening reads (the fit itself is another module's job)."""

    roof_thickness_m: Estimate
    span_m: Estimate
    width_m: Estimate
    length_m: Estimate
    standoff_m: Estimate
    volume_m3: Estimate
    roof_below_work_m: dict
    lower_bound: bool = False


def _refined(**changes):
    base = dict(roof_thickness_m=Estimate(12.0, 1.0, 10.0, 14.0), span_m=Estimate(7.0, 0.5, 6.0, 8.0),
                width_m=Estimate(5.0, 0.5, 4.0, 6.0), length_m=Estimate(6.0, 0.5, 5.0, 7.5),
                standoff_m=Estimate(math.inf, math.nan, -math.inf, math.inf),
                volume_m3=Estimate(90.0, 10.0, 70.0, 110.0), roof_below_work_m={})
    base.update(changes)
    return _Refined(**base)


def test_cautious_figures_are_the_thinnest_roof_and_widest_span_of_the_fit():
    body = _body(refined=_refined())
    entry = screen_voids([body])[0]
    assert entry.cautious_roof_m == 10.0 and entry.cautious_width_m == 6.0 and entry.cautious_length_m == 7.5
    assert (entry.roof_thickness_m, entry.width_m) == (12.0, 5.0)  # the fit's values beside them
    # Carter's C_s with S = 6, T = 10, L = 7.5, gamma 2.7, theta 0 written out by hand
    assert entry.scaled_span_m == pytest.approx(6 * math.sqrt(2.7 / (10 * (1 + 6 / 7.5) * 0.6)))
    assert entry.bounds.startswith("95 % bounds") and not entry.extent_at_least
    # a slow body's extent is only a lower bound: the value, said as "at least"
    slow = _body(fill=FILL_WATER_OR_CLAY, refined=_refined(
        width_m=Estimate(5.0, math.nan, 5.0, math.inf), length_m=Estimate(6.0, math.nan, 6.0, math.inf),
        span_m=Estimate(7.0, math.nan, 7.0, math.inf), lower_bound=True))
    entry = screen_voids([slow], ScreeningOptions(rock_mass_q=1.0))[0]
    assert entry.extent_at_least and entry.cautious_width_m == 5.0
    assert "at least" in entry.bounds and "at least" in entry.crown_assessment and "at least" in entry.reasons
    assert "at most" in entry.crown_assessment  # a wider span can only lower the factor of safety


def test_cautious_roof_below_a_work_and_standoff_come_from_the_fit():
    body = _body(nearest_work="haul road", standoff_m=9.0, refined=_refined(
        standoff_m=Estimate(9.0, 1.0, 7.0, 11.0),
        roof_below_work_m={"haul road": Estimate(9.0, 1.0, 7.0, 11.0), "bench": Estimate(15.0, 1.0, 13.0, 17.0)}))
    entry = screen_voids([body])[0]
    assert entry.cautious_roof_m == 7.0 and entry.roof_below_work_m == 9.0 and entry.cautious_standoff_m == 7.0
    assert "under 'haul road', 7.0 m below" in entry.reasons


def test_hole_distances_match_a_general_minimiser():
    from scipy.optimize import minimize

    rng = np.random.default_rng(3)
    lo, hi = np.array([10.0, 8.0, 80.0]), np.array([16.0, 12.0, 85.0])
    xy = rng.uniform([0, 0], [26, 20], size=(12, 2))
    top = rng.uniform(82, 100, 12)
    bottom = top - rng.uniform(1, 15, 12)
    ours = hole_distances_m(lo, hi, xy, top, bottom)
    for k in range(12):
        # closest pair (point of the segment, point of the box) by L-BFGS-B with bounds: a convex problem
        def squared(v, k=k):
            return float((xy[k, 0] - v[1]) ** 2 + (xy[k, 1] - v[2]) ** 2 + (v[0] - v[3]) ** 2)
        start = [0.5 * (top[k] + bottom[k]), *(0.5 * (lo + hi))]
        bounds = [(bottom[k], top[k]), (lo[0], hi[0]), (lo[1], hi[1]), (lo[2], hi[2])]
        best = minimize(squared, start, method="L-BFGS-B", bounds=bounds, options={"ftol": 1e-14, "gtol": 1e-10})
        assert ours[k] == pytest.approx(math.sqrt(max(best.fun, 0.0)), abs=1e-3)


def _pattern(holes, depth=12.0, subdrill=1.0):
    return PlannedWork("next blast", "blast_pattern", "polygon",
                       ((-10.0, -10.0, 100.0), (10.0, -10.0, 100.0), (10.0, 10.0, 100.0), (-10.0, 10.0, 100.0)),
                       depth, subdrill, tuple(BlastHole(i, c) for i, c in holes))


def test_holes_that_meet_or_come_near_a_body_are_listed():
    # the body box: x -3..3, y -2..2, z 78..82 (roof 18 m below ground at 100 m)
    body = _body()
    holes = [("H1", (0.0, 0.0, 100.0)),    # charged to 88 m, subdrill to 87: 5 m above the roof
             ("H2", (0.0, 0.0, 95.0)),     # charged to 83 m, subdrill to 82 m: the subdrill meets the roof
             ("H3", (0.0, 0.0, 93.0)),     # charged to 81 m: the charged column meets the body
             ("H4", (5.0, 0.0, 94.0)),     # 2 m beside the body, charged column 82-94 m: 2 m away
             ("H5", (9.0, 0.0, 94.0))]     # 6 m beside: beyond the 3 m stand-off
    entry = screen_voids([body], planned_works=[_pattern(holes)])[0]
    listed = entry.holes_met.split("; ")
    assert listed[0].startswith("H2") or listed[0].startswith("H3")
    assert "H3 (next blast): charged column meets it" in listed
    assert "H2 (next blast): subdrill zone meets it" in listed
    assert "H4 (next blast): charged column 2.0 m from it" in listed
    assert not any(t.startswith(("H1", "H5")) for t in listed)
    assert entry.nearest_hole_m == 0.0
    wider = screen_voids([body], ScreeningOptions(hole_standoff_m=6.0), planned_works=[_pattern(holes)])[0]
    assert "H1 (next blast): subdrill zone 5.0 m from it" in wider.holes_met.split("; ")
    # a pattern planned as an area only has no holes to check
    area = PlannedWork("old blast", "blast_pattern", "polygon", ((0, 0, 100), (5, 0, 100), (5, 5, 100)))
    assert screen_voids([body], planned_works=[area])[0].holes_met == ""


def test_a_hole_meeting_an_indication_ranks_it_before_a_large_void_farther_off():
    void = _body(body_id=1, nearest_work="next blast", standoff_m=12.0, roof_thickness_m=6.0, volume_m3=900.0,
                 bbox_min_m=(9.0, 9.0, 78.0), bbox_max_m=(15.0, 13.0, 82.0))
    indication = _body(body_id=2, status=STATUS_UNRESOLVED, confidence="low", nearest_work="next blast",
                       standoff_m=0.0)
    ranked = screen_voids([void, indication], planned_works=[_pattern([("H3", (0.0, 0.0, 93.0))])])
    assert [e.body_id for e in ranked] == [2, 1]
    assert ranked[0].cautious_standoff_m == 0.0 and ranked[1].holes_met == ""
    assert "rank" in RANKING_RULE and "together" in RANKING_RULE


def test_columns_follow_the_entry_and_carry_the_new_figures():
    assert SCREENING_COLUMNS == tuple(f.name for f in dataclasses.fields(ScreeningEntry))
    for name in ("cautious_roof_m", "cautious_span_m", "crown_fos", "crown_class", "crown_assessment",
                 "holes_met", "bounds"):
        assert name in SCREENING_COLUMNS


def test_bad_hole_standoff_names_the_field():
    with pytest.raises(InputError, match="hole_standoff_m"):
        ScreeningOptions(hole_standoff_m=-1.0)


def test_a_hole_beyond_the_standoff_but_closer_than_the_span_is_named():
    # body box x -3..3, y -2..2, z 78..82, span 7.2 m; hole 6 m east of the box, charge reaching 82 m
    entry = screen_voids([_body()], planned_works=[_pattern([("H5", (9.0, 0.0, 94.0))])])[0]
    assert entry.holes_met == "" and entry.nearest_hole_m == pytest.approx(6.0)
    assert "blast hole H5 (next blast) comes within 6.0 m of it, closer than its own span" in entry.reasons
    far = screen_voids([_body()], planned_works=[_pattern([("H6", (12.0, 0.0, 94.0))])])[0]
    assert "H6" not in far.reasons and far.nearest_hole_m == pytest.approx(9.0)


def test_weak_indications_are_ranked_with_the_bodies():
    # the project's ranking rule (RANKING_RULE, its own choice); distances worked by hand: a weak
    # indication 2 m from a planned work falls in the first 5 m band, a void 30 m away in the seventh
    from reconstruct.interpret.detectability import WeakIndication

    void = _body(nearest_work="road", standoff_m=30.0)
    weak = WeakIndication(
        indication_id=4, fill=FILL_AIR, n_cells=3, volume_m3=3.0, centroid_m=(5.0, 5.0, 90.0),
        bbox_min_m=(4.0, 4.0, 89.0), bbox_max_m=(6.0, 6.0, 91.0), roof_elevation_m=91.0, roof_depth_m=9.0,
        span_m=2.0, resolution_m=6.0, peak_anomaly_ns_per_m=-0.5, noise_floor_ns_per_m=0.2,
        threshold_ns_per_m=0.8, mean_ray_count=12.0, nearest_work="road", standoff_m=2.0)
    ranked = screen_voids([void], weak_indications=[weak])
    first, second = ranked
    assert (first.indication_id, first.body_id, first.tier) == (4, None, "weak_indication")
    assert second.body_id == void.body_id and second.indication_id is None and second.tier == "void"
    # its extent is taken up to the resolution (6 m), not its 2 m of cells
    assert first.cautious_width_m == pytest.approx(6.0)
    assert "2.5 noise floors" in first.reasons and "up to about 6 m across" in first.reasons


def test_a_fit_that_did_not_converge_falls_back_to_the_cube():
    # a failed fit carries no usable sizes (NaN estimates): the screening must use the cube's figures
    from types import SimpleNamespace

    nan = Estimate(math.nan, math.nan, -math.inf, math.inf)
    failed = SimpleNamespace(converged=False, roof_thickness_m=nan, span_m=nan, width_m=nan, length_m=nan,
                             standoff_m=nan, volume_m3=nan, roof_below_work_m={}, lower_bound=False)
    body = _body()
    entry = screen_voids([dataclasses.replace(body, refined=failed)], ScreeningOptions(rock_mass_q=4.0))[0]
    cube = screen_voids([body], ScreeningOptions(rock_mass_q=4.0))[0]
    assert entry.cautious_roof_m == cube.cautious_roof_m and entry.crown_fos == pytest.approx(cube.crown_fos)
    assert "did not converge" in entry.bounds
