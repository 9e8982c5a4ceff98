"""Ray coverage and resolution of a survey layout on the reconstruct grid.

For a layout (node positions after placement in the voxel model) and the pairs
that will be recorded, this module gives per cell:

- ``ray_count`` and ``ray_length_m``: how many straight rays cross the cell and
  their total length in it (Siddon path lengths, the operator the inversion
  uses; :func:`reconstruct.forward.straight_rays.ray_coverage`);
- the ray-direction tensor ``T = sum_r L_r d_r d_r^T`` (``L_r`` the length of
  ray ``r`` in the cell, ``d_r`` its unit direction), its eigenvalues
  normalised to sum 1 and the *angular coverage* ``1.5 (1 - sum lambda_i^2)``:
  0 when all rays are parallel (one direction), 0.75 for two perpendicular
  directions in a plane, 1 for rays spread evenly over all three axes;
- the *resolution floor*: the narrowest first Fresnel zone width
  (``2 x`` :func:`reconstruct.model.resolution.fresnel_half_width_m`, at the cell's
  position along each ray) among the rays crossing the cell. Features narrower
  than this are averaged away whatever the ray density.

The *target volume* is the ground under the planned works (their plan-view
footprint widened by ``works_buffer_m``) from the ground surface down to
``depth_of_interest_m`` below the lower of the ground and the work's level;
without planned works it is all ground down to that depth. A cell is
*covered to the standard* when at least ``min_rays`` rays cross it, its
angular coverage is at least ``min_angular_coverage`` and, when
``max_resolution_m`` is given, its resolution floor is no wider. The coverage
*score* is the mean over target cells of the cell quality
``min(1, count / min_rays) * min(1, angular / min_angular_coverage)``
(times 0 where the resolution condition fails): it rises smoothly as coverage
improves and equals 1 when every target cell meets the standard. The layout
optimiser (:mod:`plan.layout.optimise`) raises this score.

Straight rays are the default; bent rays through a velocity model can be
passed in as an operator built with
:func:`reconstruct.forward.first_arrivals.bent_ray_forward` (slow on large grids).

References
----------
Siddon, R. L. (1985), Fast calculation of the exact radiological path for a
    three-dimensional CT array, Medical Physics 12(2), 252-255.
Kissling, E. (1988), Geotomography with local earthquake data, Reviews of
    Geophysics 26(4), 659-698 (ray density and direction measures; from
    memory).
Williamson, P. R. (1991), A guide to the limits of resolution imposed by
    scattering in ray tomography, Geophysics 56(2), 202-207.
Spetzler, J. and Snieder, R. (2004), The Fresnel volume and transmitted
    waves, Geophysics 69(3), 653-663.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from reconstruct.errors import InputError, is_whole_number
from reconstruct.model.grid import Grid, ground_top_m
from reconstruct.model.resolution import fresnel_half_width_m, wavelength_m
from reconstruct.io.site import Site, work_footprint
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.site import model_grid
from reconstruct.forward.straight_rays import ray_coverage

from plan.synthetic.simulate import all_pairs

__all__ = [
    "CoverageStandard",
    "Coverage",
    "direction_tensor",
    "tensor_eigenvalues",
    "angular_coverage",
    "cell_quality",
    "resolution_floor_m",
    "target_mask",
    "compute_coverage",
    "coverage_cell_arrays",
]

#: Order of the six independent components of a symmetric 3 x 3 tensor.
TENSOR_COMPONENTS = ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))


@dataclass(frozen=True)
class CoverageStandard:
    """The standard a target cell must meet to count as covered.

    Parameters
    ----------
    min_rays : int
        Rays that must cross a cell (default 10).
    min_angular_coverage : float
        Lowest angular coverage, 0..1 (default 0.3: rays from clearly more
        than one direction).
    max_resolution_m : float or None
        Widest acceptable resolution floor (first Fresnel zone width), metres;
        None (default) leaves it out of the standard (it is still reported).
    depth_of_interest_m : float
        Depth below the ground, or below the planned work's level, down to
        which the target volume reaches, metres (default 30).
    works_buffer_m : float
        Plan-view margin around planned works, and half-width of works given
        as polylines (haul roads), metres (default 5).
    max_distance_m : float or None
        Pairs further apart are not recorded (beyond the link range), metres;
        None counts every pair.
    """

    min_rays: int = 10
    min_angular_coverage: float = 0.3
    max_resolution_m: float | None = None
    depth_of_interest_m: float = 30.0
    works_buffer_m: float = 5.0
    max_distance_m: float | None = None

    def __post_init__(self):
        problems = []

        def positive(name, value, allow_none=False, allow_zero=False):
            if value is None and allow_none:
                return
            ok = isinstance(value, (int, float)) and not isinstance(value, bool) and np.isfinite(value)
            if not ok or value < 0 or (value == 0 and not allow_zero):
                problems.append(f"{name} must be a number {'>= 0' if allow_zero else '> 0'} (got {value!r})")

        if not is_whole_number(self.min_rays, 1):
            problems.append(f"min_rays must be a whole number >= 1 (got {self.min_rays!r})")
        a = self.min_angular_coverage
        if not isinstance(a, (int, float)) or isinstance(a, bool) or not (0 < a <= 1):
            problems.append(f"min_angular_coverage must be in (0, 1] (got {a!r}); 0.3 is a usual choice")
        positive("max_resolution_m", self.max_resolution_m, allow_none=True)
        positive("depth_of_interest_m", self.depth_of_interest_m)
        positive("works_buffer_m", self.works_buffer_m, allow_zero=True)
        positive("max_distance_m", self.max_distance_m, allow_none=True)
        if problems:
            raise InputError(problems, source="coverage standard")

    def as_dict(self) -> dict:
        return {
            "min_rays": int(self.min_rays),
            "min_angular_coverage": float(self.min_angular_coverage),
            "max_resolution_m": self.max_resolution_m,
            "depth_of_interest_m": float(self.depth_of_interest_m),
            "works_buffer_m": float(self.works_buffer_m),
            "max_distance_m": self.max_distance_m,
        }


def _unit_directions(tx_xyz_m, rx_xyz_m):
    d = np.asarray(rx_xyz_m, dtype=float) - np.asarray(tx_xyz_m, dtype=float)
    length = np.linalg.norm(d, axis=1)
    if np.any(length <= 0):
        raise ValueError("a pair has transmitter and receiver at the same position")
    return d / length[:, None], length


def direction_tensor(operator, unit_directions) -> np.ndarray:
    """Ray-direction tensor of every cell, weighted by path length.

    Parameters
    ----------
    operator : scipy.sparse matrix, shape (n_rays, n_cells)
        Path lengths in metres (``G[r, c]`` = length of ray ``r`` in cell ``c``).
    unit_directions : ndarray, shape (n_rays, 3)
        Unit direction of each ray (its sign does not matter).

    Returns
    -------
    ndarray, shape (n_cells, 6)
        ``T_xx, T_yy, T_zz, T_xy, T_xz, T_yz`` of ``T = sum_r G[r, c] d_r d_r^T``,
        metres.
    """
    d = np.asarray(unit_directions, dtype=float)
    weights = np.stack([d[:, a] * d[:, b] for a, b in TENSOR_COMPONENTS], axis=1)
    return np.asarray(sp.csr_matrix(operator).T @ weights)


def _full_tensors(components) -> np.ndarray:
    t = np.asarray(components, dtype=float)
    full = np.empty(t.shape[:-1] + (3, 3))
    for k, (a, b) in enumerate(TENSOR_COMPONENTS):
        full[..., a, b] = t[..., k]
        full[..., b, a] = t[..., k]
    return full


def tensor_eigenvalues(components) -> np.ndarray:
    """Eigenvalues of each direction tensor normalised to sum 1, largest first.

    Parameters
    ----------
    components : ndarray, shape (..., 6)
        Tensor components in the order of :func:`direction_tensor`.

    Returns
    -------
    ndarray, shape (..., 3)
        ``lambda_1 >= lambda_2 >= lambda_3`` with sum 1; all zero where no ray
        crosses (trace 0). All rays parallel give ``(1, 0, 0)``; rays evenly
        along three perpendicular axes give ``(1/3, 1/3, 1/3)``.
    """
    t = np.asarray(components, dtype=float)
    trace = t[..., 0] + t[..., 1] + t[..., 2]
    values = np.zeros(t.shape[:-1] + (3,))
    has = trace > 0
    if np.any(has):
        normalised = _full_tensors(t[has] / trace[has][:, None])
        values[has] = np.linalg.eigvalsh(normalised)[:, ::-1]
    return values


def angular_coverage(components) -> np.ndarray:
    """Angular coverage ``1.5 (1 - sum lambda_i^2)`` of each direction tensor, 0..1.

    ``sum lambda_i^2`` of the trace-normalised tensor equals its squared
    Frobenius norm, so no eigen-decomposition is needed. 0 where no ray
    crosses or all rays are parallel; 1 for rays spread evenly in 3D.
    """
    t = np.asarray(components, dtype=float)
    trace = t[..., 0] + t[..., 1] + t[..., 2]
    frob = t[..., 0] ** 2 + t[..., 1] ** 2 + t[..., 2] ** 2 + 2.0 * (t[..., 3] ** 2 + t[..., 4] ** 2 + t[..., 5] ** 2)
    with np.errstate(divide="ignore", invalid="ignore"):
        value = 1.5 * (1.0 - frob / trace**2)
    return np.where(trace > 0, np.clip(value, 0.0, 1.0), 0.0)


def cell_quality(count, angular, standard: CoverageStandard, resolution_m=None) -> np.ndarray:
    """Quality of coverage of each cell against ``standard``, 0..1 (1 = meets it)."""
    q = np.minimum(1.0, np.asarray(count, dtype=float) / standard.min_rays)
    q = q * np.minimum(1.0, np.asarray(angular, dtype=float) / standard.min_angular_coverage)
    if standard.max_resolution_m is not None and resolution_m is not None:
        with np.errstate(invalid="ignore"):
            fine_enough = np.asarray(resolution_m) <= standard.max_resolution_m
        q = np.where(fine_enough, q, 0.0)
    return q


def resolution_floor_m(operator, grid: Grid, tx_xyz_m, rx_xyz_m, wavelength: float) -> np.ndarray:
    """Narrowest first Fresnel zone width (m) among the rays crossing each cell.

    The width of a ray's zone at a cell is ``2 x`` the half-width of the
    half-period Fresnel ellipsoid at the projection of the cell centre on the
    ray (:func:`reconstruct.model.resolution.fresnel_half_width_m`). Cells crossed by
    no ray get NaN.

    Returns
    -------
    ndarray, shape (n_cells,)
    """
    G = sp.csc_matrix(operator)
    tx = np.asarray(tx_xyz_m, dtype=float)
    rx = np.asarray(rx_xyz_m, dtype=float)
    unit, length = _unit_directions(tx, rx)
    floor = np.full(grid.n_cells, np.nan)
    counts = np.diff(G.indptr)
    cols = np.flatnonzero(counts)
    if cols.size == 0:
        return floor
    entry_col = np.repeat(np.arange(grid.n_cells), counts)
    rays = G.indices
    ijk = np.stack(np.unravel_index(entry_col, grid.shape), axis=1)
    centre = np.asarray(grid.origin_m) + (ijk + 0.5) * np.asarray(grid.cell_m)
    along = np.einsum("ij,ij->i", centre - tx[rays], unit[rays])
    along = np.clip(along, 0.0, length[rays])
    width = 2.0 * fresnel_half_width_m(wavelength, length[rays], along)
    floor[cols] = np.minimum.reduceat(width, G.indptr[cols])
    return floor


def target_mask(site: Site, grid: Grid, ground: np.ndarray, standard: CoverageStandard):
    """The target volume as a boolean ``(nx, ny, nz)`` array, and a note saying what it is.

    Ground cells under the planned works (footprint widened by
    ``works_buffer_m``) from the surface down to ``depth_of_interest_m`` below
    the lower of the ground top and the work's lowest point; all ground down
    to that depth when the site has no planned works.
    """
    top = ground_top_m(grid, ground)
    x2, y2 = np.meshgrid(grid.centres_m(0), grid.centres_m(1), indexing="ij")
    zc = grid.centres_m(2)
    if site.planned_works:
        bottom = np.full(top.shape, np.inf)
        for work in site.planned_works:
            near, work_z = work_footprint(work, x2, y2, standard.works_buffer_m)
            level = np.minimum(top, work_z) - standard.depth_of_interest_m
            bottom = np.where(near, np.minimum(bottom, level), bottom)
        note = (f"ground under the {len(site.planned_works)} planned works (plan footprint widened by "
                f"{standard.works_buffer_m:g} m) down to {standard.depth_of_interest_m:g} m below the ground "
                "or the work's level")
    else:
        bottom = top - standard.depth_of_interest_m
        note = (f"the site has no planned works: all ground down to {standard.depth_of_interest_m:g} m "
                "below the surface")
    with np.errstate(invalid="ignore"):
        mask = ground & (zc[None, None, :] >= bottom[:, :, None])
    return mask, note


@dataclass(frozen=True)
class Coverage:
    """Coverage of one layout; arrays over cells have the grid's shape ``(nx, ny, nz)``."""

    grid: Grid
    ground: np.ndarray
    target: np.ndarray
    target_note: str
    ray_count: np.ndarray
    ray_length_m: np.ndarray
    angular_coverage: np.ndarray
    eigenvalues: np.ndarray  # (nx, ny, nz, 3), normalised, largest first
    resolution_floor_m: np.ndarray  # NaN where no ray
    quality: np.ndarray
    n_nodes: int
    n_rays: int
    wavelength_m: float
    standard: CoverageStandard

    @property
    def covered(self) -> np.ndarray:
        return self.target & (self.quality >= 1.0)

    @property
    def covered_fraction(self) -> float:
        n = int(self.target.sum())
        return float(self.covered.sum() / n) if n else 0.0

    @property
    def score(self) -> float:
        n = int(self.target.sum())
        return float(self.quality[self.target].mean()) if n else 0.0

    def summary(self) -> dict:
        t = self.target
        cell_volume = float(np.prod(self.grid.cell_m))
        floor = self.resolution_floor_m[t]
        crossed = np.isfinite(floor)

        def stats(values):
            values = values[np.isfinite(values)]
            if values.size == 0:
                return {"min": None, "median": None, "max": None}
            return {"min": float(values.min()), "median": float(np.median(values)), "max": float(values.max())}

        return {
            "standard": self.standard.as_dict(),
            "target_volume": {
                "description": self.target_note,
                "cells": int(t.sum()),
                "volume_m3": float(t.sum() * cell_volume),
                "covered_cells": int(self.covered.sum()),
                "covered_fraction": self.covered_fraction,
                "score": self.score,
                "cells_without_rays": int((self.ray_count[t] == 0).sum()),
                "ray_count": stats(self.ray_count[t].astype(float)),
                "angular_coverage": stats(self.angular_coverage[t]),
                "resolution_floor_m": stats(floor),
                "fraction_crossed_by_rays": float(crossed.mean()) if crossed.size else 0.0,
            },
            "ground": {
                "cells": int(self.ground.sum()),
                "cells_with_rays": int((self.ray_count[self.ground] > 0).sum()),
            },
            "layout": {"nodes": self.n_nodes, "rays": self.n_rays},
            "wavelength_m": self.wavelength_m,
            "grid": {"origin_m": list(self.grid.origin_m), "cell_m": list(self.grid.cell_m),
                     "shape": list(self.grid.shape)},
        }


