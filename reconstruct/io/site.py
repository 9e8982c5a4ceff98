"""The site description: model box, ground surface, rock, boreholes, plans.

A site is described in one YAML file (read with :func:`yaml.safe_load` only)
and loaded into small frozen dataclasses by :func:`load_site`. Every problem
in the file is collected and reported together in one
:class:`~reconstruct.errors.InputError`, each naming the key path (for example
``boreholes[2].dip_deg``, list positions counted from 0) and the fix.

Coordinates
-----------
One local metric frame for everything: x east, y north, z elevation (up
positive), all in metres. ``frame.epsg`` is stored as metadata and never used
for computing.

Ground surface
--------------
Exactly one of three descriptions:

``flat_elevation_m``
    A horizontal surface.
``benches``
    Polygons in plan view, each with a floor elevation. The ground at (x, y)
    is the floor of the bench polygon containing the point; where polygons
    overlap the *later* bench in the list wins, so a deeper pit can sit
    inside a larger bench. Faces between benches are vertical (the surface
    jumps at the polygon edge). Outside every polygon the ground is
    ``surround_elevation_m``; without it every column of the model must lie
    inside some bench.
``height_grid_csv``
    A CSV file with header ``x_m,y_m,z_m`` giving the elevation on a
    rectilinear lattice (every x value with every y value, spacing may vary,
    rows in any order, ``#`` comment lines allowed, extra columns ignored),
    interpolated bilinearly with :class:`scipy.interpolate.RegularGridInterpolator`.

Planned works from DXF drawings
-------------------------------
``planned_works_dxf`` lists drawings of the mine plan: each gives the
``file`` (relative to the site file), its ``units``, the ``offset_m`` added to
its coordinates to reach site coordinates, and ``layers`` mapping layer names
to kinds of planned work. The drawings are read by
:func:`reconstruct.io.dxf.read_planned_works_dxf` once the model box is known;
their works follow those of ``planned_works``, and what was skipped is in
``Site.notes``.

Radar and radio (read by the planner)
-------------------------------------
``radar`` holds the system performance in dB (default
:data:`DEFAULT_SYSTEM_PERFORMANCE_DB`) and, optionally, the loss per crossing
of the air-ground boundary and the loss at each surface or face node
(``near_surface_loss_db``, default 0); ``radio`` the range of the node radios (default
:data:`DEFAULT_RADIO_RANGE_M`) and the gateway position. Both sections are
optional; ``boreholes[i].kind`` tells boreholes from blast holes.

Velocity and permittivity
-------------------------
For a low-loss medium the radar velocity is ``v = c / sqrt(K)`` with ``K`` the
relative permittivity and ``c`` the speed of light in vacuum
(:data:`scipy.constants.c`). Either may be given; the other is derived.
"""

from __future__ import annotations

import csv
import dataclasses
import difflib
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import yaml
from scipy.interpolate import RegularGridInterpolator

from reconstruct.errors import InputError
from reconstruct.model.constants import SPEED_OF_LIGHT_M_PER_NS
from reconstruct.model.grid import Grid, check_grid_fits_memory, ground_mask

__all__ = [
    "VELOCITY_BAND_M_PER_NS",
    "PERMITTIVITY_TOLERANCE",
    "PLANNED_WORK_KINDS",
    "HOLE_KINDS",
    "DEFAULT_SYSTEM_PERFORMANCE_DB",
    "DEFAULT_RADIO_RANGE_M",
    "Frame",
    "ModelBox",
    "Bench",
    "GroundSurface",
    "Rock",
    "Borehole",
    "BlastHole",
    "PlannedWork",
    "blast_grid_holes",
    "ExclusionZone",
    "RadarSystem",
    "RadioNetwork",
    "Site",
    "load_site",
    "parse_site",
    "points_in_polygon",
    "work_footprint",
]

#: Accepted rock velocity, m/ns. The upper end is ``c`` rounded up so that a
#: value typed as 0.2998 (air) is accepted.
VELOCITY_BAND_M_PER_NS = (0.01, 0.2998)

#: Largest relative disagreement allowed between a given velocity and the
#: velocity derived from a given relative permittivity.
PERMITTIVITY_TOLERANCE = 0.10

#: Allowed values of ``planned_works[i].kind``.
PLANNED_WORK_KINDS = ("haul_road", "bench", "blast_pattern")

#: Allowed values of ``boreholes[i].kind`` (both hold node strings alike).
HOLE_KINDS = ("borehole", "blast_hole")

#: Default of ``radar.system_performance_db``: the largest loss in dB between
#: transmitter and receiver at which a first arrival can still be picked
#: (antenna gains included). A modest figure for small, low-cost nodes.
DEFAULT_SYSTEM_PERFORMANCE_DB = 100.0

#: Default of ``radio.range_m``: radio range between node radios, metres.
DEFAULT_RADIO_RANGE_M = 100.0

_MISSING = object()

_TOP_KEYS = ("name", "frame", "model", "ground", "rock", "boreholes",
             "planned_works", "planned_works_dxf", "exclusion_zones", "radar", "radio")
_FRAME_KEYS = ("epsg", "description")
_MODEL_KEYS = ("origin_m", "size_m", "cell_m")
_GROUND_KINDS = ("flat_elevation_m", "benches", "height_grid_csv")
_GROUND_KEYS = _GROUND_KINDS + ("surround_elevation_m",)
_BENCH_KEYS = ("name", "floor_m", "polygon_m")
_ROCK_KEYS = ("velocity_m_per_ns", "relative_permittivity",
              "conductivity_ms_per_m", "antenna_frequency_mhz")
_BOREHOLE_KEYS = ("id", "collar_m", "azimuth_deg", "dip_deg", "length_m", "kind", "survey", "survey_csv")
_BOREHOLE_REQUIRED = ("id", "collar_m", "azimuth_deg", "dip_deg", "length_m")
_RADAR_KEYS = ("system_performance_db", "air_ground_loss_db", "near_surface_loss_db")
_RADIO_KEYS = ("range_m", "gateway_m")
_WORK_KEYS = ("name", "kind", "polyline_m", "polygon_m", "hole_depth_m", "subdrill_m", "holes",
              "burden_m", "spacing_m")
_BLAST_KEYS = ("hole_depth_m", "subdrill_m", "holes", "burden_m", "spacing_m")
_BLAST_HOLE_KEYS = ("id", "collar_m")
_ZONE_KEYS = ("name", "polygon_m", "reason")
_DXF_KEYS = ("file", "units", "offset_m", "layers")
_DXF_OPTIONAL_KEYS = ("hole_depth_m", "subdrill_m")

# Where each key belongs, to tell a user who put a key in the wrong section.
_SECTION_OF = {
    **{k: "model" for k in _MODEL_KEYS},
    **{k: "ground" for k in _GROUND_KEYS},
    **{k: "rock" for k in _ROCK_KEYS},
    **{k: "frame" for k in _FRAME_KEYS},
    **{k: "boreholes[i]" for k in _BOREHOLE_KEYS},
    **{k: "radar" for k in _RADAR_KEYS},
    **{k: "radio" for k in _RADIO_KEYS},
}

# What to add when a required key is missing.
_HINTS = {
    "name": "a short non-empty name",
    "model": "a section with origin_m, size_m and cell_m",
    "ground": "a section with one of flat_elevation_m, benches, height_grid_csv",
    "rock": "a section with velocity_m_per_ns or relative_permittivity, "
            "conductivity_ms_per_m and antenna_frequency_mhz",
    "origin_m": "[x, y, z] of the box corner with the smallest coordinates, in m",
    "size_m": "[x, y, z] extent of the box in m",
    "cell_m": "one cell size in m, or [dx, dy, dz]",
    "floor_m": "the floor elevation of the bench in m",
    "polygon_m": "a list of at least three corner points",
    "conductivity_ms_per_m": "the rock conductivity in mS/m",
    "antenna_frequency_mhz": "the antenna centre frequency in MHz",
    "id": "a unique name such as BH1",
    "collar_m": "[x, y, z] of the collar in m",
    "azimuth_deg": "degrees clockwise from north",
    "dip_deg": "degrees below horizontal, 90 = vertical down",
    "length_m": "the logged length in m",
    "kind": "one of " + ", ".join(PLANNED_WORK_KINDS),
    "file": "the DXF drawing's path, relative to the site file's folder",
    "units": "the unit of the drawing's coordinates: m, cm, mm, km, ft, us_survey_ft or in",
    "offset_m": "[x, y, z] in m added to the drawing's coordinates to reach site coordinates "
                "([0, 0, 0] when they are the same)",
    "layers": "the drawing's layers and the kind of planned work on each, e.g. HAUL_ROAD: haul_road",
    "hole_depth_m": "the depth of the blast holes below their collars down to the planned floor, in m",
}


# --------------------------------------------------------------------------
# geometry helper
# --------------------------------------------------------------------------

