"""The one colour set of every picture and page voidcube draws.

Plain data, defined once: every figure, rendering and report page takes its
colours and colour maps from here, so that one node kind, pick class, body
fill or planned work has the same colour in every picture and report. No other
module of ``reconstruct`` or ``plan`` writes a colour or a colour-map name
(``tests/reconstruct/report/test_colours.py`` walks the sources to check).

Categories
----------
Categories take the eight colours of the Okabe-Ito palette (Okabe and Ito
2008), chosen to stay distinct for readers with any of the common colour
vision deficiencies. Eight colours cannot give each of the dozen categories a
colour of its own, so a colour may stand for one thing on one kind of picture
and for another thing on another kind; no two categories drawn in the same
picture share a colour:

- body fill (3D view, slices): air (fast) orange, water or clay (slow) blue;
  "orange means air" holds on the pick-check page too, where air-wave picks
  are orange;
- planned works: reddish purple, whatever their kind (haul road, bench, blast
  pattern): a planned work reads as one thing beside the bodies, and its name
  is in the tables;
- node kinds (plan maps): surface bluish green, bench face vermilion, borehole
  sky blue, with a marker shape for each kind as well; a node whose kind is
  not given, and every node of the 3D view (where kinds are not drawn), black;
- boreholes and blast holes (the interactive 3D view of the report): sky
  blue lines, the colour of borehole nodes on the plan maps, with the black
  nodes on them;
- pick classes (pick-check page): kept blue, air wave orange, reciprocity
  mismatch reddish purple, implausible velocity vermilion.

Radio-mesh links on the plan map are not a category but a web of many lines:
thin and translucent black (a grey on white and on the elevation backdrop),
so that the node markers stay on top; in a colour of the palette they hid
the markers of the same or a near colour.

Yellow is left for nothing: thin lines and small markers in yellow do not
read on a white page.

Continuous values
-----------------
- velocity: ``cividis`` (Nunez, Anderton and Renslow 2018), a map designed to
  read the same with and without red-green colour-vision deficiency;
- coverage (ray counts, coverage quality): ``viridis`` (van der Walt and
  Smith 2015), so that a reader tells "what the ground is" (cividis) from "how
  well it was measured" (viridis) at a glance;
- ground elevation, drawn as a backdrop under coloured markers: ``Greys``, a
  single-hue ramp whose lightness rises steadily, which stays out of the way
  of the category colours drawn on top;
- anomalies and residuals (signed, centred on zero): the diverging ``RdBu``
  (Harrower and Brewer 2003, marked colour-blind safe there), with the limits
  set symmetric about zero by the caller. Lightest at zero, its two ends are
  about equally dark, so that neither sign looks stronger (``PuOr``, whose
  purple end is far darker than its orange end, is not); its blue end holds
  positive values (later than predicted: slower), in keeping with blue for
  slow.

Cells crossed by no ray
-----------------------
cividis runs from dark blue through grey to yellow, so a plain grey shade
would read as a mid-range velocity. Cells crossed by no ray are therefore
covered with a veil of white at :data:`NO_RAYS_VEIL_ALPHA` (the velocity is
still seen, paled) *and* hatched with dark grey diagonal lines
(:data:`NO_RAYS_HATCH`): the hatch is the mark, a pattern that no velocity
can take, and the veil keeps the hatch legible on the dark end of the map.
Cells in the air are left blank (white, not hatched).

References
----------
Okabe, M. and Ito, K. (2008), Color Universal Design (CUD): how to make
figures and presentations that are friendly to colorblind people,
https://jfly.uni-koeln.de/color/.

Nunez, J. R., Anderton, C. R. and Renslow, R. S. (2018), Optimizing colormaps
with consideration for color vision deficiency to enable accurate
interpretation of scientific data, PLOS ONE 13(7), e0199239,
doi:10.1371/journal.pone.0199239.

van der Walt, S. and Smith, N. (2015), A better default colormap for
matplotlib, SciPy 2015 (the viridis map).

Harrower, M. and Brewer, C. A. (2003), ColorBrewer.org: an online tool for
selecting colour schemes for maps, The Cartographic Journal 40(1), 27-37,
doi:10.1179/000870403235002042.
"""

from __future__ import annotations

