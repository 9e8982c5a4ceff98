"""Forward accuracy next to sharp bodies: first arrivals past a sphere against the exact times.

A sphere of radius 2.5 m (air-filled, 0.2998 m/ns, or water-filled, 0.033
m/ns) sits in rock of 0.115 m/ns, away from the ground surface. Pairs of
points on opposite sides cross it through the centre, off-centre, graze its
surface or pass just beside it. The reference is the exact first arrival past
a true sphere (tests/references/sphere.py: Fermat's principle, refracted and
around paths minimised with scipy); the forward model sees the sphere as
voxels of the model grid, one of two ways:

- ``centre``: a cell takes the sphere's velocity when its centre is inside;
- ``fraction``: a cell's slowness is the volume-weighted mean of the two
  (the fraction from 8^3 sub-samples per cell).

For each way and cell size the script prints the median and largest error
(forward minus exact, ns; negative is early) over the pairs that cross or
graze the sphere, and the time of one field. Run from a checkout:
``python3 benchmarks/bench_sharp_bodies.py [--cells 1.0,0.5]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from reconstruct.forward.first_arrivals import first_arrival_times  # noqa: E402
from reconstruct.model.grid import Grid  # noqa: E402
from reconstruct.parallel import Executor  # noqa: E402
from tests.references.sphere import first_arrival_ns  # noqa: E402

ROCK, AIR, WATER = 0.115, 0.299792458, 0.033
RADIUS = 2.5
BOX_M = 30.0


def pairs(centre):
    """Pairs across the sphere: offsets of the line from the centre, in units of the radius."""
    a, b = [], []
    for offset in (0.0, 0.3, 0.6, 0.9, 1.0, 1.1, 1.3):
        for angle in (0.0, 0.7, 1.6):
            d = np.array([np.cos(angle), np.sin(angle), 0.25])
            d /= np.linalg.norm(d)
            side = np.cross(d, [0.0, 0.0, 1.0])
            side /= np.linalg.norm(side)
            for length in (12.0, 24.0):
                mid = centre + offset * RADIUS * side
                a.append(mid - 0.5 * length * d)
                b.append(mid + 0.5 * length * d)
    return np.array(a), np.array(b)


def model(cell_m, v_body, way):
    n = int(round(BOX_M / cell_m))
    grid = Grid((0.0, 0.0, 0.0), (cell_m,) * 3, (n, n, n))
    centre = np.full(3, BOX_M / 2 + 0.37 * cell_m)  # not on a lattice symmetry
    sub = 8 if way == "fraction" else 1
    offsets = (np.arange(sub) + 0.5) / sub * cell_m
    ix = np.arange(n) * cell_m
    fraction = np.zeros(grid.shape)
    for ox in offsets:
        for oy in offsets:
            for oz in offsets:
                x, y, z = np.meshgrid(ix + ox - centre[0], ix + oy - centre[1], ix + oz - centre[2], indexing="ij")
                fraction += (x * x + y * y + z * z <= RADIUS * RADIUS)
    fraction /= sub ** 3
    slowness = (1 - fraction) / ROCK + fraction / v_body
    return grid, slowness, centre


def run(cell_m, v_body, way):
    grid, slowness, centre = model(cell_m, v_body, way)
    a, b = pairs(centre)
    xyz = np.concatenate([a, b])
    k = len(a)
    started = time.perf_counter()
    times = first_arrival_times(grid, slowness, xyz, np.arange(k), np.arange(k) + k,
                                executor=Executor(kind="serial"))
    seconds = time.perf_counter() - started
    exact = np.array([first_arrival_ns(p, q, centre, RADIUS, v_body, ROCK, starts=8) for p, q in zip(a, b)])
    return times - exact, seconds / k


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", default="1.0,0.5", help="model cell sizes in m, comma-separated")
    args = parser.parse_args(argv)
    print(f"{'body':6} {'cells':>6} {'voxels':9} {'median ns':>10} {'min ns':>8} {'max ns':>8} {'s/field':>8}")
    for v_body, name in ((AIR, "air"), (WATER, "water")):
        for cell in (float(c) for c in args.cells.split(",")):
            for way in ("centre", "fraction"):
                err, per_field = run(cell, v_body, way)
                print(f"{name:6} {cell:6.2f} {way:9} {np.median(err):10.2f} {err.min():8.2f} {err.max():8.2f} "
                      f"{per_field:8.2f}", flush=True)


if __name__ == "__main__":
    main()