def points_in_polygon(x_m, y_m, polygon_xy_m) -> np.ndarray:
    """Test points against a polygon with the even-odd (crossing) rule.

    Parameters
    ----------
    x_m, y_m : array_like
        Point coordinates in metres; broadcast against each other.
    polygon_xy_m : array_like, shape (n, 2)
        Polygon corners in metres, n >= 3, open or closed (first point
        repeated), either orientation; self-intersecting polygons follow the
        even-odd rule.

    Returns
    -------
    numpy.ndarray of bool
        Broadcast shape of ``x_m`` and ``y_m``; True inside.

    Notes
    -----
    A point on an edge is decided by the half-open comparisons of the
    crossing test, so a point on the edge shared by two adjacent polygons
    belongs to exactly one of them (no gaps where benches meet).
    """
    x, y = np.broadcast_arrays(np.asarray(x_m, dtype=float), np.asarray(y_m, dtype=float))
    poly = np.asarray(polygon_xy_m, dtype=float)
    if poly.ndim != 2 or poly.shape[1] != 2 or poly.shape[0] < 3:
        raise ValueError(f"polygon_xy_m must have shape (n >= 3, 2), got {poly.shape}")
    inside = np.zeros(x.shape, dtype=bool)
    xj, yj = poly[-1]
    for xi, yi in poly:
        if yi != yj:  # horizontal edges never cross a horizontal ray
            crosses = (yi > y) != (yj > y)
            x_edge = xi + (y - yi) * (xj - xi) / (yj - yi)
            inside ^= crosses & (x < x_edge)
        xj, yj = xi, yi
    return inside


def work_footprint(work, x_m, y_m, margin_m: float) -> tuple[np.ndarray, float]:
    """Plan positions within ``margin_m`` of a planned work, and the work's lowest elevation.

    Parameters
    ----------
    work : PlannedWork
        A polyline (within the margin of any segment) or a polygon (inside,
        or within the margin of its outline).
    x_m, y_m : numpy.ndarray
        Plan positions, m, of one shape.
    margin_m : float
        Plan distance, m.

    Returns
    -------
    (numpy.ndarray of bool, float)
        True where near the work; the lowest elevation of its points, m.
    """
    points = np.asarray(work.points_m, dtype=float)
    xy = points[:, :2]
    near = np.zeros(np.shape(x_m), dtype=bool)
    segments = list(zip(xy[:-1], xy[1:]))
    if work.geometry == "polygon":
        near |= points_in_polygon(x_m, y_m, xy)
        segments.append((xy[-1], xy[0]))
    for a, b in segments:
        ab = b - a
        length2 = float(ab @ ab)
        t = 0.0 if length2 == 0 else np.clip(((x_m - a[0]) * ab[0] + (y_m - a[1]) * ab[1]) / length2, 0.0, 1.0)
        near |= np.hypot(x_m - (a[0] + t * ab[0]), y_m - (a[1] + t * ab[1])) <= margin_m
    return near, float(points[:, 2].min())


def _polygon_area_m2(polygon_xy) -> float:
    p = np.asarray(polygon_xy, dtype=float)
    x, y = p[:, 0], p[:, 1]
    return 0.5 * abs(float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))


def _polygon_area_3d_m2(points_xyz) -> float:
    # Newell's method: norm of the vector area, zero for collinear points
    p = np.asarray(points_xyz, dtype=float)
    return 0.5 * float(np.linalg.norm(np.cross(p, np.roll(p, -1, axis=0)).sum(axis=0)))


# --------------------------------------------------------------------------
# dataclasses
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class Frame:
    """The local coordinate frame (metadata only).

    Parameters
    ----------
    epsg : int or None
        EPSG code of the projected system the local coordinates come from;
        recorded, never used for computing.
    description : str or None
        Free text, e.g. how the local frame relates to the mine grid.
    """

    epsg: int | None = None
    description: str | None = None


@dataclass(frozen=True)
class ModelBox:
    """The box to be imaged.

    Parameters
    ----------
    origin_m : tuple of 3 float
        Corner with the smallest x, y and z, in metres.
    size_m : tuple of 3 float
        Extent along x, y and z, in metres, all > 0.
    cell_m : tuple of 3 float
        Cell size along x, y and z, in metres, all > 0.
    """

    origin_m: tuple[float, float, float]
    size_m: tuple[float, float, float]
    cell_m: tuple[float, float, float]

    def __post_init__(self):
        cell = np.broadcast_to(np.asarray(self.cell_m, dtype=float), (3,))
        object.__setattr__(self, "origin_m", tuple(float(v) for v in self.origin_m))
        object.__setattr__(self, "size_m", tuple(float(v) for v in self.size_m))
        object.__setattr__(self, "cell_m", tuple(float(v) for v in cell))

    @property
    def end_m(self) -> tuple[float, float, float]:
        """Corner with the largest x, y and z, in metres."""
        return tuple(o + s for o, s in zip(self.origin_m, self.size_m))

    def grid(self) -> Grid:
        """The voxel grid covering the box (:meth:`Grid.from_box`)."""
        return Grid.from_box(self.origin_m, self.size_m, self.cell_m)


@dataclass(frozen=True)
class Bench:
    """One bench of a benched ground surface.

    Parameters
    ----------
    name : str
    floor_m : float
        Floor elevation in metres.
    polygon_xy_m : tuple of (x, y)
        Outline in plan view, metres, at least three corners.
    """

    name: str
    floor_m: float
    polygon_xy_m: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class GroundSurface:
    """The ground surface z = f(x, y).

    Parameters
    ----------
    kind : {'flat', 'benches', 'height_grid'}
    flat_elevation_m : float or None
        Elevation of a flat surface (kind 'flat').
    benches : tuple of Bench
        Benches in file order (kind 'benches'); later ones win where they
        overlap. Faces between benches are vertical.
    surround_elevation_m : float or None
        Elevation outside every bench polygon; None means undefined there
        (NaN).
    height_grid_path : str or None
        The CSV the lattice was read from (kind 'height_grid'), for reports.

    Notes
    -----
    Build a height-grid surface from arrays with :meth:`from_height_lattice`.
    """

    kind: str
    flat_elevation_m: float | None = None
    benches: tuple[Bench, ...] = ()
    surround_elevation_m: float | None = None
    height_grid_path: str | None = None
    _lattice_x_m: np.ndarray | None = field(default=None, repr=False, compare=False)
    _lattice_y_m: np.ndarray | None = field(default=None, repr=False, compare=False)
    _lattice_z_m: np.ndarray | None = field(default=None, repr=False, compare=False)
    _interpolator: object = field(default=None, init=False, repr=False, compare=False)

    def __post_init__(self):
        if self.kind not in ("flat", "benches", "height_grid"):
            raise ValueError(f"kind must be 'flat', 'benches' or 'height_grid' (got {self.kind!r})")
        if self.kind == "flat" and self.flat_elevation_m is None:
            raise ValueError("a flat ground surface needs flat_elevation_m")
        if self.kind == "benches" and not self.benches:
            raise ValueError("a benched ground surface needs at least one bench")
        if self.kind == "height_grid":
            if self._lattice_z_m is None:
                raise ValueError("use GroundSurface.from_height_lattice for a height grid")
            # read-only copies: the dataclass is frozen, its arrays should be too
            arrays = []
            for a in (self._lattice_x_m, self._lattice_y_m, self._lattice_z_m):
                a = np.array(a, dtype=float)
                a.setflags(write=False)
                arrays.append(a)
            xs, ys, zs = arrays
            object.__setattr__(self, "_lattice_x_m", xs)
            object.__setattr__(self, "_lattice_y_m", ys)
            object.__setattr__(self, "_lattice_z_m", zs)
            object.__setattr__(self, "_interpolator", RegularGridInterpolator(
                (xs, ys), zs, method="linear", bounds_error=False, fill_value=np.nan))

    @classmethod
    def from_height_lattice(cls, x_m, y_m, z_m, path: str | None = None) -> "GroundSurface":
        """Height-grid surface from a lattice.

        Parameters
        ----------
        x_m : array_like, shape (nx,)
            Strictly increasing x values in metres, nx >= 2.
        y_m : array_like, shape (ny,)
            Strictly increasing y values in metres, ny >= 2.
        z_m : array_like, shape (nx, ny)
            Elevation in metres at ``(x_m[i], y_m[j])``.
        path : str, optional
            Where the lattice came from, for reports.
        """
        return cls(kind="height_grid", height_grid_path=path,
                   _lattice_x_m=x_m, _lattice_y_m=y_m, _lattice_z_m=z_m)

    @property
    def lattice_extent_m(self) -> tuple[float, float, float, float] | None:
        """``(x_min, x_max, y_min, y_max)`` of a height grid, else None."""
        if self.kind != "height_grid":
            return None
        xs, ys = self._lattice_x_m, self._lattice_y_m
        return float(xs[0]), float(xs[-1]), float(ys[0]), float(ys[-1])

    def elevation_m(self, x_m, y_m) -> np.ndarray:
        """Ground elevation in metres at plan positions.

        Parameters
        ----------
        x_m, y_m : array_like
            Plan coordinates in metres, broadcast against each other.

        Returns
        -------
        numpy.ndarray
            Elevation in metres, broadcast shape of the inputs. NaN outside a
            height grid's lattice, and outside every bench when no
            surround elevation is set.
        """
        x, y = np.broadcast_arrays(np.asarray(x_m, dtype=float), np.asarray(y_m, dtype=float))
        if self.kind == "flat":
            return np.full(x.shape, float(self.flat_elevation_m))
        if self.kind == "benches":
            outside = np.nan if self.surround_elevation_m is None else self.surround_elevation_m
            z = np.full(x.shape, float(outside))
            for bench in self.benches:  # in order, so later benches overwrite earlier ones
                z[points_in_polygon(x, y, bench.polygon_xy_m)] = bench.floor_m
            return z
        pts = np.stack([x.ravel(), y.ravel()], axis=-1)
        return self._interpolator(pts).reshape(x.shape)


