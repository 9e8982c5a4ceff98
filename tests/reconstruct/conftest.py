"""Shared fixture: a small invented inversion folder, as 'voidcube reconstruct invert' writes it.

A 30 x 20 x 25 m box of 1 m cells under flat ground at 20 m elevation, limestone
at 0.115 m/ns with light noise and one air-filled box void (x 10-17, y 6-11,
z 8-13 m, roof 7 m below ground) under a haul road. Every value is invented.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from reconstruct.model.grid import Grid
from reconstruct.io.outputs import build_manifest, utc_now_iso, write_cell_arrays_vti

SITE_TEMPLATE = """\
# invented test site
name: {name}
model:
  origin_m: [0, 0, 0]
  size_m: [30, 20, 25]
  cell_m: 1.0
ground:
  flat_elevation_m: 20
rock:
  velocity_m_per_ns: 0.115
  conductivity_ms_per_m: 1.0
  antenna_frequency_mhz: 100
planned_works:
  - name: {work}
    kind: haul_road
    polyline_m: [[0, 8, 20], [30, 8, 20]]
"""

VOID_CELLS = (slice(10, 17), slice(6, 11), slice(8, 13))


@pytest.fixture
def make_inversion_folder(tmp_path):
    def make(name="test quarry", work="haul road", seed=0):
        site_path = tmp_path / "site.yaml"
        site_path.write_text(SITE_TEMPLATE.format(name=json.dumps(name), work=json.dumps(work)),
                             encoding="utf-8")
        folder = tmp_path / "run"
        folder.mkdir()
        grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (30, 20, 25))
        ground = grid.cell_centres_m()[..., 2] < 20.0
        rng = np.random.default_rng(seed)
        velocity = np.where(ground, 0.115 + rng.normal(0.0, 0.0005, grid.shape), 0.2998)
        velocity[VOID_CELLS] = 0.25
        rays = np.where(ground, 12, 0).astype(np.int32)
        write_cell_arrays_vti(folder / "velocity.vti", grid, {
            "velocity_m_per_ns": velocity, "slowness_ns_per_m": 1.0 / velocity,
            "ray_length_m": rays * 1.0, "ray_count": rays, "ground": ground})
        summary = {"site": name, "misfit": {"rms_ns": 0.5, "chi2": 100.0, "chi2_per_pick": 1.0, "n_picks": 100},
                   "picks": {"rows_read": 100, "inverted": 100, "excluded": 0},
                   "coverage": {"fraction_of_ground_with_rays": 1.0}}
        (folder / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
        with open(folder / "residuals.csv", "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            writer.writerow(["line", "tx", "rx", "distance_m", "observed_ns", "predicted_ns", "residual_ns",
                             "sigma_ns"])
            for i in range(100):
                writer.writerow([i + 2, "A", "B", f"{20 + 0.2 * i:.3f}", "200", "200", "0", "0.5"])
        with open(folder / "nodes_used.csv", "w", newline="", encoding="utf-8") as handle:
            handle.write("node_id,x_m,y_m,z_m,shift_x_m,shift_y_m,shift_z_m,kind,line\n"
                         "A,2,2,20,0,0,0,surface,2\nB,28,18,20,0,0,0,surface,3\n")
        now = utc_now_iso()
        manifest = build_manifest(command="voidcube reconstruct invert", inputs={"site": site_path}, parameters={},
                                  outputs=["velocity.vti", "summary.json", "manifest.json"], started=now,
                                  finished=now)
        (folder / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
        return folder, site_path

    return make
