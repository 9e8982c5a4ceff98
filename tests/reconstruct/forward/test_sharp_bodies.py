"""First arrivals next to a sphere against the exact times (tests/references/sphere.py).

The reference is the exact first arrival past a true sphere of radius 2.5 m
(Fermat's principle: straight, refracted-through and around paths; Cerveny,
V. (2001), Seismic Ray Theory, Cambridge University Press), air-filled
(0.299792458 m/ns, the SI speed of light) or water-filled (0.033 m/ns, Davis
and Annan 1989, tests/REFERENCES.md) in rock of 0.115 m/ns. The forward model
sees the sphere as 1 m cells, each partly filled cell at the volume-weighted
slowness. The bounds are the errors measured on these four pairs (worst +2.92
ns air-filled, +4.06 ns water-filled; on 42 pairs in benchmarks/bench_sharp_bodies.py
+2.34 and +4.51 ns, as written in reconstruct/forward/eikonal.py) with a
margin: they guard the present accuracy, which does not meet the issue's
target of 1 ns (the 1 m voxel model itself is that far from the sphere).
The bent rays must stay real paths: their time equals their per-cell lengths
times the slowness, and each is at most 1 % later than the field's time.
"""

import numpy as np
import pytest

from reconstruct.forward.first_arrivals import bent_ray_forward, first_arrival_times
from reconstruct.model.grid import Grid
from reconstruct.parallel import Executor
from tests.references.sphere import first_arrival_ns

ROCK, AIR, WATER, RADIUS = 0.115, 0.299792458, 0.033, 2.5
CENTRE = np.array([10.37, 10.37, 10.37])


def _sphere_model(v_body):
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (21, 21, 21))
    sub = (np.arange(6) + 0.5) / 6
    fraction = np.zeros(grid.shape)
    ix = np.arange(21.0)
    for ox in sub:
        for oy in sub:
            for oz in sub:
                x, y, z = np.meshgrid(ix + ox, ix + oy, ix + oz, indexing="ij")
                fraction += (x - CENTRE[0]) ** 2 + (y - CENTRE[1]) ** 2 + (z - CENTRE[2]) ** 2 <= RADIUS ** 2
    fraction /= sub.size ** 3
    return grid, (1 - fraction) / ROCK + fraction / v_body


def _pairs():
    d = np.array([np.cos(0.7), np.sin(0.7), 0.25])
    d /= np.linalg.norm(d)
    side = np.cross(d, [0.0, 0.0, 1.0])
    side /= np.linalg.norm(side)
    mids = [CENTRE + offset * RADIUS * side for offset in (0.0, 0.6, 1.0, 1.3)]  # through, off, grazing, beside
    return np.array([m - 6.0 * d for m in mids]), np.array([m + 6.0 * d for m in mids])


@pytest.mark.slow
@pytest.mark.parametrize("v_body, largest_ns", [(AIR, 3.5), (WATER, 5.0)])
def test_times_past_a_sphere_keep_their_measured_accuracy(v_body, largest_ns):
    grid, slowness = _sphere_model(v_body)
    a, b = _pairs()
    k = len(a)
    xyz = np.concatenate([a, b])
    times = first_arrival_times(grid, slowness, xyz, np.arange(k), np.arange(k) + k,
                                executor=Executor(kind="serial"))
    exact = np.array([first_arrival_ns(p, q, CENTRE, RADIUS, v_body, ROCK, starts=6) for p, q in zip(a, b)])
    error = times - exact
    assert np.all(np.abs(error) <= largest_ns), error
    bent = bent_ray_forward(grid, slowness, xyz, np.arange(k), np.arange(k) + k,
                            executor=Executor(kind="serial"), bend=True)
    assert np.allclose(bent.operator @ slowness.ravel(), bent.time_ns, rtol=1e-9)
    assert np.all(bent.time_ns <= times * 1.01 + 1e-9)
    # a bent ray is a path through the cells: never faster than the fastest
    # medium over the straight distance (Fermat's principle)
    assert np.all(bent.time_ns >= np.linalg.norm(b - a, axis=1) / max(v_body, ROCK))