@dataclass(frozen=True)
class Rock:
    """Bulk rock properties.

    Parameters
    ----------
    velocity_m_per_ns : float
        Radar velocity in m/ns.
    relative_permittivity : float
        Relative dielectric permittivity K (dimensionless), with
        ``v = c / sqrt(K)`` for low-loss rock.
    conductivity_ms_per_m : float
        Electrical conductivity in mS/m.
    antenna_frequency_mhz : float
        Antenna centre frequency in MHz.
    """

    velocity_m_per_ns: float
    relative_permittivity: float
    conductivity_ms_per_m: float
    antenna_frequency_mhz: float


@dataclass(frozen=True)
class Borehole:
    """A borehole or blast hole: planned as a straight line, optionally with its deviation survey.

    Parameters
    ----------
    id : str
    collar_m : tuple of 3 float
        Collar position (x, y, z) in metres.
    azimuth_deg : float
        Planned direction of the hole in plan, degrees clockwise from north (+y).
    dip_deg : float
        Planned angle below horizontal in degrees; 90 is vertical down.
    length_m : float
        Length along the hole in metres.
    kind : {'borehole', 'blast_hole'}
        What the hole is; both can hold a string of nodes.
    survey : tuple of (measured depth m, inclination deg, azimuth deg) or None
        The hole as drilled: stations from its deviation survey, the first at
        measured depth 0 (the collar), depths increasing; inclination from
        vertical down (0 vertical, 90 horizontal), azimuth clockwise from
        north. When given, positions along the hole follow the survey by the
        minimum curvature method (:mod:`reconstruct.model.deviation`); the
        straight planned line stays available as :meth:`planned_point_at`.
    """

    id: str
    collar_m: tuple[float, float, float]
    azimuth_deg: float
    dip_deg: float
    length_m: float
    kind: str = "borehole"
    survey: tuple[tuple[float, float, float], ...] | None = None

    def direction(self) -> np.ndarray:
        """Unit vector pointing down the planned hole, shape (3,).

        ``(cos(dip) sin(az), cos(dip) cos(az), -sin(dip))``.
        """
        az, dip = np.radians(self.azimuth_deg), np.radians(self.dip_deg)
        return np.array([np.cos(dip) * np.sin(az), np.cos(dip) * np.cos(az), -np.sin(dip)])

    def planned_point_at(self, distance_m) -> np.ndarray:
        """Position on the planned straight line at a distance along it from the collar, metres.

        Shape (3,) for a scalar distance, (n, 3) for an array.
        """
        d = np.asarray(distance_m, dtype=float)
        return np.asarray(self.collar_m, dtype=float) + d[..., None] * self.direction()

    def _surveyed(self, distance_m):
        from reconstruct.model.deviation import positions_along_hole

        stations = np.asarray(self.survey, dtype=float)
        d = np.asarray(distance_m, dtype=float)
        points, tangents = positions_along_hole(stations[:, 0], stations[:, 1], stations[:, 2], self.collar_m,
                                                d.ravel())
        return points.reshape(d.shape + (3,)), tangents.reshape(d.shape + (3,))

    def point_at(self, distance_m) -> np.ndarray:
        """Position at a distance along the hole from the collar, in metres: on the surveyed
        path when the hole has a survey, else on the planned line.

        Parameters
        ----------
        distance_m : float or array_like, shape (n,)

        Returns
        -------
        numpy.ndarray
            Shape (3,) for a scalar, (n, 3) for an array.
        """
        if self.survey is None:
            return self.planned_point_at(distance_m)
        return self._surveyed(distance_m)[0]

    def direction_at(self, distance_m) -> np.ndarray:
        """Unit vector down the hole at a distance along it (the survey's, else the plan's)."""
        if self.survey is None:
            d = np.asarray(distance_m, dtype=float)
            return np.broadcast_to(self.direction(), d.shape + (3,)).copy()
        return self._surveyed(distance_m)[1]

    def depth_nearest_m(self, points_m, step_m: float = 0.1) -> np.ndarray:
        """Distance along the hole (metres) of the point of the hole nearest to each given point.

        Exact projection on a straight hole; on a surveyed hole the nearest of
        samples every ``step_m``, refined by a bounded scalar minimisation
        (scipy) to well under a millimetre.
        """
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        if self.survey is None:
            along = (p - np.asarray(self.collar_m, dtype=float)) @ self.direction()
            return np.clip(along, 0.0, self.length_m)
        from scipy.optimize import minimize_scalar

        samples = np.linspace(0.0, self.length_m, max(2, int(np.ceil(self.length_m / step_m)) + 1))
        path = self.point_at(samples)
        nearest = np.argmin(((p[:, None, :] - path[None, :, :]) ** 2).sum(axis=-1), axis=1)
        out = np.empty(len(p))
        for k, (point, i) in enumerate(zip(p, nearest)):
            lo, hi = samples[max(i - 1, 0)], samples[min(i + 1, samples.size - 1)]
            found = minimize_scalar(lambda d: float(np.sum((self.point_at(d) - point) ** 2)), bounds=(lo, hi),
                                    method="bounded", options={"xatol": 1e-6})
            out[k] = found.x
        return out

    @property
    def toe_m(self) -> np.ndarray:
        """Position of the bottom of the hole, shape (3,), metres."""
        return self.point_at(self.length_m)


@dataclass(frozen=True)
class BlastHole:
    """One planned hole of a blast pattern: its name and collar (x, y, z) in metres."""

    id: str
    collar_m: tuple[float, float, float]


@dataclass(frozen=True)
class PlannedWork:
    """A planned excavation to check against found voids.

    Parameters
    ----------
    name : str
    kind : {'haul_road', 'bench', 'blast_pattern'}
    geometry : {'polyline', 'polygon'}
    points_m : tuple of (x, y, z)
        Vertices in metres.
    hole_depth_m : float or None
        Blast patterns only: depth of the holes below their collars down to
        the planned floor, m. The *charged column* of a hole is taken from
        its collar to this depth (the stemming is not subtracted: cautious).
    subdrill_m : float
        Blast patterns only: drilling below ``hole_depth_m``, m (the
        *subdrill zone*, from ``hole_depth_m`` to ``hole_depth_m +
        subdrill_m``); 0 by default.
    holes : tuple of BlastHole
        Blast patterns only: the planned holes, vertical from their collars
        (site keys ``holes``, or ``burden_m`` and ``spacing_m`` for a grid
        inside the outline: :func:`blast_grid_holes`). Empty for other works
        and for a pattern planned as an area only.
    """

    name: str
    kind: str
    geometry: str
    points_m: tuple[tuple[float, float, float], ...]
    hole_depth_m: float | None = None
    subdrill_m: float = 0.0
    holes: tuple[BlastHole, ...] = ()

    @property
    def has_holes(self) -> bool:
        """True for a blast pattern whose holes and their depth are known."""
        return bool(self.holes) and self.hole_depth_m is not None

    def hole_columns_m(self) -> np.ndarray:
        """Each hole as three elevations, shape (n, 3): collar, bottom of the charge, toe, m.

        The holes are vertical: the charged column runs from the collar down
        ``hole_depth_m``, the subdrill zone from there down ``subdrill_m``
        to the toe.
        """
        if not self.has_holes:
            return np.zeros((0, 3))
        z = np.array([h.collar_m[2] for h in self.holes], dtype=float)
        return np.column_stack([z, z - self.hole_depth_m, z - self.hole_depth_m - self.subdrill_m])


def blast_grid_holes(polygon_m, burden_m: float, spacing_m: float) -> tuple[BlastHole, ...]:
    """Holes of a blast pattern laid out on a burden x spacing grid inside its outline.

    Rows run parallel to the outline's first edge (from its first corner to
    its second, taken as the free face), the first row half a burden inside
    it and each further row one burden farther in; along a row the holes
    stand one spacing apart, the first half a spacing from the outline's end.
    Holes outside the outline (even-odd rule) are left out. The collars lie
    on the least-squares plane through the outline's corners (exact for a
    flat or evenly sloping bench floor). Holes are named ``R<row>H<hole>``,
    counted from 1 (row 1 nearest the first edge).

    Parameters
    ----------
    polygon_m : sequence of (x, y, z)
        The pattern's outline, m, at least three corners.
    burden_m, spacing_m : float
        Distance between rows and between holes in a row, m, > 0.

    Returns
    -------
    tuple of BlastHole
    """
    corners = np.asarray(polygon_m, dtype=float)
    edge = corners[1, :2] - corners[0, :2]
    along = edge / np.linalg.norm(edge)
    across = np.array([-along[1], along[0]])
    rel = corners[:, :2] - corners[0, :2]
    if (rel @ across).sum() < 0:  # point the rows into the outline
        across = -across
    u, v = rel @ along, rel @ across
    design = np.column_stack([np.ones(len(corners)), corners[:, 0], corners[:, 1]])
    plane = np.linalg.lstsq(design, corners[:, 2], rcond=None)[0]
    holes = []
    rows = np.arange(0.5 * burden_m, v.max(), burden_m)
    for r, v_row in enumerate(rows, start=1):
        u_holes = np.arange(u.min() + 0.5 * spacing_m, u.max(), spacing_m)
        xy = corners[0, :2] + u_holes[:, None] * along + v_row * across
        inside = points_in_polygon(xy[:, 0], xy[:, 1], corners[:, :2])
        for k, (x, y) in enumerate(xy[inside], start=1):
            z = plane[0] + plane[1] * x + plane[2] * y
            holes.append(BlastHole(f"R{r}H{k:02d}", (float(x), float(y), round(float(z), 9))))
    return tuple(holes)


