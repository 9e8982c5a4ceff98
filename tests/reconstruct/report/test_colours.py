"""Tests for ``reconstruct.report.colours``: the one colour set of every picture and page.

Outside checks:

- the category colours are those published by Okabe, M. and Ito, K. (2008),
  Color Universal Design (CUD): how to make figures and presentations that
  are friendly to colorblind people, https://jfly.uni-koeln.de/color/ (the
  0-255 RGB values of their table, typed here from that page);
- colours drawn together stay apart for readers with deuteranopia,
  protanopia and tritanopia, simulated with ``colorspacious`` (the model of
  Machado, G. M., Oliveira, M. M. and Fernandes, L. A. F. (2009), A
  physiologically-based model for simulation of color vision deficiency,
  IEEE TVCG 15(6), 1291-1298, at full severity) and measured in CAM02-UCS
  (Luo, M. R., Cui, G. and Li, C. (2006), Uniform colour spaces based on
  CIECAM02 colour appearance model, Color Research and Application 31(4),
  320-330);
- the lightness of the continuous maps, computed by ``colorspacious`` from
  matplotlib's own colour tables, rises steadily (sequential) or peaks at
  zero (diverging);
- the sources of ``reconstruct`` and ``plan``, read with :mod:`ast`, hold no
  colour outside ``colours.py``.
"""

from __future__ import annotations

import ast
import itertools
import re
from pathlib import Path

import matplotlib
import matplotlib.colors as mcolors
import numpy as np
import pytest
from colorspacious import cspace_convert, deltaE

from reconstruct.io.tables import NODE_KINDS
from reconstruct.report import colours

REPO = Path(__file__).resolve().parents[3]

# Okabe and Ito (2008), table of the colour set, R G B in 0-255
OKABE_ITO_RGB = {
    "black": (0, 0, 0),
    "orange": (230, 159, 0),
    "sky blue": (86, 180, 233),
    "bluish green": (0, 158, 115),
    "yellow": (240, 228, 66),
    "blue": (0, 114, 178),
    "vermilion": (213, 94, 0),
    "reddish purple": (204, 121, 167),
}

# Smallest CAM02-UCS distance accepted between two category colours drawn in one
# picture. Our margin, from memory rather than a published rule: a CAM02-UCS unit
# is of the order of a just-noticeable difference between large patches, and
# small plot markers and thin lines need several times more. The whole Okabe-Ito
# set keeps at least 11 units under every simulation below; the red and green of
# matplotlib's default cycle fall to about 5 under deuteranopia (checked below).
MIN_DISTANCE = 10.0

CVD_TYPES = ("deuteranomaly", "protanomaly", "tritanomaly")


def _rgb1(hex_code: str) -> np.ndarray:
    return np.asarray(mcolors.to_rgb(hex_code), dtype=float)


def _as_seen(rgb1, cvd_type):
    """sRGB (0-1) as seen with full deficiency ``cvd_type`` (None: normal vision)."""
    if cvd_type is None:
        return np.asarray(rgb1, dtype=float)
    space = {"name": "sRGB1+CVD", "cvd_type": cvd_type, "severity": 100}
    return np.clip(cspace_convert(rgb1, space, "sRGB1"), 0.0, 1.0)


def _smallest_distance(hex_codes, cvd_type):
    seen = [_as_seen(_rgb1(h), cvd_type) for h in hex_codes]
    return min(float(deltaE(a, b, input_space="sRGB1", uniform_space="CAM02-UCS"))
               for a, b in itertools.combinations(seen, 2))


def _lightness(map_name, cvd_type=None, n=256):
    rgb = matplotlib.colormaps[map_name](np.linspace(0.0, 1.0, n))[:, :3]
    return cspace_convert(_as_seen(rgb, cvd_type), "sRGB1", "CAM02-UCS")[:, 0]


# -- the published colours ----------------------------------------------------

def test_category_colours_are_the_published_okabe_ito_colours():
    # Okabe and Ito (2008): the eight colours and their RGB values
    assert set(colours.OKABE_ITO) == set(OKABE_ITO_RGB)
    for name, rgb in OKABE_ITO_RGB.items():
        assert colours.OKABE_ITO[name] == "#{:02X}{:02X}{:02X}".format(*rgb), name
    categories = [*colours.FILL_COLOURS.values(), *colours.NODE_KIND_COLOURS.values(),
                  *colours.PICK_CLASS_COLOURS.values(), colours.PLANNED_WORK_COLOUR, colours.NODE_COLOUR,
                  colours.UNSPECIFIED_KIND_COLOUR, colours.HOLE_COLOUR]
    assert set(categories) <= set(colours.OKABE_ITO.values())


def test_every_category_of_the_vocabulary_has_a_colour():
    assert set(colours.NODE_KIND_COLOURS) == set(NODE_KINDS)
    assert set(colours.FILL_COLOURS) == {"air", "water_or_clay"}  # docs/glossary.md, column fill
    assert set(colours.PICK_CLASS_COLOURS) == {"kept", "air", "reciprocal", "implausible"}


# -- colours drawn together stay apart with colour-vision deficiency ----------

PICTURES = {
    "3D view and slices": [colours.FILL_COLOURS["air"], colours.FILL_COLOURS["water_or_clay"],
                           colours.PLANNED_WORK_COLOUR, colours.NODE_COLOUR, colours.HOLE_COLOUR],
    "plan map": [*colours.NODE_KIND_COLOURS.values(), colours.UNSPECIFIED_KIND_COLOUR,
                 colours.PLANNED_WORK_COLOUR],
    "pick checks": list(colours.PICK_CLASS_COLOURS.values()),
}


