"""Tests for ``reconstruct.model.deviation``: the minimum curvature method.

Outside checks:
- wellpathpy (a general-purpose well-deviation library on PyPI, its own
  implementation of the minimum curvature method) on a survey with build and turn;
- the exact geometry of a circular arc: a hole that builds inclination at a
  constant rate from vertical to horizontal over a length pi R / 2 is a quarter
  circle of radius R (horizontal reach R, vertical depth R), and the minimum
  curvature method is exact on circular arcs (Sawaryn and Thorogood 2005, A
  compendium of directional calculations based on the minimum curvature method,
  SPE Drilling & Completion 20(1)), also between stations.
"""

from __future__ import annotations

import numpy as np
import pytest

from reconstruct.model.deviation import minimum_curvature_stations, positions_along_hole, ratio_factor

wellpathpy = pytest.importorskip("wellpathpy")


def test_stations_agree_with_wellpathpy():
    md = np.array([0.0, 15.0, 30.0, 45.0, 60.0, 90.0])
    inclination = np.array([0.0, 3.0, 8.0, 15.0, 21.0, 28.0])
    azimuth = np.array([10.0, 40.0, 55.0, 80.0, 120.0, 135.0])
    collar = np.array([500.0, 1200.0, 310.0])
    ours = minimum_curvature_stations(md, inclination, azimuth, collar)
    tvd, northing, easting, _ = wellpathpy.mincurve.minimum_curvature(md, inclination, azimuth)
    # wellpathpy: depth down, northing, easting from the first station; ours x east, y north, z up
    theirs = collar + np.column_stack([easting, northing, -tvd])
    assert np.max(np.abs(ours - theirs)) < 1e-9


def test_a_constant_build_is_a_quarter_circle_also_between_stations():
    radius = 40.0
    length = np.pi * radius / 2.0
    stations = np.array([0.0, length / 3.0, length])  # uneven stations on the arc
    inclination = np.degrees(stations / radius)
    query = np.linspace(0.0, length, 23)
    positions, tangents = positions_along_hole(stations, inclination, np.full(3, 90.0), (0.0, 0.0, 0.0), query)
    angle = query / radius
    exact = np.column_stack([radius * (1.0 - np.cos(angle)), np.zeros_like(angle), -radius * np.sin(angle)])
    assert np.max(np.abs(positions - exact)) < 1e-9
    exact_tangent = np.column_stack([np.sin(angle), np.zeros_like(angle), -np.cos(angle)])
    assert np.max(np.abs(tangents - exact_tangent)) < 1e-9


def test_below_the_last_station_the_hole_runs_straight_on():
    # common practice, no published source: the rat hole below the last survey station is
    # taken along the last station's direction
    md, inclination, azimuth = np.array([0.0, 10.0]), np.array([0.0, 10.0]), np.array([0.0, 0.0])
    station_end = minimum_curvature_stations(md, inclination, azimuth, (0.0, 0.0, 0.0))[-1]
    position, tangent = positions_along_hole(md, inclination, azimuth, (0.0, 0.0, 0.0), [14.0])
    direction = np.array([0.0, np.sin(np.radians(10.0)), -np.cos(np.radians(10.0))])
    assert np.allclose(position[0], station_end + 4.0 * direction) and np.allclose(tangent[0], direction)


def test_ratio_factor_limit():
    # 2/b tan(b/2) -> 1 + b^2/12 as b -> 0 (Taylor series of tan)
    assert ratio_factor(0.0) == 1.0
    assert ratio_factor(1e-5) == pytest.approx(1.0, abs=1e-10)
    assert ratio_factor(np.pi / 2) == pytest.approx(4.0 / np.pi)
