"""Smooth against compact regularisation, and velocity bounds clipped against kept inside the solve.

The case: one air-filled sphere (radius 2.5 m, 0.2998 m/ns) in rock of
0.115 m/ns, no air above (the ground surface lies above the model box), nodes
in four vertical boreholes around it. The picks are the exact first arrivals
past a true sphere (tests/references/sphere.py: Fermat's principle, refracted
paths minimised with scipy), an outside reference, plus 0.5 ns of Gaussian
noise; the pick sigmas are 0.5 ns.

For each regularisation (``smooth``, ``compact``) and each way of keeping the
velocity band (``clip`` after the solve, ``bounded`` inside it) the script
prints: the time of the inversion, chi^2/N, the cells clipped, the peak
velocity anomaly (fastest ground cell against the rock, %; the truth is
+161 %), the volume of the cells whose anomaly is at least half that peak
against the sphere's 65.4 m^3, and the distance of their centroid from the
sphere's centre.

Optionally (``--demo-nodes``, ``--demo-picks``) it times the straight-ray
inversion of the demo quarry (2 m cells, about 25,000 unknowns) the same four
ways. Run from a checkout (a few minutes on 2 cores):
``python3 benchmarks/bench_compact.py [--rays straight,bent] [--cell 1.0]``.

Measured on 2026-12-04 (1 m cells, 36 nodes, 486 picks, 3 bent-ray iterations;
times on 2 cores shared with other jobs, load 6-7, so only rough):

=========  =======  =======  ======  =======  ======  ======  =====
rays       regul.   bounds   time s  chi2/N   peak %  vol m3  off m
=========  =======  =======  ======  =======  ======  ======  =====
straight   smooth   clip       14.7  1.02       54    118.0   0.19
straight   smooth   bounded     4.5  1.02       54    118.0   0.19
straight   compact  clip       26.4  3.02 (18 cells clipped)  161  34.0  0.45
straight   compact  bounded     5.8  1.00      161     31.0   0.62
bent       smooth   clip      458.8  3.39 (1 clipped)  161  13.0  0.41
bent       smooth   bounded   201.5  3.61      160     13.0   0.36
bent       compact  clip      248.8  3.70 (9 clipped)  161  26.0  0.48
bent       compact  bounded   154.9  3.22      161     17.0   0.30
=========  =======  =======  ======  =======  ======  ======  =====

chi^2/N per bent-ray iteration: smooth 34.5 -> 16.8 -> 5.5 -> 3.4 (clip),
-> 3.6 (bounded); compact 22.4 -> 14.1 -> 9.4 -> 3.7 (clip), 20.9 -> 12.6 ->
4.9 -> 3.2 (bounded). The truth: peak +161 %, 65.4 m^3.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from reconstruct.inverse.bent import BentOptions, bent_ray_tomography  # noqa: E402
from reconstruct.inverse.options import InversionOptions  # noqa: E402
from reconstruct.inverse.straight import regularisation_record, straight_ray_tomography  # noqa: E402
from reconstruct.io.site import parse_site  # noqa: E402
from reconstruct.io.tables import Nodes, Picks  # noqa: E402
from reconstruct.parallel import Executor  # noqa: E402
from tests.references.sphere import first_arrival_ns  # noqa: E402

ROCK, AIR = 0.115, 0.299792458
RADIUS = 2.5
CENTRE = np.array([10.2, 8.1, 10.3])  # off the cell lattice
NOISE_NS = 0.5
BOX_M = (20.0, 16.0, 20.0)
HOLES_XY = ((3.0, 2.5), (17.0, 2.5), (3.0, 13.5), (17.0, 13.5))


def _exact_time(p, q):
    """Exact first arrival past the sphere. Skips the minimisation when no path
    through the sphere can win: any such path is at least |PO| + |OQ| - 2R long
    (triangle inequality), at most 2R of it inside, so its time is at least
    (|PO| + |OQ| - 4R) / v_rock + 2R / v_air; when that is not below the straight
    time |PQ| / v_rock (the segment missing the sphere), the straight time stands."""
    straight = float(np.linalg.norm(q - p)) / ROCK
    reach = float(np.linalg.norm(p - CENTRE) + np.linalg.norm(q - CENTRE))
    if (reach - 4 * RADIUS) / ROCK + 2 * RADIUS / AIR >= straight:
        return straight
    return first_arrival_ns(p, q, CENTRE, RADIUS, AIR, ROCK, starts=6)


def sphere_case(cell_m: float, seed: int = 7):
    """Site, nodes and picks of the borehole sphere case (exact times plus noise)."""
    site = parse_site({
        "name": "sphere between boreholes",
        "model": {"origin_m": [0, 0, 0], "size_m": list(BOX_M), "cell_m": cell_m},
        "ground": {"flat_elevation_m": 40},  # above the box: all rock, no air
        "rock": {"velocity_m_per_ns": ROCK, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
    })
    zs = np.arange(2.0, 18.5, 2.0)
    xyz = np.array([[x, y, z] for x, y in HOLES_XY for z in zs])
    hole = np.repeat(np.arange(len(HOLES_XY)), zs.size)
    n = len(xyz)
    nodes = Nodes(ids=tuple(f"B{h + 1}-{k:02d}" for k, h in enumerate(hole)), xyz_m=xyz,
                  kinds=("borehole",) * n, boreholes=tuple(f"B{h + 1}" for h in hole),
                  lines=np.arange(2, n + 2), source="nodes.csv")
    a, b = np.triu_indices(n, 1)
    across = hole[a] != hole[b]
    a, b = a[across], b[across]
    exact = np.array([_exact_time(xyz[i], xyz[j]) for i, j in zip(a, b)])
    rng = np.random.default_rng(seed)
    m = a.size
    picks = Picks(tx=a, rx=b, time_ns=exact + rng.normal(0.0, NOISE_NS, m), sigma_ns=np.full(m, NOISE_NS),
                  amplitude=None, quality=None, lines=np.arange(2, m + 2), excluded=(), source="picks.csv",
                  n_rows=m)
    return site, nodes, picks


def recovery(run) -> dict:
    """Peak anomaly, volume above half the peak and its centroid offset."""
    v = run.result.velocity_m_per_ns.reshape(run.grid.shape)
    anomaly = v / ROCK - 1.0
    peak = float(anomaly[run.ground].max())
    body = run.ground & (anomaly >= 0.5 * peak)
    cell_volume = float(np.prod(run.grid.cell_m))
    centres = run.grid.cell_centres_m()[body]
    r = run.result
    return dict(chi2_per_pick=r.chi2 / r.n_picks, clipped=r.n_clipped, peak_percent=100 * peak,
                volume_m3=body.sum() * cell_volume,
                centroid_off_m=float(np.linalg.norm(centres.mean(axis=0) - CENTRE)) if centres.size else np.nan,
                reweightings=regularisation_record(run)["reweightings"])


def invert(site, nodes, picks, rays, regularisation, bounded, iterations):
    options = InversionOptions(time_zero="none", regularisation=regularisation, bounds_in_solve=bounded)
    start = time.perf_counter()
    if rays == "straight":
        run = straight_ray_tomography(site, nodes, picks, options)
    else:
        run = bent_ray_tomography(site, nodes, picks, options, bent=BentOptions(max_iterations=iterations),
                                  executor=Executor(kind="serial"))
    return run, time.perf_counter() - start


def demo_times(site_path, nodes_path, picks_path):
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes, read_picks

    site = load_site(site_path)
    nodes = read_nodes(nodes_path)
    picks = read_picks(picks_path, nodes)
    print("demo quarry, straight rays, Huber weights (the processing's rule for straight rays):")
    for regularisation in ("smooth", "compact"):
        for bounded in (False, True):
            options = InversionOptions(regularisation=regularisation, bounds_in_solve=bounded, robust="huber")
            start = time.perf_counter()
            r = straight_ray_tomography(site, nodes, picks, options).result
            print(f"  {regularisation:8s} {'bounded' if bounded else 'clip':8s} {time.perf_counter() - start:7.1f} s "
                  f"chi2/N {r.chi2 / r.n_picks:8.3f} (before clipping {r.chi2_before_clipping / r.n_picks:8.3f}) "
                  f"cells clipped {r.n_clipped:5d}, {len(r.lambda_search)} solves, "
                  f"{sum(s['iterations'] for s in r.lambda_search)} LSQR iterations")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rays", default="straight,bent")
    parser.add_argument("--cell", type=float, default=1.0)
    parser.add_argument("--bent-iterations", type=int, default=3)
    parser.add_argument("--demo-nodes", default=None)
    parser.add_argument("--demo-picks", default=None)
    args = parser.parse_args(argv)
    start = time.perf_counter()
    site, nodes, picks = sphere_case(args.cell)
    print(f"sphere case: {len(nodes)} borehole nodes, {picks.tx.size} picks, exact times in "
          f"{time.perf_counter() - start:.1f} s; truth: peak +{100 * (AIR / ROCK - 1):.0f} %, "
          f"volume {4 / 3 * np.pi * RADIUS**3:.1f} m^3")
    print(f"{'rays':9s}{'regularisation':15s}{'bounds':9s}{'time s':>8s}{'chi2/N':>9s}{'clipped':>8s}"
          f"{'peak %':>8s}{'vol m3':>8s}{'off m':>7s}{'reweight':>9s}")
    for rays in args.rays.split(","):
        for regularisation in ("smooth", "compact"):
            for bounded in (False, True):
                run, seconds = invert(site, nodes, picks, rays, regularisation, bounded, args.bent_iterations)
                f = recovery(run)
                chi2s = " -> ".join(f"{h['chi2'] / run.result.n_picks:.2f}" for h in run.history) if run.history else ""
                print(f"{rays:9s}{regularisation:15s}{'bounded' if bounded else 'clip':9s}{seconds:8.1f}"
                      f"{f['chi2_per_pick']:9.2f}{f['clipped']:8d}{f['peak_percent']:8.0f}{f['volume_m3']:8.1f}"
                      f"{f['centroid_off_m']:7.2f}{f['reweightings']:9d}  {chi2s}", flush=True)
    if args.demo_nodes and args.demo_picks:
        demo_times(Path(__file__).resolve().parents[1] / "demo_site" / "site.yaml", args.demo_nodes, args.demo_picks)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
