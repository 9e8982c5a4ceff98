"""Every indication gets its own plan and section pictures, with the marks every map carries.

Outside checks: the first Fresnel zone width, 2 sqrt(lambda L / 4 + lambda^2 / 16) (Williamson 1991,
"A guide to the limits of resolution imposed by scattering in ray tomography", Geophysics 56(2)),
sets which body is smaller than the resolution; matplotlib's own artists find the north arrow and
the scale bars. That every map carries a north arrow, a scale and a key naming only what is drawn is
common practice of map-making (common practice, no published source). The cube is invented.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.text import Annotation
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from reconstruct.cli import main
from reconstruct.interpret.detectability import find_weak_indications
from reconstruct.interpret.folder import load_inversion_folder, screen_folder
from reconstruct.io.outputs import read_cell_arrays_vti, write_cell_arrays_vti
from reconstruct.report import map_marks
from reconstruct.report import pictures as render


def _add_indications(folder):
    """Add to the fixture's cube an air sphere 2.4 m across (below the resolution of about 6.3 m) and a
    slow Gaussian bump peaking at 3 noise floors (rms 0.5 ns over the resolution)."""
    names = ("velocity_m_per_ns", "slowness_ns_per_m", "ray_length_m", "ray_count", "ground")
    grid, arrays = read_cell_arrays_vti(folder / "velocity.vti", names)
    c = grid.cell_centres_m()
    ground = arrays["ground"].astype(bool)
    slowness = 1.0 / arrays["velocity_m_per_ns"]
    small = np.sum((c - [24.5, 15.5, 6.5]) ** 2, axis=-1) <= 1.2**2
    lam = 1000 * 0.115 / 100.0
    width = 2 * np.sqrt(lam * 29.9 / 4 + lam**2 / 16)  # Williamson (1991); 29.9 m: the median pick distance
    bump = 3.0 * (0.5 / width) * np.exp(-np.sum((c - [5.5, 15.5, 6.5]) ** 2, axis=-1) / (2 * 1.5**2))
    slowness = np.where(ground, np.where(small, 1 / 0.25, slowness + bump), slowness)
    arrays.update(velocity_m_per_ns=1 / slowness, slowness_ns_per_m=slowness)
    write_cell_arrays_vti(folder / "velocity.vti", grid, arrays)
    return width


def _north_arrows(axes):
    return [a for a in axes.texts if isinstance(a, Annotation) and a.get_text() == map_marks.NORTH_LABEL]


def test_an_unresolved_body_and_a_weak_indication_get_slices_with_the_map_marks(make_inversion_folder):
    folder, _ = make_inversion_folder()
    _add_indications(folder)
    data = load_inversion_folder(folder)
    analysis, _ = screen_folder(data)
    statuses = sorted(b.status for b in analysis.bodies)
    assert statuses == ["resolved", "unresolved"]
    weak, labels = find_weak_indications(data.grid, analysis, data.ground, data.ray_count, data.surface_m)
    assert len(weak) == 1 and weak[0].fill == "water_or_clay"
    figure = render.slice_figure(data.grid, data.velocity_m_per_ns, data.ground, data.ray_count, labels,
                                 data.surface_m, weak[0], data.site.planned_works, what="weak indication",
                                 label=weak[0].indication_id)
    FigureCanvasAgg(figure).draw()
    plan, section = figure.axes[:2]
    assert plan.get_title().startswith("Weak indication 1: plan") and len(_north_arrows(plan)) == 1
    assert all(any(isinstance(a, AnchoredSizeBar) for a in ax.artists) for ax in (plan, section))
    words = [t.get_text() for legend in figure.legends for t in legend.get_texts()]
    assert any(w.startswith("outline of the weak indication (water- or clay-filled") for w in words)


@pytest.mark.slow
def test_the_voids_command_draws_every_body_and_weak_indication(make_inversion_folder):
    folder, _ = make_inversion_folder()
    width = _add_indications(folder)
    assert main(["voids", str(folder), "--quiet"]) == 0
    content = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    files = {p["file"] for p in content["pictures"]}
    for body in content["bodies"]:
        assert f"pictures/body_{body['body_id']}_slices.png" in files
    unresolved, = [b for b in content["bodies"] if b["tier"] == "unresolved_body"]
    assert unresolved["size_words"].startswith(f"up to about {width:.0f} m across")
    weak, = content["weak_indications"]
    assert "pictures/indication_1_slices.png" in files and (folder / "pictures" / "indication_1_slices.png").is_file()
    caption = next(p["caption"] for p in content["pictures"] if p["indication_id"] == 1)
    assert caption.startswith("Weak indication 1: plan")
    # the fixture's velocity noise, 0.0005 m/ns, is about 0.04 ns/m of slowness: half a noise floor
    assert weak["strength_noise_floors"] == pytest.approx(3.0, abs=0.5)
    assert content["counts"]["weak_indications"] == 1
    # a later run with fewer pictures removes the indication's picture (no picture outlives its subject)
    assert main(["voids", str(folder), "--quiet", "--max-pictures", "1"]) == 0
    assert not (folder / "pictures" / "indication_1_slices.png").exists()
