"""Tests for ``reconstruct.report.scene_3d``: the interactive 3D view of the void report.

Outside checks:

- the sections hold the values of the cube as pyvista (a general-purpose
  library) reads them from ``interpretation.vti``, cell by cell;
- each body's mesh in the scene has the bounds pyvista gives for that body's
  cells of ``voids.vtp``;
- the page is opened in a real browser (Debian's ``chromium``, headless,
  driven by playwright) with the network cut off: the view must draw on its
  canvas (pixels in the colour of the air-filled body), a layer unticked must
  vanish from the picture, and a click on the body, or choosing it from the
  list, must show the body's row of the void table.

The small output folder comes from the shared fixture of tests/reconstruct/conftest.py
(one air-filled box void under a haul road), so the browser test runs in seconds.
"""

from __future__ import annotations

import io
import json
import os
import shutil
import time
from pathlib import Path

import numpy as np
import pytest

from reconstruct.cli import main
from reconstruct.model.grid import Grid
from reconstruct.report import colours
from reconstruct.report.scene_3d import cube_sections, read_scene_data


def _folder_with_report(make_inversion_folder):
    folder, _ = make_inversion_folder(name="scene test quarry", work="haul road <b>A</b>")
    assert main(["voids", str(folder), "--quiet", "--no-pictures"]) == 0
    assert main(["report", str(folder)]) == 0
    return folder


# -- what the scene holds -----------------------------------------------------

def test_sections_hold_the_cube_as_pyvista_reads_it(make_inversion_folder):
    import pyvista

    folder = _folder_with_report(make_inversion_folder)
    voids = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    data = read_scene_data(folder, voids)
    cube = pyvista.read(str(folder / "interpretation.vti"))
    shape = tuple(n - 1 for n in cube.dimensions)
    velocity = np.asarray(cube.cell_data["velocity_m_per_ns"]).reshape(shape, order="F")
    shown = (np.asarray(cube.cell_data["ground"]).reshape(shape, order="F") > 0) & (
        np.asarray(cube.cell_data["ray_count"]).reshape(shape, order="F") > 0)
    centres = [np.asarray(cube.origin[a]) + (np.arange(shape[a]) + 0.5) * cube.spacing[a] for a in range(3)]
    assert [q["key"] for q in data.sections] == ["velocity", "anomaly", "rays"]
    velocity_sections = data.sections[0]
    for axis, name in enumerate("xyz"):
        section = velocity_sections[name]
        assert len(section["positions"]) == shape[axis]  # the fixture's 20-30 planes are all kept
        a, b = [other for other in range(3) if other != axis]
        np.testing.assert_allclose(section["columns"], centres[a])
        np.testing.assert_allclose(section["rows"], centres[b])
        for k, position in enumerate(section["positions"]):
            index = int(np.argmin(np.abs(centres[axis] - position)))
            expected = np.moveaxis(np.where(shown, velocity, np.nan), axis, 0)[index].T  # [row b][column a]
            got = np.array([[np.nan if v is None else v for v in row] for row in section["values"][k]])
            np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
            np.testing.assert_allclose(got[~np.isnan(got)], expected[~np.isnan(expected)], atol=5e-5)
    assert velocity_sections["range"] == pytest.approx([velocity[shown].min(), velocity[shown].max()])
    # the ray count is drawn in every ground cell, the anomaly on a scale centred on zero
    ground = np.asarray(cube.cell_data["ground"]).reshape(shape, order="F") > 0
    rays = np.asarray(cube.cell_data["ray_count"]).reshape(shape, order="F")
    assert data.sections[2]["range"] == [rays[ground].min(), rays[ground].max()]
    anomaly = np.asarray(cube.cell_data["slowness_anomaly_ns_per_m"]).reshape(shape, order="F")[shown]
    assert data.sections[1]["cmin"] == -data.sections[1]["cmax"]
    assert data.sections[1]["cmax"] == pytest.approx(np.quantile(np.abs(anomaly), 0.99))