def compute_coverage(
    site: Site,
    node_xyz_m,
    standard: CoverageStandard = CoverageStandard(),
    *,
    pairs=None,
    operator=None,
    progress=None,
) -> Coverage:
    """Coverage and resolution of a layout on the site's model grid.

    Parameters
    ----------
    site : Site
    node_xyz_m : ndarray, shape (n, 3)
        Node positions as the forward model uses them (after
        :func:`reconstruct.model.placement.place_nodes`), metres.
    standard : CoverageStandard
    pairs : (ndarray, ndarray), optional
        Indices of the two nodes of each recorded pair; default every pair
        (one ray per pair: reciprocal rays are the same line) no further apart
        than ``standard.max_distance_m``.
    operator : scipy.sparse matrix, optional
        Path lengths of the pairs' rays (for bent rays); default straight rays.
    progress : callable, optional
        ``progress(message)``.

    Returns
    -------
    Coverage
    """
    xyz = np.asarray(node_xyz_m, dtype=float)
    grid, ground = model_grid(site)
    if pairs is None:
        a, b = all_pairs(len(xyz), both_directions=False, xyz_m=xyz, max_distance_m=standard.max_distance_m)
    else:
        a, b = (np.asarray(p, dtype=np.int64) for p in pairs)
    keep = np.linalg.norm(xyz[b] - xyz[a], axis=1) > 1e-6
    a, b = a[keep], b[keep]
    if operator is None:
        operator = straight_ray_matrix(
            grid, xyz[a], xyz[b],
            progress=(lambda d, n: progress(f"straight rays: {d:,}/{n:,}")) if progress else None)
    elif operator.shape != (a.size, grid.n_cells):
        raise ValueError(f"operator has shape {operator.shape}, expected ({a.size}, {grid.n_cells})")
    length, count = ray_coverage(operator, grid)
    if a.size:
        unit, _ = _unit_directions(xyz[a], xyz[b])
        tensor = direction_tensor(operator, unit)
    else:
        tensor = np.zeros((grid.n_cells, 6))
    lam = wavelength_m(site.rock.velocity_m_per_ns, site.rock.antenna_frequency_mhz)
    if progress:
        progress("direction tensors and Fresnel zones")
    floor = (resolution_floor_m(operator, grid, xyz[a], xyz[b], lam) if a.size
             else np.full(grid.n_cells, np.nan))
    angular = angular_coverage(tensor).reshape(grid.shape)
    target, note = target_mask(site, grid, ground, standard)
    eig = np.zeros(grid.shape + (3,))
    eig[target] = tensor_eigenvalues(tensor.reshape(grid.shape + (6,))[target])
    floor = floor.reshape(grid.shape)
    quality = cell_quality(count, angular, standard, floor)
    return Coverage(
        grid=grid, ground=ground, target=target, target_note=note, ray_count=count, ray_length_m=length,
        angular_coverage=angular, eigenvalues=eig, resolution_floor_m=floor, quality=quality,
        n_nodes=len(xyz), n_rays=int(a.size), wavelength_m=float(lam), standard=standard,
    )


def coverage_cell_arrays(coverage: Coverage) -> dict:
    """Cell arrays for ``coverage.vti`` (docs/formats.md gives their meaning)."""
    return {
        "ray_count": coverage.ray_count.astype(np.int32),
        "ray_length_m": coverage.ray_length_m,
        "angular_coverage": coverage.angular_coverage,
        "direction_eigenvalue_1": coverage.eigenvalues[..., 0],
        "direction_eigenvalue_3": coverage.eigenvalues[..., 2],
        "resolution_floor_m": coverage.resolution_floor_m,
        "coverage_quality": coverage.quality,
        "covered": coverage.covered,
        "target": coverage.target,
        "ground": coverage.ground,
    }
