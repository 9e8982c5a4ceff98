"""Tests for ``reconstruct.interpret.screening``: scaled span, critical span, ranking.

Outside source: the scaled span formula of Carter (1992, 2014),
C_s = S sqrt(gamma / (T (1 + S/L) (1 - 0.4 cos theta))), and the critical span
S_c = 3.3 Q^0.43 sinh^0.0016(Q), both written from memory (see the module
docstring); the expected values below are worked by hand from those
formulas. Rule-of-thumb flags are marked as common practice.
"""

from __future__ import annotations

import dataclasses
import math

import pytest

from reconstruct.errors import InputError
from reconstruct.interpret.screening import ScreeningOptions, critical_span_m, scaled_span_m, screen_voids
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


def test_ranking_puts_thin_roofs_and_works_first_and_unresolved_last():
    deep = _body(body_id=1)
    thin = _body(body_id=2, roof_thickness_m=2.0)  # thinner than its 4 m width
    under_road = _body(body_id=3, roof_thickness_m=2.0, nearest_work="haul road", standoff_m=2.0,
                       roof_below_work_m=2.0, roof_below_work_name="haul road")
    small = _body(body_id=4, status=STATUS_UNRESOLVED, roof_thickness_m=0.5, confidence="low")
    ranked = screen_voids([deep, small, thin, under_road])
    assert [e.body_id for e in ranked] == [3, 2, 1, 4]
    assert [e.rank for e in ranked] == [1, 2, 3, 4]
    assert "under 'haul road'" in ranked[0].reasons and "thinner than the body is wide" in ranked[0].reasons
    assert "below the resolution" in ranked[-1].reasons
    assert ranked[0].thinnest_roof_m == pytest.approx(2.0)
    assert ranked[0].roof_thickness_m == pytest.approx(2.0) and ranked[0].roof_below_work_m == pytest.approx(2.0)
    assert ranked[2].roof_below_work_m is None and ranked[2].standoff_m is None  # no work near body 1
    # scaled span of body 1 by the formula: S 4, T 18, L 6
    assert ranked[2].scaled_span_m == pytest.approx(4 * math.sqrt(2.7 / (18 * (1 + 4 / 6) * 0.6)))


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