@dataclass(frozen=True)
class ExclusionZone:
    """An area in plan where no survey node may be placed.

    Parameters
    ----------
    name : str
    polygon_xy_m : tuple of (x, y)
        Outline in metres.
    reason : str or None
    """

    name: str
    polygon_xy_m: tuple[tuple[float, float], ...]
    reason: str | None = None

    def contains(self, x_m, y_m) -> np.ndarray:
        """True for plan positions (metres) inside the zone (even-odd rule)."""
        return points_in_polygon(x_m, y_m, self.polygon_xy_m)


@dataclass(frozen=True)
class RadarSystem:
    """Radar settings used by the link budget of the planner.

    Parameters
    ----------
    system_performance_db : float
        Largest loss in dB between transmitter and receiver at which a first
        arrival can still be picked, antenna gains included (> 0).
    air_ground_loss_db : float or None
        Loss in dB for each crossing of the air-ground boundary by the
        straight line between two nodes (>= 0). None: computed from the
        rock's permittivity as the power transmission loss at normal
        incidence (see ``plan.radio.link_budget``).
    near_surface_loss_db : float
        Loss in dB at each surface or face node of a pair (weathered, broken
        or wet rock under the node, imperfect contact), >= 0; default 0.
    """

    system_performance_db: float = DEFAULT_SYSTEM_PERFORMANCE_DB
    air_ground_loss_db: float | None = None
    near_surface_loss_db: float = 0.0


@dataclass(frozen=True)
class RadioNetwork:
    """The radio network that commands the nodes.

    Parameters
    ----------
    range_m : float
        Distance in metres over which two node radios (or a node and the
        gateway) reach each other (> 0).
    gateway_m : tuple of 3 float or None
        Position (x, y, z) in metres of the radio gateway; None when not
        given (the radio mesh then cannot be planned).
    """

    range_m: float = DEFAULT_RADIO_RANGE_M
    gateway_m: tuple[float, float, float] | None = None


@dataclass(frozen=True)
class Site:
    """A whole site description; see :func:`load_site`."""

    name: str
    frame: Frame
    model: ModelBox
    ground: GroundSurface
    rock: Rock
    boreholes: tuple[Borehole, ...] = ()
    planned_works: tuple[PlannedWork, ...] = ()
    exclusion_zones: tuple[ExclusionZone, ...] = ()
    source_path: str | None = None
    radar: RadarSystem = RadarSystem()
    radio: RadioNetwork = RadioNetwork()
    planned_works_dxf: tuple = ()
    notes: tuple[str, ...] = ()

    def grid(self) -> Grid:
        """The voxel grid of the model box."""
        return self.model.grid()


# --------------------------------------------------------------------------
# loading
# --------------------------------------------------------------------------

def load_site(path) -> Site:
    """Read a site description from a YAML file.

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    Site

    Raises
    ------
    InputError
        One error listing every problem found in the file, each naming the
        file, the key path (or line) and the fix.
    """
    source = str(path)
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        problem = "file not found; check the path to the site description"
    except IsADirectoryError:
        problem = "is a folder, not a file; give the path of the site YAML file"
    except UnicodeDecodeError:
        problem = "is not a UTF-8 text file; save the site description as plain text"
    except OSError as exc:
        problem = f"cannot be read ({exc.strerror}); check the path and its permissions"
    else:
        problem = None
    if problem:
        raise InputError(f"{source}: {problem}")
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise InputError(_yaml_error_message(source, exc)) from None
    problems = _duplicate_key_problems(text, source)
    site = _parse(data, problems, source, p.parent)
    if problems:
        raise InputError(problems, source=source)
    return dataclasses.replace(site, source_path=source)


def parse_site(data: object, source: str = "site", base_dir: str | Path | None = None) -> Site:
    """Validate already-loaded YAML data and build a :class:`Site`.

    Parameters
    ----------
    data : object
        What :func:`yaml.safe_load` returned; not modified.
    source : str
        Name used at the start of every message (usually the file name).
    base_dir : str or Path, optional
        Folder that ``ground.height_grid_csv`` is relative to; the working
        directory if None.

    Raises
    ------
    InputError
        Listing every problem found.
    """
    problems: list[str] = []
    site = _parse(data, problems, source, Path(base_dir) if base_dir is not None else Path("."))
    if problems:
        raise InputError(problems, source=source)
    return site


def _yaml_error_message(source: str, exc: yaml.YAMLError) -> str:
    mark = getattr(exc, "problem_mark", None)
    what = getattr(exc, "problem", None) or str(exc).splitlines()[0]
    context = getattr(exc, "context", None)
    where = f"{source} line {mark.line + 1}, column {mark.column + 1}" if mark else source
    detail = f"{what} ({context})" if context else what
    return (f"{where}: YAML syntax error: {detail}; fix the syntax there "
            "(check indentation, colons, quotes and brackets)")


def _duplicate_key_problems(text: str, source: str) -> list[str]:
    # safe_load silently keeps the last of two equal keys; composing the node
    # tree (no objects built) finds them with their lines.
    found = []
    try:
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.YAMLError:
        return found
    stack = [root] if root is not None else []
    while stack:
        node = stack.pop()
        if isinstance(node, yaml.MappingNode):
            first_line = {}
            for key, value in node.value:
                if isinstance(key, yaml.ScalarNode):
                    line = key.start_mark.line + 1
                    if key.value in first_line:
                        found.append((line,
                            f"{source} line {line}: key '{key.value}' appears twice in the "
                            f"same section (first on line {first_line[key.value]}); keep one"))
                    else:
                        first_line[key.value] = line
                stack.append(value)
        elif isinstance(node, yaml.SequenceNode):
            stack.extend(node.value)
    return [message for _, message in sorted(found)]


def _describe(value) -> str:
    if value is None:
        return "an empty value"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return f"text {value!r}"
    if isinstance(value, list):
        return f"a list of {len(value)} item{'s' if len(value) != 1 else ''}"
    if isinstance(value, dict):
        return "a section of keys"
    return f"a {type(value).__name__}"


def _fmt(v: float) -> str:
    return f"{v:.6g}"


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