def test_sections_are_thinned_to_the_limits():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (200, 60, 70))
    velocity = np.full(grid.shape, 0.1)
    sections = cube_sections(grid, velocity, np.ones(grid.shape, bool), max_cells=1000, max_sections=25)
    for name in "xyz":
        section = sections[name]
        assert len(section["positions"]) <= 25
        assert len(section["values"][0]) * len(section["values"][0][0]) <= 1000
        assert len(section["rows"]) == len(section["values"][0])
        assert len(section["columns"]) == len(section["values"][0][0])


def test_a_large_model_keeps_the_page_under_25_mb():
    # the budget for the whole report; the model of ENVIRONMENT.md's reference speeds
    # (200 x 60 x 70 cells), noisy values of the longest text, bodies and ground at their limits
    import plotly.io

    from reconstruct.report.scene_3d import SceneData, _json_for_script, _sections, scene_figure

    rng = np.random.default_rng(1)
    grid = Grid((500000.0, 6000000.0, 0.0), (1.0, 1.0, 1.0), (200, 60, 70))
    cube = {"velocity_m_per_ns": rng.uniform(0.1, 0.2, grid.shape),
            "slowness_anomaly_ns_per_m": rng.uniform(-9.0, -1.0, grid.shape),
            "ray_count": rng.integers(100, 1000, grid.shape), "ground": np.ones(grid.shape, bool)}
    sections = _sections(grid, cube, 4096, 40)

    def mesh(n_triangles):
        return (rng.uniform(0.0, 1.0, (n_triangles // 2, 3)) + grid.origin_m,
                rng.integers(0, n_triangles // 2, (n_triangles, 3)).astype(np.int32))

    data = SceneData(box_m=((500000.0, 500200.0), (6000000.0, 6000060.0), (0.0, 70.0)), ground=mesh(50_000),
                     bodies=tuple((i + 1, "air", "resolved", *mesh(10_000)) for i in range(10)), sections=sections)
    size = len(plotly.io.to_html(scene_figure(data), include_plotlyjs=True, full_html=False)) + len(
        _json_for_script(sections))
    assert size < 16e6  # measured 14.7 MB; the limit is 25 MB for the whole report


def test_each_body_mesh_has_the_bounds_of_its_cells_in_voids_vtp(make_inversion_folder):
    import pyvista

    folder = _folder_with_report(make_inversion_folder)
    voids = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    data = read_scene_data(folder, voids)
    mesh = pyvista.read(str(folder / "voids.vtp"))
    ids = np.asarray(mesh.cell_data["body_id"])
    assert sorted(b[0] for b in data.bodies) == sorted(set(ids.tolist())) != []
    for body_id, fill, status, points, triangles in data.bodies:
        expected = mesh.extract_cells(np.flatnonzero(ids == body_id)).bounds
        np.testing.assert_allclose(np.ravel(list(zip(points.min(axis=0), points.max(axis=0)))), expected)
        assert triangles.shape[1] == 3 and triangles.max() < len(points)
    # the site's planned work and the fixture's two nodes are read too
    assert [w[0] for w in data.works] == ["haul road <b>A</b>"] and len(data.nodes) == 2
    assert not data.notes


def test_many_triangles_are_simplified_to_the_limit(make_inversion_folder):
    folder = _folder_with_report(make_inversion_folder)
    voids = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    full = read_scene_data(folder, voids).bodies[0]
    simple = read_scene_data(folder, voids, max_body_triangles=len(full[4]) // 4).bodies[0]
    assert len(simple[4]) <= 0.3 * len(full[4])
    # the simplified surface spans the same box, to within a cell (1 m)
    np.testing.assert_allclose(simple[3].min(axis=0), full[3].min(axis=0), atol=1.0)
    np.testing.assert_allclose(simple[3].max(axis=0), full[3].max(axis=0), atol=1.0)


def test_missing_pieces_are_left_out_and_said(make_inversion_folder):
    folder = _folder_with_report(make_inversion_folder)
    voids = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    (folder / "ground.vtp").unlink()
    data = read_scene_data(folder, dict(voids, site_file=str(folder / "no_such_site.yaml")))
    assert data.ground is None and data.works == () and data.bodies
    assert any("ground surface left out" in note and "ground.vtp" in note for note in data.notes)
    assert any("planned works" in note and "no_such_site.yaml" in note for note in data.notes)


def test_the_report_is_written_without_the_view_when_no_cube_can_be_read(make_inversion_folder):
    from reconstruct.report.void_report import build_report_html

    folder = _folder_with_report(make_inversion_folder)
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert page.count("<h2>3D view</h2>") == 1 and page.count('id="voidcube-scene"') == 1
    assert page.index("probe drilling") < page.index("<h2>3D view</h2>")  # the cautions stay first
    (folder / "interpretation.vti").unlink()
    (folder / "velocity.vti").unlink()
    page = build_report_html(folder)
    assert "The 3D view is left out:" in page and "velocity.vti: file not found" in page
    assert 'id="voidcube-scene"' not in page and "Void table" in page and "probe drilling" in page


# -- in a real browser --------------------------------------------------------

def _browser_path():
    """The Chromium to drive: $VOIDCUBE_CHROMIUM, else Debian's chromium on the PATH."""
    for candidate in (os.environ.get("VOIDCUBE_CHROMIUM"), shutil.which("chromium"),
                      shutil.which("chromium-browser")):
        if candidate and Path(candidate).is_file():
            return candidate
    return None


_ARGS = ["--no-sandbox", "--use-gl=swiftshader", "--enable-unsafe-swiftshader", "--ignore-gpu-blocklist"]


@pytest.fixture(scope="module")
def browser():
    playwright_api = pytest.importorskip("playwright.sync_api", reason="playwright is not installed "
                                         "(pip install '.[test]')")
    path = _browser_path()
    if path is None:
        pytest.skip("no Chromium found (install Debian's 'chromium' package, or set VOIDCUBE_CHROMIUM)")
    with playwright_api.sync_playwright() as driver:
        launched = driver.chromium.launch(executable_path=path, args=_ARGS, headless=True)
        try:
            yield launched
        finally:
            launched.close()


def _near(image, hex_code, tolerance=40):
    """Pixels (rows, columns) of an RGB image within ``tolerance`` of a colour on every channel,
    or darker shades of it (the mesh is shaded) down to half its brightness."""
    target = np.array([int(hex_code[i:i + 2], 16) for i in (1, 3, 5)], dtype=float)
    rgb = image[..., :3].astype(float)
    scale = (rgb @ target) / (target @ target)  # the best multiple of the colour
    close = np.abs(rgb - scale[..., None] * target).max(axis=-1) < tolerance
    return close & (scale > 0.5) & (scale < 1.3)


def _scene_image(page):
    from PIL import Image

    png = page.locator("#voidcube-scene").screenshot()
    return np.asarray(Image.open(io.BytesIO(png)).convert("RGB"))


def _image_when(page, condition, timeout_s=15.0):
    """The view's picture once ``condition(picture)`` holds, or the last one after ``timeout_s``
    (software rendering draws a frame in its own time, slower on a busy machine)."""
    deadline = time.monotonic() + timeout_s
    while True:
        image = _scene_image(page)
        if condition(image) or time.monotonic() > deadline:
            return image
        page.wait_for_timeout(200)


def _changed_pixels(a, b):
    return int(np.abs(a.astype(int) - b.astype(int)).max(axis=-1).astype(bool).sum())


def _open(browser, folder):
    page = browser.new_page(viewport={"width": 1200, "height": 900})
    requests = []
    page.route("**/*", lambda route: (requests.append(route.request.url), route.abort())
               if not route.request.url.startswith(("file:", "data:", "blob:")) else route.continue_())
    errors = []
    page.on("pageerror", lambda error: errors.append(str(error)))
    page.goto((folder / "report.html").as_uri())
    page.wait_for_function("document.getElementById('voidcube-scene').dataset.sceneReady === 'yes'",
                           timeout=60000)
    page.locator("#voidcube-scene").scroll_into_view_if_needed()
    return page, requests, errors


def _click(page, row, y, x):
    """Click the view at (x, y) until ``row`` shows. plotly counts a click when it draws a frame while
    the button is down; in software rendering a frame takes a while, so the button is held as a slow
    hand would, longer at each try."""
    box = page.locator("#voidcube-scene").bounding_box()
    for hold_ms in (600, 1500, 3000):
        page.mouse.move(box["x"] + x, box["y"] + y)
        page.wait_for_timeout(300)
        page.mouse.down()
        page.wait_for_timeout(hold_ms)
        page.mouse.up()
        page.wait_for_timeout(500)
        if row.is_visible():
            return


def test_the_view_draws_toggles_and_shows_a_clicked_body_in_chromium(browser, make_inversion_folder):
    folder = _folder_with_report(make_inversion_folder)
    page, requests, errors = _open(browser, folder)
    air = colours.FILL_COLOURS["air"]
    assert page.locator("#voidcube-scene canvas").count() >= 1
    image = _image_when(page, lambda im: _near(im, air).sum() > 200)
    assert len(np.unique(image.reshape(-1, 3), axis=0)) > 50  # drawn, not blank
    body_pixels = _near(image, air).sum()
    assert body_pixels > 200, "the air-filled body is not drawn"

    # untick the air-filled bodies: they vanish; tick them again: they are back
    page.locator('input[data-layer="fast-bodies"]').uncheck()
    assert _near(_image_when(page, lambda im: _near(im, air).sum() < 0.05 * body_pixels), air).sum() \
        < 0.05 * body_pixels
    page.locator('input[data-layer="fast-bodies"]').check()
    image = _image_when(page, lambda im: _near(im, air).sum() > 0.9 * body_pixels)
    assert _near(image, air).sum() > 0.9 * body_pixels

    # click the body where it is drawn: its row of the void table appears
    row = page.locator('.scene-body-row[data-body="1"]')
    assert row.is_hidden()
    rows, columns = np.nonzero(_near(image, air))
    _click(page, row, int(np.median(rows)), int(np.median(columns)))
    assert row.is_visible(), "a click on the body did not show its row"
    assert "air-filled (faster than the rock)" in row.inner_text() and "resolved" in row.inner_text()
    assert page.locator("#scene-body-choice").input_value() == "1"

    # choosing "(none)" hides it; choosing the body from the list shows it
    page.locator("#scene-body-choice").select_option("")
    assert row.is_hidden()
    page.locator("#scene-body-choice").select_option("1")
    assert row.is_visible()
    assert not requests and not errors, (requests, errors)
    page.close()


def test_the_sections_move_in_chromium(browser, make_inversion_folder):
    folder = _folder_with_report(make_inversion_folder)
    page, requests, errors = _open(browser, folder)
    before = _scene_image(page)
    page.locator('input[data-layer="section"]').check()
    page.locator("#scene-section-axis").select_option("z")
    shown = _image_when(page, lambda im: _changed_pixels(im, before) > 2000)
    assert _changed_pixels(shown, before) > 2000
    label = page.locator("#scene-section-label")
    first = label.inner_text()
    assert first.startswith("z = ") and first.endswith(" m")
    page.locator("#scene-section-position").fill("3")
    assert label.inner_text() == "z = 3.5 m"  # the fixture's cell centres: 0.5 m + k * 1 m
    moved = _image_when(page, lambda im: _changed_pixels(im, shown) > 500)
    assert _changed_pixels(moved, shown) > 500
    # the ray count (12 in every ground cell of the fixture) in the coverage colours
    page.locator("#scene-section-quantity").select_option(label="ray count (rays crossing the cell)")
    assert _changed_pixels(_image_when(page, lambda im: _changed_pixels(im, moved) > 500), moved) > 500
    assert not requests and not errors, (requests, errors)
    page.close()
