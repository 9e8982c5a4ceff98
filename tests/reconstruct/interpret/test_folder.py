"""Tests for ``reconstruct.interpret.folder`` and the ``voidcube reconstruct voids`` command.

The folder is the invented one of conftest.py (a box void 7 x 5 x 5 m whose
roof is 7 m below flat ground). Outside checks: plain geometry of the box
(volume, roof thickness, the road 7 m above its roof); the Topp et al. (1980)
fit for the water content written to the cube (tests/REFERENCES.md pair
theta(10) = 0.1883 checked through K = (c/v)^2 with scipy.constants).
"""

from __future__ import annotations

import csv
import hashlib
import json

import numpy as np
import pytest
import scipy.constants

from reconstruct.cli import main
from reconstruct.errors import InputError
from reconstruct.interpret.folder import load_inversion_folder
from reconstruct.io.outputs import read_cell_arrays_vti


def _csv_rows(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def _hashes(folder):
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir() if p.is_file()}


def test_voids_command_writes_the_table_meshes_and_manifest(make_inversion_folder, capsys):
    folder, site = make_inversion_folder()
    before = _hashes(folder)
    assert main(["voids", str(folder), "--no-pictures", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "voids: 1," in out and "not a design" in out
    for name in ("voids.csv", "voids.json", "weak_indications.csv", "screening.csv", "interpretation.vti",
                 "voids.vtp", "ground.vtp"):
        assert (folder / name).is_file(), name
    # inputs untouched (the manifest is extended, not an input)
    after = _hashes(folder)
    for name in ("velocity.vti", "summary.json", "residuals.csv", "nodes_used.csv"):
        assert after[name] == before[name]
    rows = _csv_rows(folder / "voids.csv")
    assert list(rows[0])[:3] == ["body_id", "status", "fill"]
    void = [r for r in rows if r["status"] == "resolved"]
    assert len(void) == 1
    assert float(void[0]["volume_m3"]) == pytest.approx(7 * 5 * 5)
    assert void[0]["fill"] == "air"
    assert float(void[0]["roof_thickness_m"]) == pytest.approx(20.0 - 13.0)
    assert float(void[0]["roof_below_work_m"]) == pytest.approx(7.0)
    assert void[0]["nearest_work"] == "haul road"
    content = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    assert content["method"]["threshold_sigmas"] > 1.96 and content["depth_slabs"][0]["threshold_ns_per_m"] > 0
    assert any("probe drilling" in c for c in content["cautions"])
    assert any("soils" in c for c in content["cautions"])
    screening = _csv_rows(folder / "screening.csv")
    assert screening[0]["rank"] == "1" and "haul road" in screening[0]["reasons"]
    assert screening[0]["body_id"] == void[0]["body_id"]
    # one name per quantity in every table (docs/glossary.md)
    for key in ("roof_thickness_m", "roof_below_work_m", "span_m", "standoff_m"):
        assert screening[0][key] == void[0][key], key
    assert content["screening"]["ranked"][0]["body_id"] == int(void[0]["body_id"])
    assert content["counts"] == {"resolved": 1, "unresolved": content["counts"]["unresolved"],
                                 "weak_indications": len(content["weak_indications"])}
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["command"] == "voidcube reconstruct invert"
    assert manifest["later_runs"][-1]["command"] == "voidcube reconstruct voids"
    assert manifest["later_runs"][-1]["inputs"]["site"]["sha256"] == hashlib.sha256(site.read_bytes()).hexdigest()
    assert "voids.csv" in manifest["outputs"]


def test_interpretation_cube_holds_petrophysics_and_body_ids(make_inversion_folder):
    folder, _ = make_inversion_folder()
    assert main(["voids", str(folder), "--no-pictures", "--quiet"]) == 0
    grid, cube = read_cell_arrays_vti(folder / "interpretation.vti",
                                      ["relative_permittivity", "water_content_topp", "body_id", "velocity_m_per_ns"])
    assert grid.shape == (30, 20, 25)
    c = scipy.constants.c * 1e-9
    v = cube["velocity_m_per_ns"][2, 2, 2]
    assert cube["relative_permittivity"][2, 2, 2] == pytest.approx((c / v) ** 2)
    # Topp et al. (1980) pair from tests/REFERENCES.md: theta(10) = 0.1883; a cell at c / sqrt(10)
    k = cube["relative_permittivity"][2, 2, 2]
    theta = cube["water_content_topp"][2, 2, 2]
    assert theta == pytest.approx(-0.053 + 0.0292 * k - 5.5e-4 * k**2 + 4.3e-6 * k**3)
    assert np.isnan(cube["water_content_topp"][0, 0, 24])  # air
    assert cube["body_id"][12, 8, 10] == 1 and cube["body_id"][2, 2, 2] == 0


def test_site_found_relative_to_the_folder_and_refused_when_changed(make_inversion_folder, monkeypatch):
    folder, site = make_inversion_folder()
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    manifest["inputs"]["site"]["path"] = "site.yaml"  # relative, as from the folder's parent
    (folder / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    monkeypatch.chdir(folder)
    assert load_inversion_folder(folder).site_path == folder.parent / "site.yaml"
    site.write_text(site.read_text(encoding="utf-8") + "\n# edited\n", encoding="utf-8")
    with pytest.raises(InputError, match="has changed since the inversion.*--site"):
        load_inversion_folder(folder)
    data = load_inversion_folder(folder, site)  # given explicitly: used, with a note
    assert data.notes and "differs from the one recorded" in data.notes[0]


def test_user_errors_are_one_clear_line(make_inversion_folder, tmp_path, capfd):
    folder, site = make_inversion_folder()
    assert main(["voids", str(tmp_path / "nowhere")]) == 2
    assert "not a folder" in capfd.readouterr().err
    (folder / "summary.json").write_text("{ not json", encoding="utf-8")
    assert main(["voids", str(folder)]) == 2
    err = capfd.readouterr().err
    assert "summary.json: cannot be read as JSON" in err and "Traceback" not in err
    other = tmp_path / "other.yaml"
    other.write_text(site.read_text(encoding="utf-8").replace("size_m: [30, 20, 25]", "size_m: [30, 20, 24]"),
                     encoding="utf-8")
    (folder / "summary.json").write_text(json.dumps({"misfit": {"rms_ns": 0.5}}), encoding="utf-8")
    assert main(["voids", str(folder), "--site", str(other)]) == 2
    assert "differs from the cube" in capfd.readouterr().err
    assert main(["voids", str(folder), "--threshold-sigmas", "-2"]) == 2
    assert "sigmas must be a number > 0" in capfd.readouterr().err
    (folder / "velocity.vti").write_bytes((folder / "velocity.vti").read_bytes()[:300])  # cut short
    assert main(["voids", str(folder)]) == 2
    err = capfd.readouterr().err
    assert "velocity.vti: damaged or not VTK image data" in err and "ERR" not in err
    (folder / "velocity.vti").unlink()
    assert main(["voids", str(folder)]) == 2
    assert "velocity.vti: file not found" in capfd.readouterr().err