class _Checker:
    """Collects problems while reading values at key paths."""

    def __init__(self, problems: list[str]):
        self.problems = problems

    def add(self, message: str) -> None:
        self.problems.append(message)

    def section(self, value, path: str, allowed, required=()) -> dict | None:
        """A mapping with only ``allowed`` keys; reports missing ``required``."""
        label = path or "the top level"
        if value is None:
            needs = ", ".join(required) if required else "keys"
            self.add(f"{label} is empty; it needs {needs}")
            return None
        if not isinstance(value, dict):
            self.add(f"{label} must be a section of keys (key: value lines), "
                     f"got {_describe(value)}")
            return None
        for key in value:
            if key in allowed:
                continue
            key_path = f"{path}.{key}" if path else str(key)
            msg = f"{key_path} is not a known key"
            close = difflib.get_close_matches(str(key), allowed, n=1, cutoff=0.6)
            if close:
                msg += f"; did you mean '{close[0]}'?"
            elif _SECTION_OF.get(key) and _SECTION_OF[key] != path:
                msg += f"; it belongs under {_SECTION_OF[key]}"
            self.add(msg + f" (allowed in {label}: {', '.join(allowed)})")
        for key in required:
            if key not in value:
                key_path = f"{path}.{key}" if path else key
                hint = _HINTS.get(key)
                self.add(f"{key_path} is missing; add it" + (f" ({hint})" if hint else ""))
        return value

    def number(self, value, path, *, lo=None, hi=None, lo_open=False, unit="", fix=""):
        """A finite number within [lo, hi] (or (lo, hi] if lo_open)."""
        if value is _MISSING:
            return None
        if not _is_number(value):
            msg = f"{path} must be a number{unit and ' in ' + unit} (got {_describe(value)})"
            if isinstance(value, str):
                try:
                    float(value)
                    msg += ("; remove the quotes, and write exponents with a decimal point "
                            "(1.0e-3, not 1e-3) because YAML reads 1e-3 as text")
                except ValueError:
                    pass
            self.add(msg)
            return None
        v = float(value)
        if not math.isfinite(v):
            self.add(f"{path} must be a finite number (got {value!r})")
            return None
        u = f" {unit}" if unit else ""
        bad = None
        if lo is not None and hi is not None and not (lo < v <= hi if lo_open else lo <= v <= hi):
            bad = f"between {_fmt(lo)} and {_fmt(hi)}{u}"
        elif lo is not None and hi is None and (v <= lo if lo_open else v < lo):
            bad = f"greater than {_fmt(lo)}{u}" if lo_open else f"at least {_fmt(lo)}{u}"
        if bad:
            self.add(f"{path} must be {bad} (got {value!r})" + (f"; {fix}" if fix else ""))
            return None
        return v

    def choice(self, value, path, allowed, *, otherwise="", show=None):
        """``value`` if it is one of ``allowed``, else None with a message that
        suggests the closest allowed word (or says ``otherwise``)."""
        if value in allowed:
            return value
        close = difflib.get_close_matches(str(value), allowed, n=1, cutoff=0.6)
        self.add(f"{path} {(show or _describe)(value)} is not one of {', '.join(allowed)}"
                 + (f"; did you mean '{close[0]}'?" if close else (f"; {otherwise}" if otherwise else "")))
        return None

    def text(self, value, path, *, what="text"):
        if value is _MISSING:
            return None
        if not isinstance(value, str):
            msg = f"{path} must be {what} (got {_describe(value)})"
            if _is_number(value):
                msg += ("; put it in quotes (unquoted digits are read as a number, "
                        "and 007 becomes 7)")
            self.add(msg)
            return None
        if not value.strip():
            self.add(f"{path} must not be empty; write a name")
            return None
        return value.strip()

    def vector(self, value, path, *, n=3, names="[x, y, z]", positive=False):
        if value is _MISSING:
            return None
        if not isinstance(value, list) or len(value) != n:
            self.add(f"{path} must be a list of {n} numbers {names} in m (got {_describe(value)})")
            return None
        out = []
        for i, item in enumerate(value):
            out.append(self.number(item, f"{path}[{i}]", lo=0.0 if positive else None,
                                   lo_open=True, unit="m"))
        return None if None in out else tuple(out)

    def points(self, value, path, *, dim, min_points):
        """A list of at least ``min_points`` points of ``dim`` numbers each."""
        if value is _MISSING:
            return None
        names = "[x, y]" if dim == 2 else "[x, y, z]"
        if not isinstance(value, list):
            self.add(f"{path} must be a list of points {names} in m (got {_describe(value)})")
            return None
        pts, ok = [], True
        for i, p in enumerate(value):
            if (not isinstance(p, list) or len(p) != dim
                    or not all(_is_number(c) and math.isfinite(c) for c in p)):
                self.add(f"{path}[{i}] must be a point {names} of {dim} finite numbers "
                         f"in m (got {p!r})")
                ok = False
            else:
                pts.append(tuple(float(c) for c in p))
        if not ok:
            return None
        if len(pts) > min_points and pts[0] == pts[-1]:
            pts = pts[:-1]  # a closed ring repeats its first point; the polygon is the same
        if len(pts) < min_points:
            self.add(f"{path} needs at least {min_points} distinct points (got {len(pts)}); "
                     f"add points")
            return None
        return tuple(pts)

    def polygon_xy(self, value, path):
        pts = self.points(value, path, dim=2, min_points=3)
        if pts is None:
            return None
        extent = np.ptp(np.asarray(pts), axis=0).max()
        if _polygon_area_m2(pts) <= 1e-9 * max(extent, 1.0) ** 2:
            self.add(f"{path} has zero area (all points lie on one line); "
                     "give the corners of a real outline")
            return None
        return pts

    def optional_section(self, value, path: str, allowed) -> dict | None:
        """An optional section: None when it is left out or empty."""
        if value is _MISSING or value is None:
            return None
        return self.section(value, path, allowed)

    def items(self, value, path):
        """An optional list; None (all items commented out) counts as empty."""
        if value is _MISSING or value is None:
            return []
        if not isinstance(value, list):
            self.add(f"{path} must be a list of items, each starting with '- ' "
                     f"(got {_describe(value)})")
            return []
        return value


def _parse(data, problems: list[str], source: str, base_dir: Path) -> Site | None:
    chk = _Checker(problems)
    if data is None:
        chk.add("the file is empty; it needs at least name, model, ground and rock")
        return None
    top = chk.section(data, "", _TOP_KEYS, ("name", "model", "ground", "rock"))
    if top is None:
        return None
    name = chk.text(top.get("name", _MISSING), "name")
    frame = _parse_frame(top.get("frame", _MISSING), chk)
    model = _parse_model(top.get("model", _MISSING), chk)
    ground = _parse_ground(top.get("ground", _MISSING), chk, base_dir)
    rock = _parse_rock(top.get("rock", _MISSING), chk)
    boreholes = _parse_boreholes(top.get("boreholes", _MISSING), chk, base_dir)
    works = _parse_works(top.get("planned_works", _MISSING), chk)
    drawings = _parse_drawings(top.get("planned_works_dxf", _MISSING), chk, base_dir)
    zones = _parse_zones(top.get("exclusion_zones", _MISSING), chk)
    radar = _parse_radar(top.get("radar", _MISSING), chk)
    radio = _parse_radio(top.get("radio", _MISSING), chk)
    if model is not None:
        grid = _check_model_memory(model, chk, source)
        if grid is not None and ground is not None:
            _check_ground_covers_model(ground, grid, chk)
        _check_boreholes_in_box(boreholes, model, chk)
        dxf_works, notes = _read_drawings(drawings, model, chk)
        works = works + dxf_works
    if problems:
        return None
    return Site(name=name, frame=frame, model=model, ground=ground, rock=rock,
                boreholes=tuple(hole for _, hole in boreholes), planned_works=tuple(works),
                exclusion_zones=tuple(zones), radar=radar, radio=radio,
                planned_works_dxf=tuple(drawings), notes=tuple(notes))


def _parse_frame(value, chk: _Checker) -> Frame:
    sec = chk.optional_section(value, "frame", _FRAME_KEYS)
    if sec is None:
        return Frame()
    epsg = sec.get("epsg")
    if epsg is not None and not (isinstance(epsg, int) and not isinstance(epsg, bool) and epsg > 0):
        chk.add(f"frame.epsg must be a positive whole number such as 32633 (got {_describe(epsg)})")
        epsg = None
    desc = sec.get("description")
    if desc is not None and not isinstance(desc, str):
        chk.add(f"frame.description must be text (got {_describe(desc)}); put it in quotes")
        desc = None
    return Frame(epsg=epsg, description=desc)


def _parse_model(value, chk: _Checker) -> ModelBox | None:
    if value is _MISSING:
        return None
    sec = chk.section(value, "model", _MODEL_KEYS, _MODEL_KEYS)
    if sec is None:
        return None
    origin = chk.vector(sec.get("origin_m", _MISSING), "model.origin_m")
    size = chk.vector(sec.get("size_m", _MISSING), "model.size_m", positive=True)
    raw_cell = sec.get("cell_m", _MISSING)
    if _is_number(raw_cell):
        c = chk.number(raw_cell, "model.cell_m", lo=0.0, lo_open=True, unit="m")
        cell = None if c is None else (c, c, c)
    elif isinstance(raw_cell, list):
        cell = chk.vector(raw_cell, "model.cell_m", names="[dx, dy, dz]", positive=True)
    elif raw_cell is _MISSING:
        cell = None
    else:
        chk.add(f"model.cell_m must be a number or a list of 3 numbers [dx, dy, dz] in m "
                f"(got {_describe(raw_cell)})")
        cell = None
    if size is not None and cell is not None:
        for axis, (c, s) in enumerate(zip(cell, size)):
            if c > s:
                chk.add(f"model.cell_m along {'xyz'[axis]} ({_fmt(c)} m) is larger than "
                        f"model.size_m along {'xyz'[axis]} ({_fmt(s)} m); use smaller cells "
                        "or a larger box")
                cell = None
                break
    if origin is None or size is None or cell is None:
        return None
    return ModelBox(origin, size, cell)


def _parse_benches(value, chk: _Checker) -> tuple[Bench, ...] | None:
    if value is None or (isinstance(value, list) and not value):
        chk.add("ground.benches is empty; add at least one bench with name, floor_m and polygon_m")
        return None
    benches, ok = [], True
    for i, item in enumerate(chk.items(value, "ground.benches")):
        path = f"ground.benches[{i}]"
        sec = chk.section(item, path, _BENCH_KEYS, _BENCH_KEYS)
        if sec is None:
            ok = False
            continue
        name = chk.text(sec.get("name", _MISSING), f"{path}.name")
        floor = chk.number(sec.get("floor_m", _MISSING), f"{path}.floor_m", unit="m")
        poly = chk.polygon_xy(sec.get("polygon_m", _MISSING), f"{path}.polygon_m")
        if None in (name, floor, poly):
            ok = False
        else:
            benches.append(Bench(name, floor, poly))
    return tuple(benches) if ok and benches else None


