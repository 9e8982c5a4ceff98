"""Air waves over a bench edge: eikonal times in rock behind a bench face against the least time.

Two benches: the lower at z = 100 m for y < 30 m, the upper at z = 110 m
for y >= 30 m, a vertical face between them; rock 0.115 m/ns, air above.
The source lies on the lower bench's surface (a surface node). In the rock
of the upper bench two refracted air waves meet: one entering through the
face (air wave climbing the face) and one entering through the upper bench's
top (air wave that went round the edge). The first arrival there is the least
of them, and it has a kink where they meet.

Reference: the least time by Fermat's principle (Cerveny 2001) over the
paths source -> air -> exit point on the face or on the top -> straight
line through rock, the air part straight or round the edge line (y = 30,
z = 110); minimised with scipy.optimize (Nelder-Mead, several starts). It
is an upper bound where other paths could be shorter (below z = 100 m, where
paths through the lower bench's top also count), so only points above
z = 100 m are compared.

Printed: the error (voidcube minus least time, ns; negative is early) on
lattice points and between them, in the section x = 42 m, for 2, 1 and 0.5 m
cells, and the largest early error at each size.

Measured (this machine, 2026-12-04): largest early error 5.0 ns at 2 m
cells, 1.6 ns at 1 m, 0.45 ns at 0.5 m (first order), on the line where the
two waves meet; elsewhere within 0.8 ns (median -0.47, -0.14, -0.05 ns). It
is the first-order error of a stencil that combines neighbours of two plane
waves meeting at a right angle: the two-axis update gives
``s (d - h) + s h / sqrt(2)`` for a point at distance ``d`` from both
entries, early by ``(1 - 1/sqrt(2)) s h`` = 5.1 ns at h = 2 m in rock of
8.7 ns/m. A node of the demo layout sits on that line (in the inclined hole,
5 m under the upper bench), which makes its pairs with surface nodes 2-5 ns
early on the demo's 2 m model grid and 1-1.3 ns early on its 1 m simulation
grid: a floor under the demo's misfit that no model on the 2 m grid removes.

Run: ``python3 benchmarks/bench_bench_edge.py``.

References
----------
Cerveny, V. (2001), Seismic Ray Theory, Cambridge University Press.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from scipy.optimize import minimize

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from reconstruct.forward.eikonal import travel_time_field  # noqa: E402
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS  # noqa: E402
from reconstruct.model.grid import Grid  # noqa: E402

ROCK_SLOWNESS = 1 / 0.115
AIR_SLOWNESS = 1 / AIR_VELOCITY_M_PER_NS
FACE_Y, LOWER_Z, UPPER_Z = 30.0, 100.0, 110.0
SOURCE = np.array([35.2, 16.69, LOWER_Z])
EDGE = np.stack([np.linspace(0, 80, 3201), np.full(3201, FACE_Y), np.full(3201, UPPER_Z)], axis=1)


def air_time_ns(point):
    """Least air time from the source to a point on the face or the upper bench's top."""
    if point[1] <= FACE_Y:  # on the face: in sight of the source
        return float(np.linalg.norm(point - SOURCE)) * AIR_SLOWNESS
    via_edge = np.linalg.norm(SOURCE - EDGE, axis=1) + np.linalg.norm(EDGE - point, axis=1)
    return float(via_edge.min()) * AIR_SLOWNESS


def least_time_ns(point):
    """Least time to a rock point of the upper bench (above z = 100 m)."""
    def through_top(p):
        exit_point = np.array([p[0], max(p[1], FACE_Y), UPPER_Z])
        return np.linalg.norm(point - exit_point) * ROCK_SLOWNESS + air_time_ns(exit_point)

    def through_face(p):
        exit_point = np.array([p[0], FACE_Y, np.clip(p[1], LOWER_Z, UPPER_Z)])
        return np.linalg.norm(point - exit_point) * ROCK_SLOWNESS + air_time_ns(exit_point)

    options = dict(xatol=1e-5, fatol=1e-8)
    best = np.inf
    for cost, second in ((through_top, np.linspace(FACE_Y, point[1] + 5, 21)),
                         (through_face, np.linspace(LOWER_Z, UPPER_Z, 21))):
        # start from the best point of a coarse grid of exit points (the cost is flat where clipped)
        grid = [(x, y) for x in np.linspace(point[0] - 10, point[0] + 10, 21) for y in second]
        start = min(grid, key=cost)
        best = min(best, minimize(cost, start, method="Nelder-Mead", options=options).fun)
    return best


def benches(cell_m):
    shape = (int(80 / cell_m), int(50 / cell_m), int(50 / cell_m))
    grid = Grid((0.0, 0.0, 70.0), (cell_m,) * 3, shape)
    centres = grid.cell_centres_m().reshape(*shape, 3)
    ground_z = np.where(centres[..., 1] < FACE_Y, LOWER_Z, UPPER_Z)
    return grid, np.where(centres[..., 2] < ground_z, ROCK_SLOWNESS, AIR_SLOWNESS)


def main():
    ys = np.arange(30.0, 47.0, 1.0)
    zs = np.arange(110.0, 100.5, -1.0)
    points = np.array([[42.0, y, z] for z in zs for y in ys])
    exact = np.array([least_time_ns(p) for p in points])
    print(__doc__.splitlines()[0])
    for cell_m in (2.0, 1.0, 0.5):
        grid, slowness = benches(cell_m)
        start = time.perf_counter()
        field = travel_time_field(grid, slowness, SOURCE)
        seconds = time.perf_counter() - start
        error = (field.interpolate(points) - exact).reshape(zs.size, ys.size)
        print(f"\n{cell_m:g} m cells ({seconds:.1f} s per field): error (ns) in the section x = 42 m")
        print("   z \\ y " + "".join(f"{y:6.0f}" for y in ys))
        for z, row in zip(zs, error):
            print(f"  {z:6.1f} " + "".join(f"{e:6.2f}" for e in row))
        print(f"  largest early error {-error.min():.2f} ns, largest late error {error.max():.2f} ns, "
              f"median {np.median(error):+.2f} ns")


if __name__ == "__main__":
    main()
