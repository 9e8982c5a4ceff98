"""Synthetic single-body cases for the refinement checks: exact picks from an outside reference.

A sphere (air- or water-filled) in homogeneous rock of 0.115 m/ns under flat
ground, four boreholes of nodes around it. The picks are the exact first
arrivals past the sphere (tests/references/sphere.py: Fermat's principle,
minimised with scipy.optimize; whole-space rock, the nodes deep enough that no
air wave is asked for) plus Gaussian noise. The cube handed to the refinement
is the rock alone, its body a crude start: the cells whose centres lie within
a sphere 30 % larger or smaller than the truth, shifted by up to one cell, as
a blurred cube would draw it. The run's predicted times are then the times
through the rock (``s0 |A-B|``), and no forward-model correction applies.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconstruct.interpret.bodies import FILL_AIR, FILL_WATER_OR_CLAY, VoidBody
from reconstruct.interpret.refine import PickTimes, RefinementInputs
from reconstruct.io.site import PlannedWork
from reconstruct.model.grid import Grid
from tests.references.sphere import _chord_inside, first_arrival_ns

ROCK = 0.115
AIR = 0.299792458  # SI speed of light, m/ns
WATER = 0.033  # Davis and Annan (1989), tests/REFERENCES.md
GROUND_M = 100.0


@dataclass(frozen=True)
class SphereCase:
    inputs: RefinementInputs
    body: VoidBody
    centre_m: np.ndarray
    radius_m: float
    fill: str

    @property
    def volume_m3(self) -> float:
        return 4.0 / 3.0 * np.pi * self.radius_m**3

    @property
    def roof_thickness_m(self) -> float:
        return GROUND_M - (self.centre_m[2] + self.radius_m)


def _exact_times(xyz, tx, rx, centre, radius, v_body, starts):
    """Exact first arrivals; pairs that cannot feel the sphere are timed straight (no minimisation needed:
    a path that enters it costs at least s0 (|A-C| - R + |B-C| - R) at rock slowness)."""
    s0 = 1.0 / ROCK
    times = np.empty(tx.size)
    for k, (i, j) in enumerate(zip(tx, rx)):
        a, b = xyz[i], xyz[j]
        length = np.linalg.norm(b - a)
        if _chord_inside(a, b, centre, radius) == 0.0 and (
                v_body < ROCK or s0 * (np.linalg.norm(a - centre) + np.linalg.norm(b - centre) - 2 * radius)
                >= s0 * length):
            times[k] = s0 * length
        else:
            times[k] = first_arrival_ns(a, b, centre, radius, v_body, ROCK, starts=starts)
    return times


def sphere_case(rng, *, radius_m, depth_m, fill, noise_ns=0.5, spacing_m=3.5, crude=0.3,
                reference_starts=3) -> SphereCase:
    """A random single-sphere case (see the module docstring); ``depth_m`` to the sphere's centre;
    ``reference_starts`` starts of the reference's refracted-path search per pair."""
    centre = np.array([20.0 + rng.uniform(-2, 2), 20.0 + rng.uniform(-2, 2), GROUND_M - depth_m])
    holes = [(20.0 + dx, 20.0 + dy) for dx, dy in ((-9, -9), (9, -8), (8, 9), (-8, 8))]
    depths = np.arange(2.0, depth_m + radius_m + 8.0, spacing_m)
    xyz = np.array([[x, y, GROUND_M - d] for x, y in holes for d in depths])
    per_hole = depths.size
    hole = np.repeat(np.arange(4), per_hole)
    tx, rx = (a.ravel() for a in np.meshgrid(np.arange(len(xyz)), np.arange(len(xyz)), indexing="ij"))
    keep = hole[tx] < hole[rx]
    tx, rx = tx[keep], rx[keep]
    v_body = AIR if fill == FILL_AIR else WATER
    exact = _exact_times(xyz, tx, rx, centre, radius_m, v_body, reference_starts)
    time_ns = exact + rng.normal(0.0, noise_ns, exact.size)
    grid = Grid((0.0, 0.0, GROUND_M - 40.0), (2.0, 2.0, 2.0), (20, 20, 20))
    s0 = 1.0 / ROCK
    slowness = np.full(grid.shape, s0)
    cells = grid.cell_centres_m().reshape(*grid.shape, 3)
    start_radius = radius_m * (1.0 + rng.choice([-1, 1]) * crude)
    start_centre = centre + rng.uniform(-1.0, 1.0, 3)
    labels = (np.linalg.norm(cells - start_centre, axis=3) <= max(start_radius, 1.2)).astype(np.int32)
    picks = PickTimes(nodes_xyz_m=xyz, tx=tx, rx=rx, time_ns=time_ns,
                      predicted_time_ns=s0 * np.linalg.norm(xyz[rx] - xyz[tx], axis=1),
                      sigma_ns=np.full(tx.size, noise_ns), source="synthetic picks")
    road = PlannedWork(name="haul road", kind="haul_road", geometry="polyline",
                       points_m=((0.0, 20.0, GROUND_M), (40.0, 20.0, GROUND_M)))
    inputs = RefinementInputs(grid=grid, slowness_ns_per_m=slowness, ground=np.ones(grid.shape, bool),
                              background_slowness_ns_per_m=slowness, labels=labels, picks=picks,
                              surface_elevation_m=lambda x, y: np.full(np.shape(x), GROUND_M),
                              planned_works=(road,))
    n = int(labels.sum())
    body = VoidBody(
        body_id=1, status="resolved", fill=fill, n_cells=n, volume_m3=8.0 * n, centroid_m=tuple(start_centre),
        bbox_min_m=tuple(start_centre - start_radius), bbox_max_m=tuple(start_centre + start_radius),
        roof_elevation_m=float(start_centre[2] + start_radius), roof_depth_m=0.0, roof_thickness_m=0.0,
        nearest_work=None, standoff_m=np.inf, roof_below_work_m=np.inf, roof_below_work_name=None,
        span_m=2 * start_radius, width_m=2 * start_radius, length_m=2 * start_radius,
        equivalent_diameter_m=2 * start_radius, resolution_m=4.0,
        mean_velocity_m_per_ns=0.15 if fill == FILL_AIR else 0.09,
        extreme_velocity_m_per_ns=0.2 if fill == FILL_AIR else 0.07, background_velocity_m_per_ns=ROCK,
        peak_anomaly_ns_per_m=-1.0, threshold_ns_per_m=0.5, ray_covered_fraction=1.0, mean_ray_count=10.0,
        confidence="high", confidence_reason="synthetic")
    return SphereCase(inputs=inputs, body=body, centre_m=centre, radius_m=radius_m, fill=fill)


__all__ = ["SphereCase", "sphere_case", "FILL_AIR", "FILL_WATER_OR_CLAY", "ROCK", "AIR", "WATER", "GROUND_M"]