def _parse_ground(value, chk: _Checker, base_dir: Path) -> GroundSurface | None:
    if value is _MISSING:
        return None
    sec = chk.section(value, "ground", _GROUND_KEYS)
    if sec is None:
        return None
    given = [k for k in _GROUND_KINDS if k in sec]
    if not given:
        chk.add("ground needs one of flat_elevation_m, benches, height_grid_csv; add one")
    elif len(given) > 1:
        chk.add(f"ground gives {' and '.join(given)}; keep exactly one of "
                f"{', '.join(_GROUND_KINDS)}")
    surround, surround_ok = None, True
    if "surround_elevation_m" in sec:
        if "benches" not in sec:
            chk.add("ground.surround_elevation_m is only used with ground.benches; remove it")
        else:
            surround = chk.number(sec["surround_elevation_m"], "ground.surround_elevation_m",
                                  unit="m")
            surround_ok = surround is not None
    results = {}
    if "flat_elevation_m" in sec:
        results["flat"] = chk.number(sec["flat_elevation_m"], "ground.flat_elevation_m", unit="m")
    if "benches" in sec:
        results["benches"] = _parse_benches(sec["benches"], chk)
    if "height_grid_csv" in sec:
        rel = chk.text(sec["height_grid_csv"], "ground.height_grid_csv", what="a file path")
        if rel is not None:
            path = Path(rel) if Path(rel).is_absolute() else base_dir / rel
            lattice = _read_height_grid(path, chk)
            results["height_grid"] = None if lattice is None else (str(path), lattice)
        else:
            results["height_grid"] = None
    if not surround_ok or len(results) != 1 or None in results.values():
        return None
    kind, val = next(iter(results.items()))
    if kind == "flat":
        return GroundSurface(kind="flat", flat_elevation_m=val)
    if kind == "benches":
        return GroundSurface(kind="benches", benches=val, surround_elevation_m=surround)
    path, (xs, ys, zs) = val
    return GroundSurface.from_height_lattice(xs, ys, zs, path=path)


_MAX_CSV_PROBLEMS = 10


def _read_height_grid(path: Path, chk: _Checker):
    """Read and check a height-grid CSV; returns (xs, ys, z[nx, ny]) or None."""
    text = _read_height_text(path, chk)
    if text is None:
        return None
    rows = _height_rows(text, str(path), chk)
    if rows is None:
        return None
    return _height_lattice(rows, str(path), chk)


def _read_height_text(path: Path, chk: _Checker):
    """The text of a height-grid CSV, or None (the problem added to ``chk``)."""
    where = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        chk.add(f"ground.height_grid_csv: file {where} not found; the path is relative "
                "to the folder of the site file")
        return None
    except UnicodeDecodeError:
        chk.add(f"ground.height_grid_csv: {where} is not a UTF-8 text file; save it as plain CSV")
        return None
    except OSError as exc:
        chk.add(f"ground.height_grid_csv: cannot read {where} ({exc.strerror}); "
                "check the path and its permissions")
        return None
    return text


def _height_rows(text: str, where: str, chk: _Checker):
    """Rows ``(line, x, y, z)`` of a height-grid CSV, each point once, or None."""
    columns = ("x_m", "y_m", "z_m")
    found: list[str] = []
    header, index, rows = None, None, []
    for lineno, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        fields = [f.strip() for f in next(csv.reader([line]))]
        if header is None:
            header = fields
            missing = [c for c in columns if c not in fields]
            if missing:
                chk.add(f"{where} line {lineno}: the header lacks column {', '.join(missing)}; "
                        f"the first line must be x_m,y_m,z_m (got {stripped!r})")
                return None
            twice = sorted({c for c in columns if fields.count(c) > 1})
            if twice:
                chk.add(f"{where} line {lineno}: column {', '.join(twice)} appears twice "
                        "in the header; keep one")
                return None
            index = [fields.index(c) for c in columns]
            continue
        if len(fields) != len(header):
            found.append(f"{where} line {lineno}: expected {len(header)} values "
                         f"({','.join(header)}), found {len(fields)}; fix the row")
            continue
        values = []
        for col, i in zip(columns, index):
            raw = fields[i]
            try:
                v = float(raw)
            except ValueError:
                found.append(f"{where} line {lineno}: {col} value {raw!r} is not a number; "
                             "write a plain decimal number such as 101.5")
                continue
            if not math.isfinite(v):
                found.append(f"{where} line {lineno}: {col} is {raw!r}; every point needs a "
                             "finite number, fill it in or remove the row")
                continue
            values.append(v)
        if len(values) == 3:
            rows.append((lineno, *values))
    if header is None:
        chk.add(f"{where}: no header line found; the first line must be x_m,y_m,z_m")
        return None
    if found:
        for msg in found[:_MAX_CSV_PROBLEMS]:
            chk.add(msg)
        if len(found) > _MAX_CSV_PROBLEMS:
            chk.add(f"{where}: and {len(found) - _MAX_CSV_PROBLEMS} more problems in this file")
        return None
    first_line: dict[tuple[float, float], int] = {}
    for lineno, x, y, _ in rows:
        if (x, y) in first_line:
            found.append(f"{where} line {lineno}: point (x, y) = ({_fmt(x)}, {_fmt(y)}) repeats "
                         f"line {first_line[(x, y)]}; keep one row per point")
        else:
            first_line[(x, y)] = lineno
    if found:
        for msg in found[:_MAX_CSV_PROBLEMS]:
            chk.add(msg)
        return None
    return rows


def _height_lattice(rows, where: str, chk: _Checker):
    """The rows as a full lattice ``(xs, ys, z[nx, ny])``, or None (a point missing)."""
    data = np.array([r[1:] for r in rows], dtype=float).reshape(-1, 3)
    lines = np.array([r[0] for r in rows], dtype=int)
    xs, ys = np.unique(data[:, 0]), np.unique(data[:, 1])
    if len(xs) < 2 or len(ys) < 2:
        chk.add(f"{where}: needs at least two different x_m and two different y_m values "
                f"for bilinear interpolation (got {len(xs)} and {len(ys)})")
        return None
    ix, iy = np.searchsorted(xs, data[:, 0]), np.searchsorted(ys, data[:, 1])
    present = np.zeros((len(xs), len(ys)), dtype=bool)
    present[ix, iy] = True
    if not present.all():
        gaps = np.argwhere(~present)
        gx, gy = xs[gaps[0, 0]], ys[gaps[0, 1]]
        # a mistyped coordinate shows as an x (or y) value with few points
        clues = []
        for name, values, col, axis in (("x_m", xs, 0, 1), ("y_m", ys, 1, 0)):
            short = np.flatnonzero(~present.all(axis=axis))
            if len(short) <= 3:
                clues += [f"{name} = {_fmt(values[j])} (line "
                          f"{int(lines[data[:, col] == values[j]].min())})" for j in short]
        clue = f"; incomplete: {', '.join(clues)}" if clues else ""
        chk.add(f"{where}: the points do not form a full lattice (every x_m with every y_m): "
                f"{len(gaps)} of {present.size} (x, y) combinations are missing, e.g. "
                f"({_fmt(gx)}, {_fmt(gy)}){clue}; add the missing rows or correct the "
                "coordinates")
        return None
    zs = np.empty(present.shape)
    zs[ix, iy] = data[:, 2]
    return xs, ys, zs


def _parse_rock(value, chk: _Checker) -> Rock | None:
    if value is _MISSING:
        return None
    sec = chk.section(value, "rock", _ROCK_KEYS, ("conductivity_ms_per_m", "antenna_frequency_mhz"))
    if sec is None:
        return None
    lo, hi = VELOCITY_BAND_M_PER_NS
    v = k = None
    if "velocity_m_per_ns" in sec:
        v = chk.number(sec["velocity_m_per_ns"], "rock.velocity_m_per_ns", lo=lo, hi=hi,
                       unit="m/ns", fix="rock is typically 0.06 to 0.15 m/ns, air 0.2998")
    if "relative_permittivity" in sec:
        k = chk.number(sec["relative_permittivity"], "rock.relative_permittivity", lo=1.0,
                       fix="1 is air; dry rock is typically 4 to 10")
        if k is not None and not lo <= SPEED_OF_LIGHT_M_PER_NS / math.sqrt(k) <= hi:
            chk.add(f"rock.relative_permittivity {k:g} gives a velocity of "
                    f"{SPEED_OF_LIGHT_M_PER_NS / math.sqrt(k):.4g} m/ns, outside {lo}..{hi} m/ns; "
                    "check the value")
            k = None
    if "velocity_m_per_ns" not in sec and "relative_permittivity" not in sec:
        chk.add("rock needs velocity_m_per_ns or relative_permittivity; add one "
                "(the other is derived from v = c / sqrt(K))")
    cond = chk.number(sec.get("conductivity_ms_per_m", _MISSING), "rock.conductivity_ms_per_m",
                      lo=0.0, unit="mS/m")
    freq = chk.number(sec.get("antenna_frequency_mhz", _MISSING), "rock.antenna_frequency_mhz",
                      lo=0.0, lo_open=True, unit="MHz")
    if v is not None and k is not None:
        v_from_k = SPEED_OF_LIGHT_M_PER_NS / math.sqrt(k)
        if abs(v - v_from_k) > PERMITTIVITY_TOLERANCE * v_from_k:
            chk.add(f"rock.velocity_m_per_ns ({v:g}) and rock.relative_permittivity ({k:g}) "
                    f"disagree by {100 * abs(v - v_from_k) / v_from_k:.0f} % "
                    f"(c / sqrt(K) = {v_from_k:.4f} m/ns); give only one of them, or make "
                    f"them agree within {100 * PERMITTIVITY_TOLERANCE:.0f} %")
            return None
    elif v is not None:
        # 0.2998 is c rounded up: velocities between c and it mean air, K = 1
        k = max((SPEED_OF_LIGHT_M_PER_NS / v) ** 2, 1.0)
    elif k is not None:
        v = SPEED_OF_LIGHT_M_PER_NS / math.sqrt(k)
    if None in (v, k, cond, freq):
        return None
    return Rock(v, k, cond, freq)


