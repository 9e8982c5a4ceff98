"""Node layouts: candidate positions from the site description, chosen within a budget.

Three kinds of position, all taken from the site (:mod:`reconstruct.io.site`):

surface
    A regular (square) or staggered (hexagonal) grid over the model box in
    plan, each point on the ground surface (benches, a height grid or flat
    ground). Points closer than ``setback_m`` to a bench face (a change of
    ground elevation of more than half ``min_face_height_m``) are dropped:
    crests and toes are unsafe and their height is ambiguous.
face
    Lines along the faces between benches (ground kind ``benches`` only):
    points along every bench-polygon edge where the ground drops by at least
    ``min_face_height_m``, at mid-height of the face and 5 cm into the rock.
hole
    Strings in the site's boreholes and blast holes (``boreholes[i].kind``),
    spaced along the hole from the toe upwards, deeper than
    ``min_hole_depth_m`` along the hole, inside the model box and below ground.

Every position inside an exclusion zone (in plan) or outside the model box is
dropped. The budget is shared out in order: holes get up to ``hole_share`` of
it, faces up to ``face_share``, the surface the rest (including what the holes
and faces left unused). Unless a spacing is given, each kind takes the
smallest spacing whose count fits its share (bisection on the spacing), so the
layout uses its budget and never exceeds it. Optional jitter moves surface
nodes by a seeded random offset in plan (uniform in a disc), redrawn when it
lands in a forbidden place.

The candidate set, from which an optimiser may choose, is the same
construction for ``candidate_factor`` times the budget, joined with the
layout itself.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.spatial import cKDTree

from reconstruct.errors import InputError, is_whole_number
from reconstruct.io.outputs import write_csv_atomic
from reconstruct.io.site import Site

__all__ = [
    "LayoutOptions",
    "Layout",
    "surface_positions",
    "face_positions",
    "hole_positions",
    "design_layout",
    "candidate_positions",
    "write_layout_csv",
    "NODE_TABLE_HEADER",
]

#: Header of the node tables written (the format ``reconstruct.io.tables.read_nodes`` reads).
NODE_TABLE_HEADER = ("node_id", "x_m", "y_m", "z_m", "kind", "borehole")

_PATTERNS = ("regular", "staggered")
_FACE_INTO_ROCK_M = 0.05
_FACE_PROBE_M = 1e-3
_JITTER_TRIES = 20
_MAX_BUDGET = 20_000
_SPACING_STEPS = 96


# the command-line option of each field, for messages
_OPTION_OF = {"budget": "--budget", "pattern": "--pattern", "surface_spacing_m": "--surface-spacing",
              "face_spacing_m": "--face-spacing", "hole_spacing_m": "--hole-spacing", "hole_share": "--hole-share",
              "face_share": "--face-share", "jitter_m": "--jitter", "seed": "--seed", "setback_m": "--setback",
              "min_face_height_m": "--min-face-height", "min_hole_depth_m": "--min-hole-depth",
              "candidate_factor": "--candidates"}


def _label(name: str) -> str:
    return f"{name} ({_OPTION_OF[name]})"


@dataclass(frozen=True)
class LayoutOptions:
    """How to build a layout. Lengths in metres.

    Parameters
    ----------
    budget : int
        Largest number of nodes (2 .. 20000).
    pattern : {'staggered', 'regular'}
        Surface grid: hexagonal (rows offset by half a spacing, row distance
        ``spacing * sqrt(3) / 2``) or square.
    surface_spacing_m, face_spacing_m, hole_spacing_m : float or None
        Fixed spacings; None chooses the smallest spacing that fits the share.
    hole_share, face_share : float
        Largest fractions of the budget for hole strings and face lines (0..1,
        together at most 1).
    jitter_m : float
        Radius of the random plan offset of surface nodes (0: none).
    seed : int
        Seed of the jitter.
    setback_m : float
        Distance kept between surface nodes and bench faces.
    min_face_height_m : float
        Smallest drop of the ground that counts as a face.
    min_hole_depth_m : float
        Shallowest node position along a hole, from the collar.
    candidate_factor : float
        Size of the candidate set as a multiple of the budget (>= 1).
    """

    budget: int
    pattern: str = "staggered"
    surface_spacing_m: float | None = None
    face_spacing_m: float | None = None
    hole_spacing_m: float | None = None
    hole_share: float = 0.5
    face_share: float = 0.2
    jitter_m: float = 0.0
    seed: int = 0
    setback_m: float = 1.0
    min_face_height_m: float = 2.0
    min_hole_depth_m: float = 1.0
    candidate_factor: float = 3.0

    def __post_init__(self):
        problems = []
        if not is_whole_number(self.budget, 2, _MAX_BUDGET):
            problems.append(f"{_label('budget')} must be a whole number from 2 to {_MAX_BUDGET} (got {self.budget!r}); "
                            "give the number of nodes available")
        if self.pattern not in _PATTERNS:
            problems.append(f"pattern must be one of {', '.join(_PATTERNS)} (got {self.pattern!r})")
        for name in ("surface_spacing_m", "face_spacing_m", "hole_spacing_m"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                problems.append(f"{_label(name)} must be a number > 0 in metres (got {value!r}); "
                                "leave it out to fit the spacing to the budget")
        for name in ("hole_share", "face_share"):
            value = getattr(self, name)
            if not (math.isfinite(value) and 0 <= value <= 1):
                problems.append(f"{_label(name)} must be between 0 and 1 (got {value!r})")
        if math.isfinite(self.hole_share) and math.isfinite(self.face_share) \
                and self.hole_share + self.face_share > 1 + 1e-12:
            problems.append(f"hole_share + face_share must be at most 1 (got {self.hole_share:g} + "
                            f"{self.face_share:g}); lower --hole-share or --face-share")
        for name in ("jitter_m", "setback_m", "min_face_height_m", "min_hole_depth_m"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                problems.append(f"{_label(name)} must be a number >= 0 in metres (got {value!r})")
        if not (math.isfinite(self.candidate_factor) and self.candidate_factor >= 1):
            problems.append(f"{_label('candidate_factor')} must be >= 1 (got {self.candidate_factor!r})")
        if problems:
            raise InputError(problems)


@dataclass(frozen=True)
class Layout:
    """Node positions with ids, kinds and holes.

    Attributes
    ----------
    ids : tuple of str
    xyz_m : numpy.ndarray, shape (n, 3)
    kinds : tuple of str
        ``surface``, ``face`` or ``borehole`` (the node-table kinds; blast-hole
        strings are of kind ``borehole`` too).
    boreholes : tuple of (str or None)
        Hole id of hole nodes.
    spacing_m : dict
        Spacing used per kind (``surface``, ``face``, ``hole``), None where
        the kind has no node.
    """

    ids: tuple[str, ...]
    xyz_m: np.ndarray
    kinds: tuple[str, ...]
    boreholes: tuple[str | None, ...]
    spacing_m: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.ids)

    def counts(self) -> dict:
        """Number of nodes per kind."""
        return {kind: self.kinds.count(kind) for kind in ("surface", "face", "borehole")}


# --------------------------------------------------------------------------
# where nodes may go


def _allowed(site: Site, xyz: np.ndarray) -> np.ndarray:
    """Inside the model box and outside every exclusion zone."""
    if len(xyz) == 0:
        return np.zeros(0, dtype=bool)
    ok = site.grid().contains(xyz) & np.all(np.isfinite(xyz), axis=1)
    for zone in site.exclusion_zones:
        ok &= ~zone.contains(xyz[:, 0], xyz[:, 1])
    return ok


def _surface_ok(site: Site, x, y, setback_m: float, min_face_height_m: float):
    """Ground elevation at (x, y) and whether a surface node may stand there."""
    z = site.ground.elevation_m(x, y)
    ok = np.isfinite(z)
    if setback_m > 0:
        for angle in np.arange(8) * (np.pi / 4):
            zn = site.ground.elevation_m(x + setback_m * np.cos(angle), y + setback_m * np.sin(angle))
            # outside the lattice or bench cover, NaN: only the local height counts
            ok &= ~(np.abs(zn - z) > 0.5 * min_face_height_m)
    xyz = np.column_stack([x, y, z])
    return xyz, ok & _allowed(site, xyz)


def _centred(lo: float, size: float, spacing: float) -> np.ndarray:
    n = int(math.floor(size / spacing + 1e-9)) + 1
    return lo + 0.5 * (size - (n - 1) * spacing) + spacing * np.arange(n)


def surface_positions(site: Site, spacing_m: float, *, pattern: str = "staggered", setback_m: float = 1.0,
                      min_face_height_m: float = 2.0) -> np.ndarray:
    """Surface grid points on the ground, shape (n, 3), metres (see the module notes)."""
    (x0, y0, _), (sx, sy, _) = site.model.origin_m, site.model.size_m
    if pattern == "regular":
        xs, ys = _centred(x0, sx, spacing_m), _centred(y0, sy, spacing_m)
        x, y = (a.ravel() for a in np.meshgrid(xs, ys, indexing="ij"))
    else:
        row = spacing_m * math.sqrt(3.0) / 2.0
        ys = _centred(y0, sy, row)
        xs = _centred(x0, sx - 0.5 * spacing_m, spacing_m) if sx > spacing_m else _centred(x0, sx, spacing_m)
        x = np.concatenate([xs + (0.5 * spacing_m if r % 2 else 0.0) for r in range(len(ys))])
        y = np.repeat(ys, len(xs))
    xyz, ok = _surface_ok(site, x, y, setback_m, min_face_height_m)
    return xyz[ok]


def face_positions(site: Site, spacing_m: float, *, min_face_height_m: float = 2.0) -> np.ndarray:
    """Points along bench faces at mid-height, shape (n, 3), metres (benches only)."""
    if site.ground.kind != "benches":
        return np.zeros((0, 3))
    points = []
    for bench in site.ground.benches:
        poly = np.asarray(bench.polygon_xy_m, dtype=float)
        for p, q in zip(poly, np.roll(poly, -1, axis=0)):
            edge = q - p
            length = float(np.hypot(*edge))
            n = int(round(length / spacing_m))
            if n == 0:
                continue
            t = (np.arange(n) + 0.5) / n
            xy = p + t[:, None] * edge
            normal = np.array([-edge[1], edge[0]]) / length
            za = site.ground.elevation_m(xy[:, 0] + _FACE_PROBE_M * normal[0], xy[:, 1] + _FACE_PROBE_M * normal[1])
            zb = site.ground.elevation_m(xy[:, 0] - _FACE_PROBE_M * normal[0], xy[:, 1] - _FACE_PROBE_M * normal[1])
            keep = np.isfinite(za) & np.isfinite(zb) & (np.abs(za - zb) >= min_face_height_m)
            # 5 cm into the rock behind the face, i.e. towards the higher side
            into = np.where(za > zb, 1.0, -1.0)[:, None] * normal * _FACE_INTO_ROCK_M
            z = 0.5 * (za + zb)
            points.append(np.column_stack([xy + into, z])[keep])
    if not points:
        return np.zeros((0, 3))
    xyz = np.concatenate(points)
    xyz = xyz[_allowed(site, xyz)]
    return _drop_close(xyz, 0.5 * spacing_m)


def _drop_close(xyz: np.ndarray, radius_m: float) -> np.ndarray:
    """Keep the first of any points closer than ``radius_m`` (shared bench edges)."""
    if len(xyz) < 2:
        return xyz
    drop = set()
    for i, j in sorted(cKDTree(xyz).query_pairs(radius_m)):
        if i not in drop:
            drop.add(j)
    return xyz[[k for k in range(len(xyz)) if k not in drop]]


def hole_positions(site: Site, spacing_m: float, *, min_hole_depth_m: float = 1.0):
    """Node positions along the site's holes, spaced from the toe upwards.

    Returns
    -------
    xyz_m : numpy.ndarray, shape (n, 3)
    hole_ids : list of str
        The hole of each position; positions are listed hole by hole, from the
        collar downwards.
    """
    xyz, ids = [], []
    for hole in site.boreholes:
        distance = hole.length_m - spacing_m * np.arange(int(math.floor((hole.length_m - min_hole_depth_m)
                                                                          / spacing_m + 1e-9)) + 1)
        distance = np.sort(distance[distance >= min_hole_depth_m - 1e-9])
        if distance.size == 0:
            continue
        points = hole.point_at(distance).reshape(-1, 3)
        below = points[:, 2] < site.ground.elevation_m(points[:, 0], points[:, 1])
        keep = below & _allowed(site, points)
        xyz.append(points[keep])
        ids += [hole.id] * int(keep.sum())
    return (np.concatenate(xyz) if xyz else np.zeros((0, 3))), ids


# --------------------------------------------------------------------------
# fitting spacings to the budget


def _fit_spacing(count, share: int, lo: float, hi: float) -> tuple[float | None, int]:
    """The spacing in [lo, hi] whose count comes closest to ``share`` without exceeding it.

    Counts of grids fitted into polygons do not fall smoothly with the
    spacing, so a geometric scan from ``hi`` down to ``lo`` is used instead of
    a bisection; it stops once the counts are well past the share.
    """
    if share <= 0:
        return None, 0
    best_spacing, best_count = None, 0
    for spacing in np.geomspace(hi, lo, _SPACING_STEPS):
        n = count(float(spacing))
        if best_count < n <= share:
            best_spacing, best_count = float(spacing), n
        if n > 4 * share:
            break
    return best_spacing, best_count


def _spacing_bounds(site: Site) -> tuple[float, float]:
    cell = min(site.model.cell_m)
    return max(cell, 0.1), float(np.linalg.norm(site.model.size_m))


def _choose(site: Site, options: LayoutOptions, budget: int):
    """Spacings and positions of the three kinds for a budget."""
    lo, hi = _spacing_bounds(site)
    longest_hole = max((h.length_m for h in site.boreholes), default=0.0)

    def holes(s):
        return hole_positions(site, s, min_hole_depth_m=options.min_hole_depth_m)

    def faces(s):
        return face_positions(site, s, min_face_height_m=options.min_face_height_m)

    def surface(s):
        return surface_positions(site, s, pattern=options.pattern, setback_m=options.setback_m,
                                 min_face_height_m=options.min_face_height_m)

    fixed = {}
    if options.hole_spacing_m is not None:
        fixed["hole"] = options.hole_spacing_m
        n_hole = len(holes(options.hole_spacing_m)[0])
    else:
        fixed["hole"], n_hole = _fit_spacing(lambda s: len(holes(s)[0]), int(options.hole_share * budget),
                                             lo, max(longest_hole, lo))
    if options.face_spacing_m is not None:
        fixed["face"] = options.face_spacing_m
        n_face = len(faces(options.face_spacing_m))
    else:
        share = min(int(options.face_share * budget), budget - n_hole)
        fixed["face"], n_face = _fit_spacing(lambda s: len(faces(s)), share, lo, hi)
    if options.surface_spacing_m is not None:
        fixed["surface"] = options.surface_spacing_m
        n_surface = len(surface(options.surface_spacing_m))
    else:
        fixed["surface"], n_surface = _fit_spacing(lambda s: len(surface(s)), budget - n_hole - n_face, lo, hi)
    if n_hole + n_face + n_surface > budget:
        raise InputError(
            f"the spacings given need {n_hole + n_face + n_surface} nodes ({n_hole} in holes, {n_face} on faces, "
            f"{n_surface} on the surface) but the budget is {budget}; raise --budget or widen the spacings")
    hole_xyz, hole_ids = holes(fixed["hole"]) if fixed["hole"] else (np.zeros((0, 3)), [])
    face_xyz = faces(fixed["face"]) if fixed["face"] else np.zeros((0, 3))
    surface_xyz = surface(fixed["surface"]) if fixed["surface"] else np.zeros((0, 3))
    return fixed, hole_xyz, hole_ids, face_xyz, surface_xyz


def _jitter(site: Site, xyz: np.ndarray, options: LayoutOptions) -> np.ndarray:
    rng = np.random.default_rng(options.seed)
    out = xyz.copy()
    pending = np.arange(len(xyz))
    for _ in range(_JITTER_TRIES):
        if pending.size == 0:
            break
        radius = options.jitter_m * np.sqrt(rng.random(pending.size))
        angle = rng.random(pending.size) * 2 * np.pi
        x = xyz[pending, 0] + radius * np.cos(angle)
        y = xyz[pending, 1] + radius * np.sin(angle)
        moved, ok = _surface_ok(site, x, y, options.setback_m, options.min_face_height_m)
        out[pending[ok]] = moved[ok]
        pending = pending[~ok]
    return out  # the few still pending keep their grid position


def _assemble(fixed, hole_xyz, hole_ids, face_xyz, surface_xyz) -> Layout:
    ids, kinds, holes = [], [], []
    number = {}
    for hid in hole_ids:
        number[hid] = number.get(hid, 0) + 1
        ids.append(f"{hid}-{number[hid]:02d}")
    kinds += ["borehole"] * len(hole_ids)
    holes += list(hole_ids)
    width = max(3, len(str(max(len(face_xyz), len(surface_xyz)))))
    ids += [f"F{k + 1:0{width}d}" for k in range(len(face_xyz))]
    ids += [f"S{k + 1:0{width}d}" for k in range(len(surface_xyz))]
    kinds += ["face"] * len(face_xyz) + ["surface"] * len(surface_xyz)
    holes += [None] * (len(face_xyz) + len(surface_xyz))
    xyz = np.concatenate([hole_xyz.reshape(-1, 3), face_xyz.reshape(-1, 3), surface_xyz.reshape(-1, 3)])
    return Layout(tuple(ids), xyz, tuple(kinds), tuple(holes), dict(fixed))


def design_layout(site: Site, options: LayoutOptions) -> Layout:
    """Choose node positions for ``options.budget`` nodes (see the module notes).

    Raises
    ------
    InputError
        When no position is allowed anywhere, or fixed spacings exceed the budget.
    """
    fixed, hole_xyz, hole_ids, face_xyz, surface_xyz = _choose(site, options, options.budget)
    if options.jitter_m > 0 and len(surface_xyz):
        surface_xyz = _jitter(site, surface_xyz, options)
    layout = _assemble(fixed, hole_xyz, hole_ids, face_xyz, surface_xyz)
    if len(layout) < 2:
        raise InputError(
            f"only {len(layout)} node position fits the site within the budget of {options.budget}: the model "
            "box, the exclusion zones and the face setback leave no room; check the site description, "
            "lower --setback or raise --budget")
    return layout


def candidate_positions(site: Site, options: LayoutOptions, layout: Layout) -> Layout:
    """The candidate set: the layout construction for ``candidate_factor`` times the budget, plus ``layout``.

    Candidates get ids ``C0001``, ``C0002``, ...; positions of the layout that
    the denser set lacks are added once.
    """
    budget = int(math.ceil(options.candidate_factor * options.budget))
    dense = _assemble(*_choose(site, options, budget))
    xyz = np.concatenate([dense.xyz_m, layout.xyz_m])
    kinds = dense.kinds + layout.kinds
    holes = dense.boreholes + layout.boreholes
    keep = np.ones(len(xyz), dtype=bool)
    if len(dense) and len(layout):
        distance, _ = cKDTree(dense.xyz_m).query(layout.xyz_m)
        keep[len(dense):] = distance > 1e-6
    index = np.flatnonzero(keep)
    width = max(4, len(str(index.size)))
    return Layout(tuple(f"C{k + 1:0{width}d}" for k in range(index.size)), xyz[index],
                  tuple(kinds[k] for k in index), tuple(holes[k] for k in index), dense.spacing_m)


def write_layout_csv(path, layout: Layout, site: Site | None = None):
    """Write a layout as a node table (``node_id,x_m,y_m,z_m,kind,borehole``), atomically.

    With the ``site``, a column ``depth_along_hole_m`` gives each hole node's
    length along its hole from the collar (blank for other nodes), so that the
    processing can place the node on the hole's deviation survey once the hole
    is surveyed (docs/formats.md).
    """
    if site is None:
        return write_csv_atomic(path, NODE_TABLE_HEADER, (
            [layout.ids[k], *(f"{v:.3f}" for v in layout.xyz_m[k]), layout.kinds[k], layout.boreholes[k] or ""]
            for k in range(len(layout))))
    holes = {h.id: h for h in site.boreholes}
    depth = [f"{float(holes[h].depth_nearest_m(layout.xyz_m[k])[0]):.3f}" if h in holes else ""
             for k, h in enumerate(layout.boreholes)]
    return write_csv_atomic(path, NODE_TABLE_HEADER + ("depth_along_hole_m",), (
        [layout.ids[k], *(f"{v:.3f}" for v in layout.xyz_m[k]), layout.kinds[k], layout.boreholes[k] or "",
         depth[k]] for k in range(len(layout))))