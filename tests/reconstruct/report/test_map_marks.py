"""Tests for ``reconstruct.report.map_marks`` and the marks on the pictures that use it.

Outside checks: matplotlib's own data-to-display transforms measure the
north arrow's direction, the scale bar's length and the scale of each view.
That a map carries a north arrow and a scale, that plan and section of one
body are drawn to the same scale and that a key names only what is drawn
are the common practice of map-making (common practice, no published source).
"""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.text import Annotation
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from reconstruct.interpret.bodies import FILL_AIR, VoidBody
from reconstruct.model.grid import Grid
from reconstruct.io.site import PlannedWork
from reconstruct.report import map_marks
from reconstruct.report import pictures as render


def _north_arrows(axes):
    return [a for a in axes.texts if isinstance(a, Annotation) and a.get_text() == map_marks.NORTH_LABEL]


def _size_bars(axes):
    return [a for a in axes.artists if isinstance(a, AnchoredSizeBar)]


def test_north_arrow_points_to_plus_y_and_scale_bar_is_its_stated_length():
    figure = Figure(figsize=(5, 5))
    axes = figure.add_subplot()
    axes.set_xlim(0, 80)
    axes.set_ylim(0, 80)
    axes.set_aspect("equal")
    map_marks.draw_north_arrow(axes)
    length = map_marks.draw_scale_bar(axes, 80.0)
    FigureCanvasAgg(figure).draw()
    (arrow,) = _north_arrows(axes)
    foot, letter = np.asarray(arrow.xy), np.asarray(arrow.xyann)
    # straight up (+y, north in the local frame), the letter N at the head
    assert letter[0] == pytest.approx(foot[0]) and letter[1] > foot[1]
    assert arrow.arrow_patch.get_arrowstyle().__class__.__name__ == "CurveFilledA"  # the head at the letter
    (bar,) = _size_bars(axes)
    assert length == 10.0 and bar.txt_label.get_text() == "10 m"
    # the bar's drawn length in display pixels equals 10 m through the axes' data transform
    drawn = bar.size_bar.get_children()[0].get_window_extent(figure.canvas.get_renderer()).width
    ten_m = axes.transData.transform((10.0, 0.0))[0] - axes.transData.transform((0.0, 0.0))[0]
    assert drawn == pytest.approx(ten_m, rel=0.02)


def test_key_lists_only_the_entries_given():
    figure = Figure()
    axes = figure.add_subplot()
    map_marks.draw_key(axes, [])
    assert axes.get_legend() is None
    line, = axes.plot([0, 1], [0, 1])
    map_marks.draw_key(axes, [(line, "ground surface")])
    assert [t.get_text() for t in axes.get_legend().get_texts()] == ["ground surface"]


def _body_case(work_y_m=None):
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (60, 40, 30))
    ground = grid.cell_centres_m()[..., 2] < 25.0
    centre = np.array([30.5, 20.5, 15.5])
    inside = np.sum((grid.cell_centres_m() - centre) ** 2, axis=-1) <= 3.0**2
    velocity = np.where(inside, 0.25, 0.115)
    labels = inside.astype(int)
    rays = np.ones(grid.shape)
    if work_y_m is not None:
        rays[40:] = 0  # inside the window drawn around the body (x 15 to 46 m)
    body = VoidBody(body_id=1, status="resolved", fill=FILL_AIR, n_cells=int(inside.sum()),
                    volume_m3=float(inside.sum()), centroid_m=tuple(centre),
                    bbox_min_m=tuple(centre - 3.5), bbox_max_m=tuple(centre + 3.5),
                    **{k: None for k in _other_fields()})
    works = () if work_y_m is None else (PlannedWork("road", "haul_road", "polyline",
                                                    ((0.0, work_y_m, 25.0), (60.0, work_y_m, 25.0))),)
    return (grid, velocity, ground, rays, labels, np.full((60, 40), 25.0), body), works


def _other_fields():
    from dataclasses import fields

    given = {"body_id", "status", "fill", "n_cells", "volume_m3", "centroid_m", "bbox_min_m", "bbox_max_m"}
    return [f.name for f in fields(VoidBody) if f.name not in given]


def _key_words(figure):
    return [t.get_text() for legend in figure.legends for t in legend.get_texts()]


@pytest.mark.parametrize("work_y_m", [None, 22.0])
def test_body_slices_share_one_scale_carry_north_and_name_only_what_is_drawn(work_y_m):
    args, works = _body_case(work_y_m)
    figure = render.slice_figure(*args, works=works)
    FigureCanvasAgg(figure).draw()
    plan, section = figure.axes[:2]
    # one scale: the same pixels per metre along x on both views and along y (plan), z (section)
    def px_per_m(axes, axis):
        a = np.array(axes.transData.transform((30.0, 20.0 if axes is plan else 15.0)))
        step = np.array([1.0, 0.0]) if axis == 0 else np.array([0.0, 1.0])
        b = np.array(axes.transData.transform(np.array([30.0, 20.0 if axes is plan else 15.0]) + step))
        return float(np.linalg.norm(b - a))
    scales = [px_per_m(plan, 0), px_per_m(plan, 1), px_per_m(section, 0), px_per_m(section, 1)]
    assert max(scales) == pytest.approx(min(scales), rel=0.01)
    assert len(_north_arrows(plan)) == 1 and not _north_arrows(section)
    assert len(_size_bars(plan)) == 1 and len(_size_bars(section)) == 1
    words = _key_words(figure)
    assert any("outline of the body (air-filled" in w for w in words)
    assert "ground surface" in words
    assert ("planned works" in words) == (work_y_m is not None)
    assert ("no ray crossed these cells" in words) == (work_y_m is not None)
    assert "section west-east" in section.get_title() and "looking north" in section.get_title()
    colour_bar = figure.axes[-1]
    assert "velocity (m/ns)" in colour_bar.get_ylabel()