def _parse_survey(sec: dict, path: str, chk: _Checker, base_dir: Path):
    """The hole's deviation survey (:mod:`reconstruct.io.surveys`), None when not given; ``False``
    when given but unusable (the problems added to ``chk``)."""
    from reconstruct.io.surveys import read_survey_csv, survey_from_list

    if "survey" in sec and "survey_csv" in sec:
        chk.add(f"{path} has both survey and survey_csv; keep one")
        return False
    if "survey" in sec:
        stations, problems = survey_from_list(sec["survey"], f"{path}.survey")
    elif "survey_csv" in sec:
        rel = chk.text(sec["survey_csv"], f"{path}.survey_csv", what="a file path")
        if rel is None:
            return False
        stations, problems = read_survey_csv(Path(rel) if Path(rel).is_absolute() else base_dir / rel,
                                             f"{path}.survey_csv")
    else:
        return None
    for problem in problems:
        chk.add(problem)
    return False if stations is None else stations


def _parse_boreholes(value, chk: _Checker, base_dir: Path = Path(".")) -> list[tuple[int, Borehole]]:
    """Valid boreholes with their position in the file's list."""
    holes, first_index = [], {}
    for i, item in enumerate(chk.items(value, "boreholes")):
        path = f"boreholes[{i}]"
        sec = chk.section(item, path, _BOREHOLE_KEYS, _BOREHOLE_REQUIRED)
        if sec is None:
            continue
        hid = chk.text(sec.get("id", _MISSING), f"{path}.id")
        if hid is not None:
            if hid in first_index:
                chk.add(f"{path}.id {hid!r} repeats boreholes[{first_index[hid]}].id; "
                        "give every borehole its own id")
            else:
                first_index[hid] = i
        collar = chk.vector(sec.get("collar_m", _MISSING), f"{path}.collar_m")
        az = chk.number(sec.get("azimuth_deg", _MISSING), f"{path}.azimuth_deg", lo=0.0, hi=360.0,
                        unit="degrees", fix="measure clockwise from north")
        dip = chk.number(sec.get("dip_deg", _MISSING), f"{path}.dip_deg", lo=0.0, hi=90.0,
                         unit="degrees", fix="measure below horizontal, 90 is vertical down")
        length = chk.number(sec.get("length_m", _MISSING), f"{path}.length_m", lo=0.0,
                            lo_open=True, unit="m")
        kind = chk.choice(sec.get("kind", "borehole"), f"{path}.kind", HOLE_KINDS,
                          otherwise="leave it out for a borehole")
        survey = _parse_survey(sec, path, chk, base_dir)
        if None not in (hid, collar, az, dip, length, kind) and survey is not False:
            holes.append((i, Borehole(hid, collar, az, dip, length, kind, survey)))
    return holes


def _parse_works(value, chk: _Checker) -> list[PlannedWork]:
    works = []
    for i, item in enumerate(chk.items(value, "planned_works")):
        path = f"planned_works[{i}]"
        sec = chk.section(item, path, _WORK_KEYS, ("name", "kind"))
        if sec is None:
            continue
        name = chk.text(sec.get("name", _MISSING), f"{path}.name")
        kind = chk.text(sec.get("kind", _MISSING), f"{path}.kind")
        if kind is not None:
            kind = chk.choice(kind, f"{path}.kind", PLANNED_WORK_KINDS, show=repr)
        shapes = [k for k in ("polyline_m", "polygon_m") if k in sec]
        if len(shapes) != 1:
            chk.add(f"{path} needs exactly one of polyline_m, polygon_m (got "
                    f"{' and '.join(shapes) if shapes else 'neither'}); keep one")
            continue
        if shapes[0] == "polyline_m":
            pts = chk.points(sec["polyline_m"], f"{path}.polyline_m", dim=3, min_points=2)
        else:
            pts = chk.points(sec["polygon_m"], f"{path}.polygon_m", dim=3, min_points=3)
            if pts is not None and _polygon_area_3d_m2(pts) <= 1e-9:
                chk.add(f"{path}.polygon_m has zero area (all points lie on one line); "
                        "give the corners of a real outline, or use polyline_m for a line")
                pts = None
        blast = _parse_blast_holes(sec, path, kind, shapes[0][:-2], pts, chk)
        if None not in (name, kind, pts) and blast is not None:
            works.append(PlannedWork(name, kind, shapes[0][:-2], pts, *blast))
    return works


def _parse_blast_holes(sec: dict, path: str, kind, geometry: str, pts, chk: _Checker):
    """``(hole_depth_m, subdrill_m, holes)`` of a planned work; None after a problem.

    Only a ``blast_pattern`` may carry holes: either ``holes`` (a list of
    ``{id, collar_m}``) or ``burden_m`` and ``spacing_m`` (a grid inside its
    ``polygon_m``: :func:`blast_grid_holes`), with ``hole_depth_m`` and
    optionally ``subdrill_m``.
    """
    given = [k for k in _BLAST_KEYS if k in sec]
    if not given:
        return (None, 0.0, ())
    if kind is not None and kind != "blast_pattern":
        chk.add(f"{path}: {', '.join(given)} belong(s) to a blast_pattern only, this work is a {kind}; "
                "remove them or set kind: blast_pattern")
        return None
    n_problems = len(chk.problems)
    depth = chk.number(sec.get("hole_depth_m", _MISSING), f"{path}.hole_depth_m", lo=0.0, lo_open=True, unit="m")
    subdrill = chk.number(sec.get("subdrill_m", 0.0), f"{path}.subdrill_m", lo=0.0, unit="m",
                          fix="give the drilling below the planned floor, 0 for none")
    grid_keys = [k for k in ("burden_m", "spacing_m") if k in sec]
    if "hole_depth_m" not in sec:
        chk.add(f"{path}.hole_depth_m is missing; add it ({_HINTS['hole_depth_m']})")
    if ("holes" in sec) == bool(grid_keys) or len(grid_keys) == 1:
        layout = [k for k in ("holes", "burden_m", "spacing_m") if k in sec]
        chk.add(f"{path}: give the blast holes either as holes (a list of {{id, collar_m}}) or as both burden_m "
                f"and spacing_m (a grid inside polygon_m); got {' and '.join(layout) or 'neither'}")
        return None
    if "holes" in sec:
        holes = _parse_hole_list(sec["holes"], f"{path}.holes", chk)
    else:
        burden = chk.number(sec["burden_m"], f"{path}.burden_m", lo=0.0, lo_open=True, unit="m")
        spacing = chk.number(sec["spacing_m"], f"{path}.spacing_m", lo=0.0, lo_open=True, unit="m")
        holes = None
        if geometry != "polygon":
            chk.add(f"{path}: burden_m and spacing_m lay holes out inside polygon_m; give the outline as "
                    "polygon_m, or list the holes under holes")
        elif None not in (burden, spacing, pts):
            holes = blast_grid_holes(pts, burden, spacing)
            if not holes:
                chk.add(f"{path}: no hole of a {burden:g} m x {spacing:g} m grid falls inside polygon_m; "
                        "check burden_m and spacing_m against the outline")
                holes = None
    if len(chk.problems) > n_problems or holes is None:
        return None
    return (depth, subdrill, holes)


def _parse_hole_list(value, path: str, chk: _Checker):
    """Blast holes ``[{id, collar_m}, ...]``; None after a problem."""
    items = chk.items(value, path)
    if not items:
        chk.add(f"{path} is empty; list the holes as {{id: B01, collar_m: [x, y, z]}}")
        return None
    holes, seen, ok = [], set(), True
    for i, item in enumerate(items):
        sec = chk.section(item, f"{path}[{i}]", _BLAST_HOLE_KEYS, _BLAST_HOLE_KEYS)
        if sec is None:
            ok = False
            continue
        hid = chk.text(sec.get("id", _MISSING), f"{path}[{i}].id")
        collar = chk.vector(sec.get("collar_m", _MISSING), f"{path}[{i}].collar_m")
        if hid in seen:
            chk.add(f"{path}[{i}].id {hid!r} repeats an earlier hole; give every hole its own id")
            ok = False
        seen.add(hid)
        if None in (hid, collar):
            ok = False
        else:
            holes.append(BlastHole(hid, collar))
    return tuple(holes) if ok else None


def _parse_drawings(value, chk: _Checker, base_dir: Path) -> list:
    """The entries of ``planned_works_dxf`` (the drawings are read later, against the model box)."""
    from reconstruct.io.dxf import DXF_UNITS, DxfDrawing

    drawings = []
    for i, item in enumerate(chk.items(value, "planned_works_dxf")):
        path = f"planned_works_dxf[{i}]"
        sec = chk.section(item, path, _DXF_KEYS + _DXF_OPTIONAL_KEYS, _DXF_KEYS)
        if sec is None:
            continue
        file = chk.text(sec.get("file", _MISSING), f"{path}.file", what="a file path")
        units = sec.get("units", _MISSING)
        if units is not _MISSING:
            units = chk.choice(units, f"{path}.units", tuple(DXF_UNITS), show=repr,
                               otherwise="give the unit the drawing was made in")
        offset = chk.vector(sec.get("offset_m", _MISSING), f"{path}.offset_m")
        layers = _parse_layer_kinds(sec.get("layers", _MISSING), f"{path}.layers", chk)
        depth = chk.number(sec.get("hole_depth_m", _MISSING), f"{path}.hole_depth_m", lo=0.0, lo_open=True,
                           unit="m", fix="give the depth of the blast holes drawn as POINT collars")
        subdrill = chk.number(sec.get("subdrill_m", 0.0), f"{path}.subdrill_m", lo=0.0, unit="m")
        if "subdrill_m" in sec and "hole_depth_m" not in sec:
            chk.add(f"{path}.subdrill_m needs {path}.hole_depth_m (the depth of the blast holes); add it")
        if None not in (file, units, offset, layers, subdrill) and units is not _MISSING and (
                depth is not None or "hole_depth_m" not in sec):
            drawings.append(DxfDrawing(base_dir / file, units, offset, layers, key=path, hole_depth_m=depth,
                                       subdrill_m=subdrill))
    return drawings


