"""Benchmark of the void screening: voids, isosurfaces, pictures and report on 840,000 cells.

An invented inversion folder over 200 x 60 x 70 one-metre cells (flat ground
at 65 m): a smooth random velocity field around 0.115 m/ns with six smoothed
ellipsoidal bodies (four fast, two slow), rays through the middle third of the
box, two planned works. ``reconstruct voids`` (bodies, screening,
interpretation cube, isosurfaces, ground mesh, 3D view and slices) and
``reconstruct report`` run on it as a user would run them.
Target on 2 cores: voids + report <= 30 s.

Timings on shared machines vary by up to about 3x between runs, so the script
also times a reference workload in the same run (one 3 x 3 x 3 median filter
of the velocity cube, scipy.ndimage) and prints each figure as a ratio to it.

Run: ``python benchmarks/bench_voids.py`` (under a minute); ``--scale 0.5``
for a quick trial.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from reconstruct.cli import main as reconstruct_main
from reconstruct.model.grid import Grid, ground_mask
from reconstruct.io.outputs import (
    build_manifest,
    read_cell_arrays_vti,
    utc_now_iso,
    write_cell_arrays_vti,
    write_csv_atomic,
    write_json_atomic,
)

BODIES = [  # centre (m), semi-axes (m), velocity (m/ns); invented
    ((40, 30, 45), (6, 4, 3), 0.20), ((90, 25, 30), (8, 5, 4), 0.22), ((140, 35, 50), (5, 5, 3), 0.18),
    ((170, 30, 20), (7, 4, 4), 0.25), ((65, 35, 25), (6, 5, 4), 0.07), ((120, 28, 40), (5, 4, 3), 0.08),
]


def build_folder(folder: Path, scale: float) -> Path:
    shape = tuple(max(8, int(round(n * scale))) for n in (200, 60, 70))
    grid = Grid((0.0, 0.0, 0.0), (200 / shape[0], 60 / shape[1], 70 / shape[2]), shape)
    site = folder.parent / "bench_site.yaml"
    site.write_text(
        "name: benchmark quarry (invented)\n"
        f"model: {{origin_m: [0, 0, 0], size_m: [200, 60, 70], cell_m: {list(grid.cell_m)}}}\n"
        "ground: {flat_elevation_m: 65}\n"
        "rock: {velocity_m_per_ns: 0.115, conductivity_ms_per_m: 1.0, antenna_frequency_mhz: 100}\n"
        "planned_works:\n"
        "  - {name: haul road, kind: haul_road, polyline_m: [[0, 30, 65], [200, 30, 65]]}\n"
        "  - {name: next blast, kind: blast_pattern, polygon_m: [[80, 10, 65], [120, 10, 65], [120, 25, 65], "
        "[80, 25, 65]]}\n", encoding="utf-8")
    ground = ground_mask(grid, lambda x, y: np.full_like(x, 65.0))
    rng = np.random.default_rng(3)
    slowness = 1 / 0.115 + 0.05 * ndimage.gaussian_filter(rng.normal(size=shape), 1.5, mode="wrap") / 0.07
    centres = grid.cell_centres_m()
    contrast = np.zeros(shape)
    for centre, axes, velocity in BODIES:
        inside = (((centres - np.asarray(centre)) / np.asarray(axes)) ** 2).sum(axis=-1) <= 1
        contrast[inside] = 1 / velocity - 1 / 0.115
    slowness += ndimage.gaussian_filter(contrast, 1.0)
    velocity = np.where(ground, 1 / slowness, 0.2998)
    rays = np.zeros(shape, dtype=np.int32)
    band = (centres[..., 1] > 15) & (centres[..., 1] < 45) & ground
    rays[band] = rng.integers(1, 40, int(band.sum()))
    folder.mkdir(parents=True, exist_ok=True)
    write_cell_arrays_vti(folder / "velocity.vti", grid, {
        "velocity_m_per_ns": velocity, "slowness_ns_per_m": 1 / velocity, "ray_length_m": rays * 0.8,
        "ray_count": rays, "ground": ground})
    write_json_atomic(folder / "summary.json", {
        "site": "benchmark quarry (invented)", "misfit": {"rms_ns": 0.5, "chi2": 19900.0, "chi2_per_pick": 1.0},
        "picks": {"rows_read": 19900, "inverted": 19900, "excluded": 0}})
    write_csv_atomic(folder / "residuals.csv", ["input_line", "tx", "rx", "distance_m"],
                     ([k + 2, "T", "R", f"{d:.2f}"] for k, d in enumerate(rng.uniform(10, 120, 19900))))
    stamp = utc_now_iso()
    write_json_atomic(folder / "manifest.json", build_manifest(
        command="benchmark", inputs={"site": site}, parameters={}, outputs=[], started=stamp, finished=stamp))
    return folder


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0,
                        help="shrink the grid for a quick trial (cells per axis times SCALE)")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        folder = build_folder(Path(tmp) / "run", args.scale)
        t0 = time.perf_counter()  # the reference workload: read the cube, one scipy median filter
        grid, arrays = read_cell_arrays_vti(folder / "velocity.vti", ["velocity_m_per_ns"])
        ndimage.median_filter(arrays["velocity_m_per_ns"], size=3)
        t_reference = time.perf_counter() - t0
        print(f"grid {grid.shape} = {grid.n_cells:,} cells")
        print(f"reference: read velocity.vti and one 3 x 3 x 3 median filter: {t_reference:.2f} s")

        t0 = time.perf_counter()
        if reconstruct_main(["voids", str(folder), "--quiet"]) != 0:
            raise SystemExit("reconstruct voids failed")
        t_voids = time.perf_counter() - t0
        t0 = time.perf_counter()
        if reconstruct_main(["report", str(folder)]) != 0:
            raise SystemExit("reconstruct report failed")
        t_report = time.perf_counter() - t0
        content = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
        size_mib = (folder / "report.html").stat().st_size / 2**20
    total = t_voids + t_report
    print(f"bodies: {content['counts']}; pictures: {len(content['pictures'])}; report {size_mib:.1f} MiB")
    print(f"{'figure':<32}{'measured':>10}{'target':>8}{'ratio to reference':>21}")
    print(f"{'reconstruct voids (s)':<32}{t_voids:>10.2f}{'':>8}{t_voids / t_reference:>21.2f}")
    print(f"{'reconstruct report (s)':<32}{t_report:>10.2f}{'':>8}{t_report / t_reference:>21.2f}")
    print(f"{'voids + report (s)':<32}{total:>10.2f}{30:>8}{total / t_reference:>21.2f}")


if __name__ == "__main__":
    main()