@pytest.mark.parametrize("picture", sorted(PICTURES))
@pytest.mark.parametrize("cvd_type", (None, *CVD_TYPES))
def test_colours_of_one_picture_stay_apart(picture, cvd_type):
    hex_codes = PICTURES[picture]
    assert len(set(hex_codes)) == len(hex_codes), f"{picture}: two categories share a colour"
    assert _smallest_distance(hex_codes, cvd_type) >= MIN_DISTANCE


def test_the_distance_check_catches_a_red_green_pair():
    # the check can fail: matplotlib's default red and green merge under deuteranopia
    red_green = [mcolors.TABLEAU_COLORS["tab:red"], mcolors.TABLEAU_COLORS["tab:green"]]
    assert _smallest_distance(red_green, None) > 5 * MIN_DISTANCE
    assert _smallest_distance(red_green, "deuteranomaly") < MIN_DISTANCE


# -- continuous maps ----------------------------------------------------------

@pytest.mark.parametrize("map_name", (colours.VELOCITY_MAP, colours.COVERAGE_MAP))
@pytest.mark.parametrize("cvd_type", (None, *CVD_TYPES))
def test_sequential_maps_rise_steadily_in_lightness(map_name, cvd_type):
    assert np.all(np.diff(_lightness(map_name, cvd_type)) > 0)


def test_elevation_backdrop_changes_lightness_one_way():
    steps = np.diff(_lightness(colours.ELEVATION_MAP))
    assert np.all(steps > 0) or np.all(steps < 0)


@pytest.mark.parametrize("cvd_type", (None, *CVD_TYPES))
def test_diverging_map_is_lightest_at_zero_and_darkens_both_ways(cvd_type):
    lightness = _lightness(colours.DIVERGING_MAP, cvd_type, n=255)
    centre = int(np.argmax(lightness))
    assert abs(centre - 127) <= 1
    assert np.all(np.diff(lightness[:centre + 1]) >= 0) and np.all(np.diff(lightness[centre:]) <= 0)
    # neither sign looks stronger: the two ends are about as dark
    assert abs(lightness[0] - lightness[-1]) < MIN_DISTANCE


def test_the_lightness_check_catches_a_rainbow_map():
    steps = np.diff(_lightness("jet"))
    assert not (np.all(steps > 0) or np.all(steps < 0))


def test_cells_without_rays_cannot_pass_for_a_velocity():
    # the veiled colour of every velocity stays far from every colour of the velocity map,
    # even before the hatch is drawn on top
    table = matplotlib.colormaps[colours.VELOCITY_MAP](np.linspace(0.0, 1.0, 256))[:, :3]
    alpha = colours.NO_RAYS_VEIL_ALPHA
    veiled = (1.0 - alpha) * table + alpha * _rgb1(colours.NO_RAYS_VEIL_COLOUR)
    table_ucs = cspace_convert(table, "sRGB1", "CAM02-UCS")
    veiled_ucs = cspace_convert(veiled, "sRGB1", "CAM02-UCS")
    nearest = np.linalg.norm(veiled_ucs[:, None, :] - table_ucs[None, :, :], axis=-1).min(axis=1)
    assert nearest.min() >= MIN_DISTANCE
    assert colours.NO_RAYS_HATCH.strip()


# -- no colour outside colours.py ---------------------------------------------

_HEX = re.compile(r"(?<![\w&])#(?:[0-9A-Fa-f]{8}|[0-9A-Fa-f]{6}|[0-9A-Fa-f]{3})(?![0-9A-Za-z_])")
_COLOUR_KEYWORDS = {"color", "colors", "c", "edgecolor", "edgecolors", "facecolor", "facecolors", "cmap",
                    "hatchcolor", "colour", "background"}
_NOT_A_COLOUR = {"none"}  # matplotlib's "draw no fill"


def _colour_literals(source: str, names: set, maps: set) -> list:
    found = []
    tree = ast.parse(source)
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            text = node.value
            if _HEX.search(text):
                found.append((node.lineno, f"hex colour {_HEX.findall(text)}"))
            if text in maps:
                found.append((node.lineno, f"colour map {text!r}"))
            if text.lower() in names:
                found.append((node.lineno, f"named colour {text!r}"))
        elif isinstance(node, ast.keyword) and node.arg in _COLOUR_KEYWORDS:
            value = node.value
            if isinstance(value, ast.Constant) and isinstance(value.value, str) and value.value not in _NOT_A_COLOUR:
                found.append((value.lineno, f"{node.arg}={value.value!r}"))
    return found


def _sources():
    for package in ("reconstruct", "plan"):
        for path in sorted((REPO / package).rglob("*.py")):
            if path != REPO / "reconstruct" / "report" / "colours.py":
                yield path


def test_no_colour_is_set_outside_colours_py():
    names = set(mcolors.CSS4_COLORS) | set(mcolors.TABLEAU_COLORS)
    maps = set(matplotlib.colormaps)
    sources = list(_sources())
    assert len(sources) > 20  # the walk found the packages
    found = [f"{path.relative_to(REPO)}:{line}: {what}" for path in sources
             for line, what in _colour_literals(path.read_text(encoding="utf-8"), names, maps)]
    assert not found, "colours belong in reconstruct/report/colours.py:\n" + "\n".join(found)


def test_the_source_walk_catches_each_kind_of_colour():
    names, maps = set(mcolors.CSS4_COLORS), set(matplotlib.colormaps)
    caught = _colour_literals('ax.plot(x, y, color="#7b2d26")\n'
                              'ax.imshow(a, cmap="magma")\n'
                              'plotter.set_background("white")\n'
                              'ax.scatter(x, y, c="k")\n'
                              'STYLE = "th { background: #ececec; }"\n'
                              'ax.contourf(x, y, z, colors="none")\n', names, maps)
    assert sorted({line for line, _ in caught}) == [1, 2, 3, 4, 5]