__all__ = [
    "OKABE_ITO",
    "COLOUR_NAMES",
    "FILL_COLOURS",
    "PLANNED_WORK_COLOUR",
    "NODE_COLOUR",
    "NODE_KIND_COLOURS",
    "HOLE_COLOUR",
    "UNSPECIFIED_KIND_COLOUR",
    "PICK_CLASS_COLOURS",
    "MESH_LINK_COLOUR",
    "MESH_LINK_ALPHA",
    "BODY_OUTLINE_HALO",
    "TARGET_OUTLINE_COLOUR",
    "TARGET_OUTLINE_HALO",
    "GROUND_LINE_COLOUR",
    "GROUND_SURFACE_COLOUR",
    "SCENE_GRID_COLOUR",
    "REFERENCE_LINE_COLOUR",
    "NO_DATA_COLOUR",
    "EXCLUSION_ZONE_COLOUR",
    "BACKGROUND_COLOUR",
    "TEXT_COLOUR",
    "NO_RAYS_VEIL_COLOUR",
    "NO_RAYS_VEIL_ALPHA",
    "NO_RAYS_HATCH",
    "NO_RAYS_HATCH_COLOUR",
    "VELOCITY_MAP",
    "COVERAGE_MAP",
    "ELEVATION_MAP",
    "DIVERGING_MAP",
    "PAGE_COLOURS",
]

#: The eight colours of Okabe and Ito (2008), by the names they give them.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermilion": "#D55E00",
    "reddish purple": "#CC79A7",
}

#: A colour's name for legends written in words ("orange: air-filled bodies").
COLOUR_NAMES = {hex_code: name for name, hex_code in OKABE_ITO.items()}

# -- categories (Okabe-Ito) ---------------------------------------------------

#: Body fill, keyed by the words of the glossary (column ``fill``).
FILL_COLOURS = {"air": OKABE_ITO["orange"], "water_or_clay": OKABE_ITO["blue"]}
#: Every planned work, whatever its kind.
PLANNED_WORK_COLOUR = OKABE_ITO["reddish purple"]
#: A node where its kind is not drawn (3D view).
NODE_COLOUR = OKABE_ITO["black"]
#: Node kinds (column ``kind`` of the node table).
NODE_KIND_COLOURS = {
    "surface": OKABE_ITO["bluish green"],
    "face": OKABE_ITO["vermilion"],
    "borehole": OKABE_ITO["sky blue"],
}
#: Boreholes and blast holes drawn as lines in the interactive 3D view.
HOLE_COLOUR = OKABE_ITO["sky blue"]
#: A node whose kind is not given.
UNSPECIFIED_KIND_COLOUR = OKABE_ITO["black"]
#: Pick classes of the pick-check page.
PICK_CLASS_COLOURS = {
    "kept": OKABE_ITO["blue"],
    "air": OKABE_ITO["orange"],
    "reciprocal": OKABE_ITO["reddish purple"],
    "implausible": OKABE_ITO["vermilion"],
}

# -- lines and neutral greys (not categories) ---------------------------------

#: Halo drawn under a body's outline (in its fill colour) on the slices.
BODY_OUTLINE_HALO = "#FFFFFF"
#: Outline of the target volume on coverage pictures, with a dark halo so that
#: it reads on both ends of the coverage map.
TARGET_OUTLINE_COLOUR = "#FFFFFF"
TARGET_OUTLINE_HALO = "#000000"
GROUND_LINE_COLOUR = OKABE_ITO["black"]
#: The ground surface in the 3D view (drawn translucent).
GROUND_SURFACE_COLOUR = "#BBBBBB"
#: Grid lines on the axes of the interactive 3D view: light, behind everything.
SCENE_GRID_COLOUR = "#D9D9D9"
#: Reference lines (constant velocity, one-to-one, +-3 sigma) and marker edges.
REFERENCE_LINE_COLOUR = "#333333"
#: Markers of things with no value to show (a node with no pick).
NO_DATA_COLOUR = "#777777"
EXCLUSION_ZONE_COLOUR = "#555555"
COLOUR_NAMES.update({GROUND_SURFACE_COLOUR: "light grey", EXCLUSION_ZONE_COLOUR: "dark grey"})
#: Radio-mesh links on the plan map: thin, translucent black.
MESH_LINK_COLOUR = OKABE_ITO["black"]
MESH_LINK_ALPHA = 0.3
BACKGROUND_COLOUR = "#FFFFFF"
TEXT_COLOUR = OKABE_ITO["black"]

# -- cells crossed by no ray (see the module notes) ---------------------------

NO_RAYS_VEIL_COLOUR = "#FFFFFF"
NO_RAYS_VEIL_ALPHA = 0.55
NO_RAYS_HATCH = "////"
NO_RAYS_HATCH_COLOUR = "#333333"

# -- colour maps (matplotlib names) -------------------------------------------

VELOCITY_MAP = "cividis"
COVERAGE_MAP = "viridis"
ELEVATION_MAP = "Greys"
DIVERGING_MAP = "RdBu"

# -- report pages (CSS custom properties of reconstruct.report.html) ----------

#: Neutral greys for text and tables; the cautions box framed in vermilion.
PAGE_COLOURS = {
    "text": "#1B1B1B",
    "muted-text": "#444444",
    "table-rule": "#B8B8B8",
    "table-head": "#ECECEC",
    "caution-border": OKABE_ITO["vermilion"],
    "caution-background": "#FFF6E8",
}