def _parse_layer_kinds(value, path: str, chk: _Checker):
    if value is _MISSING:
        return None
    if not isinstance(value, dict) or not value:
        chk.add(f"{path} must be a section of layer names and kinds, e.g. HAUL_ROAD: haul_road "
                f"(got {_describe(value)})")
        return None
    pairs, seen = [], {}
    for layer, kind in value.items():
        layer_name = str(layer).strip()
        if isinstance(layer, bool) or not layer_name:
            chk.add(f"{path}: layer name {layer!r} is not a layer name; put the name in quotes")
            return None
        if layer_name.upper() in seen:
            chk.add(f"{path}: layers {seen[layer_name.upper()]!r} and {layer_name!r} are the same "
                    "layer (CAD layer names ignore case); keep one")
            return None
        seen[layer_name.upper()] = layer_name
        if chk.choice(kind, f"{path}.{layer_name}", PLANNED_WORK_KINDS, show=repr) is None:
            return None
        pairs.append((layer_name, kind))
    return tuple(pairs)


def _read_drawings(drawings, model: ModelBox, chk: _Checker) -> tuple[list[PlannedWork], list[str]]:
    from reconstruct.io.dxf import read_planned_works_dxf

    works, notes = [], []
    for drawing in drawings:
        try:
            found, said = read_planned_works_dxf(drawing, model.origin_m, model.end_m)
        except InputError as exc:
            chk.problems.extend(exc.problems)
            continue
        works.extend(found)
        notes.extend(said)
    return works, notes


def _parse_zones(value, chk: _Checker) -> list[ExclusionZone]:
    zones = []
    for i, item in enumerate(chk.items(value, "exclusion_zones")):
        path = f"exclusion_zones[{i}]"
        sec = chk.section(item, path, _ZONE_KEYS, ("name", "polygon_m"))
        if sec is None:
            continue
        name = chk.text(sec.get("name", _MISSING), f"{path}.name")
        poly = chk.polygon_xy(sec.get("polygon_m", _MISSING), f"{path}.polygon_m")
        reason = sec.get("reason")
        if reason is not None and not isinstance(reason, str):
            chk.add(f"{path}.reason must be text (got {_describe(reason)}); put it in quotes")
            continue
        if None not in (name, poly):
            zones.append(ExclusionZone(name, poly, reason))
    return zones


def _parse_radar(value, chk: _Checker) -> RadarSystem:
    sec = chk.optional_section(value, "radar", _RADAR_KEYS)
    if sec is None:
        return RadarSystem()
    performance = chk.number(sec.get("system_performance_db", DEFAULT_SYSTEM_PERFORMANCE_DB),
                             "radar.system_performance_db", lo=0.0, lo_open=True, unit="dB",
                             fix="take it from the radar's data sheet or a calibration shot; "
                                 "small nodes reach about 80 to 120 dB")
    loss = sec.get("air_ground_loss_db", _MISSING)
    loss = None if loss is _MISSING else chk.number(loss, "radar.air_ground_loss_db", lo=0.0,
                                                    unit="dB", fix="leave it out to have it computed")
    near = chk.number(sec.get("near_surface_loss_db", 0.0), "radar.near_surface_loss_db", lo=0.0, unit="dB",
                      fix="the loss at each surface or face node; measure it with a test shot or leave it out")
    return RadarSystem(performance if performance is not None else DEFAULT_SYSTEM_PERFORMANCE_DB, loss,
                       near if near is not None else 0.0)


def _parse_radio(value, chk: _Checker) -> RadioNetwork:
    sec = chk.optional_section(value, "radio", _RADIO_KEYS)
    if sec is None:
        return RadioNetwork()
    range_m = chk.number(sec.get("range_m", DEFAULT_RADIO_RANGE_M), "radio.range_m", lo=0.0,
                         lo_open=True, unit="m", fix="give the distance two node radios reach")
    gateway = sec.get("gateway_m", _MISSING)
    gateway = None if gateway is _MISSING else chk.vector(gateway, "radio.gateway_m")
    return RadioNetwork(range_m if range_m is not None else DEFAULT_RADIO_RANGE_M, gateway)


# --------------------------------------------------------------------------
# cross-checks
# --------------------------------------------------------------------------

def _check_model_memory(model: ModelBox, chk: _Checker, source: str) -> Grid | None:
    grid = model.grid()
    try:
        check_grid_fits_memory(grid, source=source, key="model.cell_m")
    except InputError as exc:
        chk.problems.extend(exc.problems)
        return None
    return grid


def _check_ground_covers_model(ground: GroundSurface, grid: Grid, chk: _Checker) -> None:
    xs, ys = grid.centres_m(0), grid.centres_m(1)
    x2, y2 = np.meshgrid(xs, ys, indexing="ij")
    surface = ground.elevation_m(x2, y2)
    gaps = np.isnan(surface)
    if gaps.any():
        first = np.argwhere(gaps)[0]
        gx, gy = x2[tuple(first)], y2[tuple(first)]
        if ground.kind == "benches":
            chk.add(f"ground.benches: the bench polygons do not cover (x, y) = "
                    f"({_fmt(gx)}, {_fmt(gy)}) m ({int(gaps.sum())} of the {gaps.size} column "
                    "centres of the model are outside every bench); add a bench or give "
                    "ground.surround_elevation_m")
        else:
            x0, x1, y0, y1 = ground.lattice_extent_m
            chk.add(f"ground.height_grid_csv: the height grid {ground.height_grid_path} covers "
                    f"x {_fmt(x0)}..{_fmt(x1)} m, y {_fmt(y0)}..{_fmt(y1)} m but the model's "
                    f"column centres span x {_fmt(xs[0])}..{_fmt(xs[-1])} m, "
                    f"y {_fmt(ys[0])}..{_fmt(ys[-1])} m (e.g. (x, y) = ({_fmt(gx)}, {_fmt(gy)}) "
                    "is outside); extend the grid or shrink the model box")
        return
    lowest_centre = grid.centres_m(2)[0]
    if not np.any(surface > lowest_centre):
        chk.add(f"model.origin_m: the ground surface (highest point {_fmt(surface.max())} m) is "
                f"nowhere above the lowest cell centres of the model box (z = "
                f"{_fmt(lowest_centre)} m), so the model has no ground cells; lower the z of "
                "model.origin_m to below the ground surface")


def _check_boreholes_in_box(holes: list[tuple[int, Borehole]], model: ModelBox,
                            chk: _Checker, tol_m: float = 1e-9) -> None:
    lo, hi = np.asarray(model.origin_m), np.asarray(model.end_m)
    for i, hole in holes:
        if _segment_meets_box(np.asarray(hole.collar_m), hole.direction(), hole.length_m,
                              lo - tol_m, hi + tol_m):
            continue
        c, t = hole.collar_m, hole.toe_m
        chk.add(f"boreholes[{i}] ({hole.id}) lies entirely outside the model box "
                f"(x {_fmt(lo[0])}..{_fmt(hi[0])}, y {_fmt(lo[1])}..{_fmt(hi[1])}, "
                f"z {_fmt(lo[2])}..{_fmt(hi[2])} m): collar ({', '.join(_fmt(v) for v in c)}), "
                f"toe ({', '.join(_fmt(v) for v in t)}); fix boreholes[{i}].collar_m or enlarge "
                "the box (model.origin_m, model.size_m)")


def _segment_meets_box(p0, d, length, lo, hi) -> bool:
    # slab clipping of the segment p0 + t d, t in [0, length]
    t0, t1 = 0.0, float(length)
    for a in range(3):
        if abs(d[a]) < 1e-12:
            if not lo[a] <= p0[a] <= hi[a]:
                return False
            continue
        ta, tb = (lo[a] - p0[a]) / d[a], (hi[a] - p0[a]) / d[a]
        t0, t1 = max(t0, min(ta, tb)), min(t1, max(ta, tb))
        if t0 > t1:
            return False
    return True


def model_grid(site: Site, *, memory_limit_bytes: int | None = None):
    """The site's grid and ground mask.

    Loading a site already refuses a grid too large for this machine's memory;
    give ``memory_limit_bytes`` to hold it to a tighter limit.
    """
    grid = site.grid()
    if memory_limit_bytes is not None:
        check_grid_fits_memory(grid, memory_limit_bytes=memory_limit_bytes,
                               source=str(site.source_path or "site"))
    return grid, ground_mask(grid, site.ground.elevation_m)
