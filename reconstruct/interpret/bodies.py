"""Void bodies in a velocity cube: background, threshold, connected bodies, the void table.

Method
------
1. **Background.** The slowness of every ground cell is compared with a
   robust background: the median slowness of the ground cells crossed by rays
   in the same *depth slab* (depth below the ground surface of the cell's own
   column, slabs one cell thick). Depth rather than elevation, so that benches
   at different levels share a background; the median, so that a void filling
   less than half of a slab does not shift it. A slab without rays takes the
   median of its ground cells, and an empty one the median of the whole cube.
2. **Anomaly** ``a = s - s_background`` in ns/m: negative is faster than the
   background (candidates of fill ``air``), positive slower (fill
   ``water_or_clay``).
3. **Threshold**, per depth slab, from the data rather than a fixed number:
   ``k * max(sigma_model, rms_ns / w)``. ``sigma_model`` is the robust spread
   of the anomaly over the cells crossed by rays (1.4826 times the median
   absolute deviation, the Gaussian-consistent scale); ``rms_ns / w`` is the
   slowness contrast whose delay across a body as wide as the resolution
   ``w`` equals the RMS misfit of the picks; ``k`` is chosen so that a cube
   of pure noise of the same smoothness yields any body with a chance of
   5 % (random-field theory, :func:`detection_sigmas`), or given by the user.
4. **Resolution** ``w`` at each depth: the width of the first Fresnel zone
   (twice :func:`reconstruct.model.resolution.fresnel_half_width_m`) for the
   wavelength at the background velocity of the slab and the median
   transmitter-receiver distance of the picks, and never less than two cells.
5. **Bodies.** Cells beyond the threshold, of one sign, joined through faces,
   edges or corners (:func:`scipy.ndimage.label`). Each component is cut at
   half its peak anomaly: for a sharp-edged body blurred by a symmetric
   smoothing the blurred step crosses half its height at the true edge, so
   the half-peak contour estimates the body's extent whatever the threshold
   that found it. Pieces left after the cut become separate bodies.
6. **Resolved or not.** A body whose largest extent (the larger of its
   largest horizontal span and its height) is below the resolution at its
   depth is smaller than the resolution in every direction: it is an
   *unresolved* (an indication only), not a void: status ``unresolved``;
   the others are ``resolved``.

Every number behind the threshold is returned (and written to ``voids.json``)
so that a reader can redo the decision.

References
----------
Williamson, P. R. (1991). A guide to the limits of resolution imposed by
    scattering in ray tomography. Geophysics, 56(2), 202-207.
Wielandt, E. (1987). On the validity of the ray approximation for
    interpreting delay times. In Seismic Tomography (ed. Nolet), Reidel
    (from memory): slow bodies are avoided by first arrivals and heal.
Davis, J. L., & Annan, A. P. (1989). Ground-penetrating radar for
    high-resolution mapping of soil and rock stratigraphy. Geophysical
    Prospecting, 37(5), 531-551.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage
from scipy.spatial import ConvexHull

from reconstruct.errors import InputError
from reconstruct.model.grid import Grid
from reconstruct.model.resolution import fresnel_half_width_m, wavelength_m
from reconstruct.inverse.robust import MAD_TO_SIGMA  # 1.4826: MAD to sigma for Gaussian noise
from reconstruct.io.site import PlannedWork, points_in_polygon

__all__ = [
    "FILL_AIR",
    "FILL_WATER_OR_CLAY",
    "STATUS_RESOLVED",
    "STATUS_UNRESOLVED",
    "VoidOptions",
    "VoidBody",
    "VoidAnalysis",
    "depth_below_ground_m",
    "robust_background",
    "smoothness_fwhm_cells",
    "search_volume_resels",
    "expected_noise_clusters",
    "detection_sigmas",
    "TIER_VOID",
    "TIER_UNRESOLVED_BODY",
    "TIER_WEAK_INDICATION",
    "body_tier",
    "size_words",
    "find_voids",
    "VOID_TABLE_COLUMNS",
    "void_table_rows",
]

#: Fill classes (column ``fill``): faster than the background rock, or slower.
FILL_AIR = "air"
FILL_WATER_OR_CLAY = "water_or_clay"
#: Statuses (column ``status``): larger than the resolution (a void), or an indication only.
STATUS_RESOLVED = "resolved"
STATUS_UNRESOLVED = "unresolved"
#: Tiers (column ``tier``), one vocabulary for everything the cube shows: a void (a resolved body),
#: an unresolved body (past the detection threshold, smaller than the resolution) and a weak
#: indication (past the noise floor, short of the detection threshold;
#: :mod:`reconstruct.interpret.detectability`). Unresolved bodies and weak indications are the
#: *indications*.
TIER_VOID = "void"
TIER_UNRESOLVED_BODY = "unresolved_body"
TIER_WEAK_INDICATION = "weak_indication"


@dataclass(frozen=True)
class VoidOptions:
    """Settings of the void search.

    Parameters
    ----------
    sigmas : float or None
        Detection threshold in robust standard deviations of the anomaly.
        None (the default) derives it from ``false_alarm`` and the size of
        the cube: see :func:`detection_sigmas`.
    false_alarm : float
        Chance, for a cube of pure noise, that any body at all is detected
        (default 0.05, the conventional 5 % significance level).
    min_cells_for_resolution : float
        Smallest resolvable width in cells, whatever the Fresnel zone
        (default 2: one cell cannot show an edge; common practice, no
        published source).
    """

    sigmas: float | None = None
    false_alarm: float = 0.05
    min_cells_for_resolution: float = 2.0

    def __post_init__(self):
        problems = []
        for name in ("sigmas", "min_cells_for_resolution"):
            value = getattr(self, name)
            if name == "sigmas" and value is None:
                continue
            if not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
                problems.append(f"{name} must be a number > 0 (got {value!r})")
        fa = self.false_alarm
        if not isinstance(fa, (int, float)) or not (0.0 < fa < 1.0):
            problems.append(f"false_alarm must be between 0 and 1, exclusive (got {fa!r})")
        if problems:
            raise InputError(problems)


def smoothness_fwhm_cells(anomaly, mask) -> np.ndarray:
    """Smoothness of the anomaly field along x, y, z: FWHM in cells.

    For a stationary Gaussian field whose autocorrelation is Gaussian, the
    correlation of face neighbours is ``rho = 1 - var(D) / (2 var(a))`` with
    ``D`` the difference between neighbours, and the FWHM of the equivalent
    smoothing kernel is ``sqrt(-2 ln 2 / ln rho)``. Variances are taken
    robustly (1.4826 MAD, squared) over pairs of cells both in ``mask`` so
    that a void does not inflate them. Never less than one cell.

    References
    ----------
    Forman, S. D., Cohen, J. D., Fitzgerald, M., Eddy, W. F., Mintun, M. A.,
        & Noll, D. C. (1995). Improved assessment of significant activation
        in functional magnetic resonance imaging (fMRI): use of a
        cluster-size threshold. Magnetic Resonance in Medicine, 33(5), 636-647.
    """
    a = np.asarray(anomaly, dtype=float)
    mask = np.asarray(mask, dtype=bool)
    values = a[mask]
    scale = MAD_TO_SIGMA * np.median(np.abs(values - np.median(values))) if values.size else 0.0
    fwhm = np.ones(3)
    if scale <= 0:
        return fwhm
    for axis in range(3):
        lo = [slice(None)] * 3
        hi = [slice(None)] * 3
        lo[axis], hi[axis] = slice(0, -1), slice(1, None)
        both = mask[tuple(lo)] & mask[tuple(hi)]
        if both.sum() < 10:
            continue
        diff = (a[tuple(hi)] - a[tuple(lo)])[both]
        diff_scale = MAD_TO_SIGMA * np.median(np.abs(diff - np.median(diff)))
        rho = 1.0 - diff_scale**2 / (2.0 * scale**2)
        if rho > 0.0:
            fwhm[axis] = max(1.0, math.sqrt(-2.0 * math.log(2.0) / math.log(min(rho, 1.0 - 1e-12))))
    return fwhm


def search_volume_resels(mask, fwhm_cells) -> tuple:
    """Resel counts ``(R0, R1, R2, R3)`` of the region ``mask`` for a field of smoothness ``fwhm_cells``.

    ``R3`` is the volume of the region over the product of the FWHMs; ``R1``
    and ``R2`` are those of its bounding box (edge lengths, face areas), the
    box formulas of Worsley et al. (1996); ``R0 = 1``.
    """
    mask = np.asarray(mask, dtype=bool)
    fwhm = np.asarray(fwhm_cells, dtype=float)
    if not mask.any():
        return (1.0, 0.0, 0.0, 0.0)
    sides = np.array([np.ptp(np.nonzero(mask.any(axis=tuple(b for b in range(3) if b != a)))[0]) + 1
                      for a in range(3)], dtype=float) / fwhm
    r1 = float(sides.sum())
    r2 = float(sides[0] * sides[1] + sides[1] * sides[2] + sides[0] * sides[2])
    r3 = float(mask.sum() / fwhm.prod())
    return (1.0, r1, r2, r3)


def expected_noise_clusters(resels, u: float) -> float:
    """Expected Euler characteristic of the excursion set above ``u`` of one sign.

    For a smooth Gaussian field of resel counts ``R0..R3`` this is about the
    number of clusters that pure noise lifts above ``u`` standard deviations
    (and, when small, the chance of any); the formulas are listed in
    :func:`detection_sigmas`. Dimensionless.

    References
    ----------
    Worsley et al. (1996); see :func:`detection_sigmas`.
    """
    from scipy.stats import norm

    r0, r1, r2, r3 = (float(r) for r in resels)
    c = 4.0 * math.log(2.0)
    e = math.exp(-u * u / 2.0)
    return (r0 * norm.sf(u) + r1 * math.sqrt(c) * e / (2 * math.pi)
            + r2 * c * u * e / (2 * math.pi) ** 1.5 + r3 * c**1.5 * (u * u - 1) * e / (2 * math.pi) ** 2)


def detection_sigmas(resels, false_alarm: float) -> float:
    """Threshold in standard deviations at which pure noise yields any body with chance ``false_alarm``.

    The expected Euler characteristic of the excursion set of a smooth
    Gaussian field above ``u`` approximates the chance that any cluster
    exceeds ``u``; for resel counts ``R0..R3`` it is
    ``sum_d R_d rho_d(u)`` with

    * ``rho_0 = 1 - Phi(u)``
    * ``rho_1 = (4 ln 2)^(1/2) exp(-u^2/2) / (2 pi)``
    * ``rho_2 = (4 ln 2) u exp(-u^2/2) / (2 pi)^(3/2)``
    * ``rho_3 = (4 ln 2)^(3/2) (u^2 - 1) exp(-u^2/2) / (2 pi)^2``

    Fast and slow bodies are both searched, so ``u`` solves
    ``2 E[chi](u) = false_alarm``.

    References
    ----------
    Worsley, K. J., Marrett, S., Neelin, P., Vandal, A. C., Friston, K. J., &
        Evans, A. C. (1996). A unified statistical approach for determining
        significant signals in images of cerebral activation. Human Brain
        Mapping, 4(1), 58-73.
    """
    from scipy.optimize import brentq

    return float(brentq(lambda u: 2.0 * expected_noise_clusters(resels, u) - false_alarm, 1.0, 40.0))


@dataclass(frozen=True)
class VoidBody:
    """One body found in the cube; lengths in m, velocities in m/ns.

    ``roof_thickness_m`` is the rock between the top of the body and the
    ground surface; ``roof_below_work_m`` the rock between it and the planned
    work above it (``roof_below_work_name``), infinite when no work lies over
    it in plan. ``span_m`` is the largest horizontal width; ``width_m`` and
    ``length_m`` the plan extents across and along its principal axes.
    ``standoff_m`` is the shortest distance, in 3D, between the body's cells
    and the nearest planned work (``nearest_work``), infinite when the site
    has none.

    ``refined`` is None until the body has been fitted as a parametric
    shape against the picks (:mod:`reconstruct.interpret.refine`); it then
    holds that fit, whose sizes carry 1-sigma and cautious 95 % bounds
    (:class:`reconstruct.interpret.estimates.Estimate`).
    """

    body_id: int
    status: str
    fill: str
    n_cells: int
    volume_m3: float
    centroid_m: tuple
    bbox_min_m: tuple
    bbox_max_m: tuple
    roof_elevation_m: float
    roof_depth_m: float
    roof_thickness_m: float
    nearest_work: str | None
    standoff_m: float
    roof_below_work_m: float
    roof_below_work_name: str | None
    span_m: float
    width_m: float
    length_m: float
    equivalent_diameter_m: float
    resolution_m: float
    mean_velocity_m_per_ns: float
    extreme_velocity_m_per_ns: float
    background_velocity_m_per_ns: float
    peak_anomaly_ns_per_m: float
    threshold_ns_per_m: float
    ray_covered_fraction: float
    mean_ray_count: float
    confidence: str
    confidence_reason: str
    refined: object = None
    noise_floor_ns_per_m: float = math.nan  # the slab's threshold over the threshold in sigmas


@dataclass(frozen=True)
class VoidAnalysis:
    """Result of :func:`find_voids`."""

    grid: Grid
    labels: np.ndarray  # (nx, ny, nz) int32: body_id, 0 for none
    background_slowness_ns_per_m: np.ndarray  # (nx, ny, nz)
    anomaly_ns_per_m: np.ndarray  # (nx, ny, nz), NaN outside ground
    bodies: tuple
    slabs: list  # one dict per depth slab: background, resolution, threshold
    parameters: dict
    notes: tuple = field(default=())


def depth_below_ground_m(grid: Grid, surface_m) -> np.ndarray:
    """Depth of every cell centre below the ground surface of its column, m.

    ``surface_m`` is the ground elevation at the column centres, shape (nx, ny).
    Positive below ground; shape (nx, ny, nz).
    """
    surface = np.asarray(surface_m, dtype=float)
    if surface.shape != grid.shape[:2]:
        raise ValueError(f"surface_m has shape {surface.shape}, expected {grid.shape[:2]}")
    return surface[:, :, None] - grid.centres_m(2)[None, None, :]


def _slab_index(grid: Grid, depth_m):
    return np.floor(np.maximum(depth_m, 0.0) / grid.cell_m[2]).astype(np.int64)


def robust_background(grid: Grid, slowness_ns_per_m, ground, covered, surface_m):
    """Median slowness per depth slab, over ground cells crossed by rays.

    Returns
    -------
    background : ndarray (nx, ny, nz)
        Background slowness of every cell (ns/m); air cells get their own value.
    slab_background : ndarray (n_slabs,)
        Background slowness per slab, slab ``k`` from ``k dz`` to ``(k+1) dz``
        below ground.
    slab_counts : ndarray (n_slabs,)
        Number of cells the median of each slab was taken over.
    """
    slowness = np.asarray(slowness_ns_per_m, dtype=float)
    ground = np.asarray(ground, dtype=bool)
    covered = np.asarray(covered, dtype=bool) & ground
    slab = _slab_index(grid, depth_below_ground_m(grid, surface_m))
    n_slabs = int(slab[ground].max()) + 1 if ground.any() else 1
    overall = np.median(slowness[covered]) if covered.any() else (
        np.median(slowness[ground]) if ground.any() else np.median(slowness))
    slab_background = np.full(n_slabs, overall)
    slab_counts = np.zeros(n_slabs, dtype=np.int64)
    order = np.argsort(slab[ground], kind="stable")
    g_slab = slab[ground][order]
    g_values = slowness[ground][order]
    g_covered = covered[ground][order]
    bounds = np.searchsorted(g_slab, np.arange(n_slabs + 1))
    for k in range(n_slabs):
        values = g_values[bounds[k]:bounds[k + 1]]
        hit = g_covered[bounds[k]:bounds[k + 1]]
        if hit.any():
            slab_background[k] = np.median(values[hit])
            slab_counts[k] = int(hit.sum())
        elif values.size:
            slab_background[k] = np.median(values)
            slab_counts[k] = values.size
    background = np.where(ground, slab_background[np.minimum(slab, n_slabs - 1)], slowness)
    return background, slab_background, slab_counts


def _column_tops_m(grid: Grid, cells_ijk):
    """Top face elevation of the highest cell per occupied column: {(ix, iy): z_top}."""
    ix, iy, iz = cells_ijk
    top = {}
    for x, y, z in zip(ix.tolist(), iy.tolist(), iz.tolist()):
        if z > top.get((x, y), -1):
            top[(x, y)] = z
    z0, dz = grid.origin_m[2], grid.cell_m[2]
    return {key: z0 + dz * (z + 1) for key, z in top.items()}


def _plan_extent(grid: Grid, columns):
    """Largest plan span, width and length (principal axes) of a set of columns, m."""
    cols = np.asarray(columns, dtype=float)
    dx, dy = grid.cell_m[0], grid.cell_m[1]
    x0 = grid.origin_m[0] + cols[:, 0] * dx
    y0 = grid.origin_m[1] + cols[:, 1] * dy
    corners = np.concatenate([
        np.stack([x0 + ox, y0 + oy], axis=1) for ox in (0.0, dx) for oy in (0.0, dy)])
    corners = np.unique(corners, axis=0)
    hull = corners[ConvexHull(corners).vertices]
    diff = hull[:, None, :] - hull[None, :, :]
    span = float(np.sqrt((diff**2).sum(axis=2)).max())
    centred = hull - hull.mean(axis=0)
    # principal plan axes of the column centres (a single column: the grid axes)
    centres = np.stack([x0 + dx / 2, y0 + dy / 2], axis=1)
    if len(centres) > 1:
        _, vectors = np.linalg.eigh(np.cov(centres.T))
        axes = vectors[:, ::-1]  # major axis first
    else:
        axes = np.eye(2)
    extents = [float(np.ptp(centred @ axes[:, i])) for i in range(2)]
    return span, min(extents), max(extents)


def _work_points_m(work: PlannedWork, spacing_m: float):
    """Points along a polyline, or over a polygon (interior lattice and outline), m.

    A blast pattern whose holes are known is its holes instead, each from
    the collar down to the toe (charged column and subdrill): distances to it
    are to the holes, not to the outline on the bench floor.
    """
    if work.has_holes:
        columns = work.hole_columns_m()
        n = max(int(np.ceil((columns[:, 0] - columns[:, 2]).max() / spacing_m)), 1)
        t = np.linspace(0.0, 1.0, n + 1)
        z = columns[:, :1] + t[None, :] * (columns[:, 2:] - columns[:, :1])
        xy = np.array([h.collar_m[:2] for h in work.holes], dtype=float)
        return np.column_stack([np.repeat(xy, n + 1, axis=0), z.ravel()])
    pts = np.asarray(work.points_m, dtype=float)
    if work.geometry == "polygon":
        pts = np.vstack([pts, pts[:1]])
    samples = []
    for a, b in zip(pts[:-1], pts[1:]):
        n = max(int(np.ceil(np.linalg.norm(b - a) / spacing_m)), 1)
        t = np.linspace(0.0, 1.0, n + 1)[:, None]
        samples.append(a + t * (b - a))
    line = np.vstack(samples)
    if work.geometry != "polygon":
        return line
    corners = np.asarray(work.points_m, dtype=float)
    xs = np.arange(corners[:, 0].min(), corners[:, 0].max() + spacing_m, spacing_m)
    ys = np.arange(corners[:, 1].min(), corners[:, 1].max() + spacing_m, spacing_m)
    gx, gy = (a.ravel() for a in np.meshgrid(xs, ys, indexing="ij"))
    inside = points_in_polygon(gx, gy, corners[:, :2])
    # elevation inside: the least-squares plane through the corners (exact when planar)
    design = np.column_stack([np.ones(len(corners)), corners[:, 0], corners[:, 1]])
    coef = np.linalg.lstsq(design, corners[:, 2], rcond=None)[0]
    gz = coef[0] + coef[1] * gx[inside] + coef[2] * gy[inside]
    return np.vstack([line, np.column_stack([gx[inside], gy[inside], gz])])


def _distance_to_cells_m(points, lo, hi):
    """Smallest distance from any point to any of the boxes ``[lo, hi]``, m."""
    best = np.inf
    for start in range(0, len(points), 256):
        p = points[start:start + 256, None, :]
        gap = np.maximum(np.maximum(lo[None] - p, p - hi[None]), 0.0)
        best = min(best, float(np.sqrt((gap**2).sum(axis=2)).min()))
    return best


def _work_relations(grid: Grid, cells_ijk, tops, works_points):
    """Nearest planned work (3D stand-off) and the thinnest rock between a work and the roof."""
    ijk = np.stack(cells_ijk, axis=1)
    cell = np.asarray(grid.cell_m)
    lo = np.asarray(grid.origin_m) + ijk * cell
    hi = lo + cell
    nearest, standoff = None, np.inf
    below_name, below = None, np.inf
    for name, points in works_points:
        d = _distance_to_cells_m(points, lo, hi)
        if d < standoff:
            nearest, standoff = name, d
        col = np.floor((points[:, :2] - np.asarray(grid.origin_m[:2])) / cell[:2]).astype(int)
        over = np.array([tops.get(key, np.nan) for key in map(tuple, col.tolist())], dtype=float)
        if np.isfinite(over).any():
            rock = float(np.nanmin(points[:, 2] - over))
            if rock < below:
                below_name, below = name, rock
    return nearest, standoff, below_name, below


def _grade(status, fill, covered_fraction, contrast_ratio, size_ratio):
    """Confidence grade and its reason.

    The cut-offs are rules of thumb (common practice, no published source):
    half of the body's cells crossed by rays, a peak at least twice the
    threshold, and slow bodies never graded high because first arrivals
    avoid them (Wielandt 1987, from memory).
    """
    reasons = [f"{100 * covered_fraction:.0f} % of its cells crossed by rays",
               f"peak anomaly {contrast_ratio:.1f} x the threshold",
               f"largest extent {size_ratio:.2f} x the resolution"]
    if status == STATUS_UNRESOLVED:
        return "low", "smaller than the resolution at its depth; " + "; ".join(reasons)
    if covered_fraction < 0.2 or contrast_ratio < 1.5:
        return "low", "weak support: " + "; ".join(reasons)
    if fill == FILL_WATER_OR_CLAY:
        return "medium", ("slow body: first arrivals avoid it, so its size and contrast are "
                          "uncertain; " + "; ".join(reasons))
    if covered_fraction >= 0.5 and contrast_ratio >= 2.0:
        return "high", "; ".join(reasons)
    return "medium", "; ".join(reasons)


def find_voids(
    grid: Grid,
    velocity_m_per_ns,
    ground,
    ray_count,
    surface_m,
    *,
    frequency_mhz: float,
    path_length_m: float,
    rms_ns: float,
    planned_works=(),
    options: VoidOptions = VoidOptions(),
) -> VoidAnalysis:
    """Find void bodies in a velocity cube.

    Long because it runs the whole interpretation of one cube in order
    (background, threshold, labelling, sizes, status, screening); kept whole
    while the body vocabulary is being renamed.

    Parameters
    ----------
    grid : Grid
    velocity_m_per_ns : ndarray (nx, ny, nz)
        Velocity of every cell, m/ns, > 0 where ground.
    ground : ndarray of bool (nx, ny, nz)
    ray_count : ndarray (nx, ny, nz)
        Number of rays crossing each cell.
    surface_m : ndarray (nx, ny)
        Ground elevation at the column centres, m.
    frequency_mhz : float
        Antenna centre frequency, MHz.
    path_length_m : float
        Typical transmitter-receiver distance (the median over the picks), m.
    rms_ns : float
        RMS misfit of the inversion, ns.
    planned_works : sequence of reconstruct.io.site.PlannedWork
    options : VoidOptions

    Returns
    -------
    VoidAnalysis
        Bodies sorted by status (resolved first), then by volume (largest first).

    Notes
    -----
    See the module docstring for the method and its references.
    """
    velocity = np.asarray(velocity_m_per_ns, dtype=float)
    ground = np.asarray(ground, dtype=bool)
    rays = np.asarray(ray_count)
    for name, array in (("velocity_m_per_ns", velocity), ("ground", ground), ("ray_count", rays)):
        if array.shape != grid.shape:
            raise ValueError(f"{name} has shape {array.shape}, expected {grid.shape}")
    if not np.all(np.isfinite(velocity[ground])) or np.any(velocity[ground] <= 0):
        raise InputError("velocity_m_per_ns: the cube holds NaN, infinite or non-positive "
                         "velocities in ground cells; write it again with 'voidcube reconstruct invert'")
    for name, value in (("frequency_mhz", frequency_mhz), ("path_length_m", path_length_m),
                        ("rms_ns", rms_ns)):
        if not math.isfinite(value) or value <= 0:
            raise InputError(f"{name} must be finite and > 0 (got {value!r})")
    if not ground.any():
        raise InputError("the cube has no ground cells; check the site's ground surface")
    covered = ground & (rays > 0)
    slowness = 1.0 / velocity
    background, slab_bg, slab_counts = robust_background(grid, slowness, ground, covered, surface_m)
    anomaly = np.where(ground, slowness - background, np.nan)
    reference = anomaly[covered] if covered.any() else anomaly[ground]
    sigma_model = float(MAD_TO_SIGMA * np.median(np.abs(reference - np.median(reference))))

    slab_velocity = 1.0 / slab_bg
    floor_m = options.min_cells_for_resolution * max(grid.cell_m)
    fresnel_width = 2.0 * fresnel_half_width_m(wavelength_m(slab_velocity, frequency_mhz),
                                               np.full(slab_bg.shape, float(path_length_m)))
    resolution = np.maximum(fresnel_width, floor_m)
    sigma_time = rms_ns / resolution
    slab_of_cell = np.minimum(_slab_index(grid, depth_below_ground_m(grid, surface_m)), len(slab_bg) - 1)
    searched = covered if covered.any() else ground
    fwhm = smoothness_fwhm_cells(np.nan_to_num(anomaly), searched)
    resels = search_volume_resels(searched, fwhm)
    sigmas = options.sigmas if options.sigmas is not None else detection_sigmas(resels, options.false_alarm)
    slab_threshold = sigmas * np.maximum(sigma_model, sigma_time)
    slab = slab_of_cell
    threshold = slab_threshold[slab]

    structure = ndimage.generate_binary_structure(3, 3)
    labels = np.zeros(grid.shape, dtype=np.int32)
    found = []
    for sign, fill in ((-1.0, FILL_AIR), (1.0, FILL_WATER_OR_CLAY)):
        magnitude = np.where(ground, sign * np.nan_to_num(anomaly), 0.0)
        component, n = ndimage.label(magnitude >= threshold, structure=structure)
        for k, box in enumerate(ndimage.find_objects(component), start=1):
            inside = component[box] == k
            peak = magnitude[box][inside].max()
            keep = inside & (magnitude[box] >= 0.5 * peak)
            pieces, n_pieces = ndimage.label(keep, structure=structure)
            offset = np.array([s.start for s in box])
            for piece in range(1, n_pieces + 1):
                ijk = tuple(a + o for a, o in zip(np.nonzero(pieces == piece), offset))
                found.append((fill, ijk))

    cell = np.asarray(grid.cell_m)
    cell_volume = float(np.prod(cell))
    works_points = [(w.name, _work_points_m(w, 0.5 * float(cell[:2].min()))) for w in planned_works]
    drafts = []
    for fill, ijk in found:
        n_cells = ijk[0].size
        centres = np.asarray(grid.origin_m) + (np.stack(ijk, axis=1) + 0.5) * cell
        values = velocity[ijk]
        magnitude = np.abs(anomaly[ijk])
        peak_at = int(np.argmax(magnitude))
        body_slab = int(slab[tuple(a[peak_at] for a in ijk)])
        tops = _column_tops_m(grid, ijk)
        roof_thickness = min(surface_m[c] - top for c, top in tops.items())
        roof = max(tops.values())
        roof_column = max(tops, key=lambda c: tops[c])
        span, width, length = _plan_extent(grid, list(tops))
        volume = n_cells * cell_volume
        diameter = (6.0 * volume / math.pi) ** (1.0 / 3.0)
        height = (ijk[2].max() - ijk[2].min() + 1) * grid.cell_m[2]
        extent = max(span, height)
        status = STATUS_RESOLVED if extent >= resolution[body_slab] else STATUS_UNRESOLVED
        nearest, standoff, below_name, below = _work_relations(grid, ijk, tops, works_points)
        covered_fraction = float(covered[ijk].mean())
        contrast = float(magnitude[peak_at] / threshold[tuple(a[peak_at] for a in ijk)])
        grade, reason = _grade(status, fill, covered_fraction, contrast, extent / resolution[body_slab])
        drafts.append(dict(
            status=status, fill=fill, n_cells=n_cells, volume_m3=volume,
            centroid_m=tuple(float(v) for v in centres.mean(axis=0)),
            bbox_min_m=tuple(float(v) for v in centres.min(axis=0) - cell / 2),
            bbox_max_m=tuple(float(v) for v in centres.max(axis=0) + cell / 2),
            roof_elevation_m=float(roof),
            roof_depth_m=float(max(surface_m[roof_column] - roof, 0.0)),
            roof_thickness_m=float(max(roof_thickness, 0.0)),
            nearest_work=nearest, standoff_m=float(standoff),
            roof_below_work_m=float(below), roof_below_work_name=below_name,
            span_m=span, width_m=width, length_m=length,
            equivalent_diameter_m=float(diameter), resolution_m=float(resolution[body_slab]),
            mean_velocity_m_per_ns=float(values.mean()),
            extreme_velocity_m_per_ns=float(values.max() if fill == FILL_AIR else values.min()),
            background_velocity_m_per_ns=float(slab_velocity[body_slab]),
            peak_anomaly_ns_per_m=float(anomaly[tuple(a[peak_at] for a in ijk)]),
            threshold_ns_per_m=float(threshold[tuple(a[peak_at] for a in ijk)]),
            ray_covered_fraction=covered_fraction, mean_ray_count=float(rays[ijk].mean()),
            confidence=grade, confidence_reason=reason, _ijk=ijk,
            noise_floor_ns_per_m=float(threshold[tuple(a[peak_at] for a in ijk)] / sigmas),
        ))
    drafts.sort(key=lambda d: (d["status"] != STATUS_RESOLVED, -d["volume_m3"]))
    bodies = []
    for body_id, d in enumerate(drafts, start=1):
        labels[d.pop("_ijk")] = body_id
        bodies.append(VoidBody(body_id=body_id, **d))

    slabs = [
        {"depth_from_m": k * grid.cell_m[2], "depth_to_m": (k + 1) * grid.cell_m[2],
         "background_velocity_m_per_ns": float(slab_velocity[k]), "cells_in_median": int(slab_counts[k]),
         "fresnel_width_m": float(fresnel_width[k]), "resolution_m": float(resolution[k]),
         "noise_floor_from_misfit_ns_per_m": float(sigma_time[k]),
         "threshold_ns_per_m": float(slab_threshold[k])}
        for k in range(len(slab_bg))
    ]
    parameters = {
        "threshold_sigmas": sigmas,
        "threshold_sigmas_rule": ("given" if options.sigmas is not None else
                                  "expected Euler characteristic of a smooth Gaussian field "
                                  "(Worsley et al. 1996): 2 E[chi](u) = false_alarm"),
        "false_alarm": options.false_alarm, "smoothness_fwhm_m": (fwhm * np.asarray(grid.cell_m)).tolist(),
        "resels": list(resels),
        "min_cells_for_resolution": options.min_cells_for_resolution,
        "sigma_model_ns_per_m": sigma_model, "rms_ns": float(rms_ns),
        "path_length_m": float(path_length_m), "frequency_mhz": float(frequency_mhz),
        "connectivity": "faces, edges and corners (26 neighbours)",
        "threshold_rule": ("per depth slab, the threshold in robust standard deviations times the larger "
                           "of the anomaly's robust spread and the RMS misfit over the resolution"),
        "extent_rule": "each group of cells beyond the threshold cut at half its peak anomaly",
        "resolution_rule": (f"the wider of the first Fresnel zone and {options.min_cells_for_resolution:g} cells; "
                            "a body whose largest extent (horizontal span or height) is below it is "
                            "unresolved"),
        "covered_ground_cells": int(covered.sum()), "ground_cells": int(ground.sum()),
    }
    notes = []
    if not covered.any():
        notes.append("no ground cell is crossed by a ray: the background is the median of all ground cells")
    return VoidAnalysis(grid=grid, labels=labels, background_slowness_ns_per_m=background,
                        anomaly_ns_per_m=anomaly, bodies=tuple(bodies), slabs=slabs,
                        parameters=parameters, notes=tuple(notes))


#: Columns of ``voids.csv`` (the same keys in ``voids.json``).
VOID_TABLE_COLUMNS = (
    "body_id", "status", "fill", "volume_m3", "centroid_x_m", "centroid_y_m", "centroid_z_m",
    "bbox_min_x_m", "bbox_min_y_m", "bbox_min_z_m", "bbox_max_x_m", "bbox_max_y_m", "bbox_max_z_m",
    "roof_elevation_m", "roof_depth_m", "roof_thickness_m", "nearest_work", "standoff_m",
    "roof_below_work_m", "roof_below_work_name", "span_m", "width_m", "length_m",
    "equivalent_diameter_m", "resolution_m", "mean_velocity_m_per_ns", "extreme_velocity_m_per_ns",
    "background_velocity_m_per_ns", "peak_anomaly_ns_per_m", "threshold_ns_per_m",
    "ray_covered_fraction", "mean_ray_count", "confidence", "confidence_reason",
    "tier", "strength_noise_floors", "size_up_to_m", "lower_bound", "size_words",
)

#: Why a slow body's extent is a lower bound, in words (the reason given beside every such body).
SLOW_BODY_REASON = ("first arrivals go around a slower body, so a travel-time cube sees only part "
                    "of it (Wielandt 1987, from memory)")


def body_tier(status: str) -> str:
    """Tier of a body (column ``tier``): ``void`` when resolved, else ``unresolved_body``."""
    return TIER_VOID if status == STATUS_RESOLVED else TIER_UNRESOLVED_BODY


def _m3_words(volume_m3: float) -> str:
    return f"{volume_m3:.0f} m^3" if volume_m3 >= 10 else f"{volume_m3:.1f} m^3"


def size_words(tier: str, fill: str, volume_m3: float, span_m: float, resolution_m: float) -> str:
    """The size of a body or indication in words, with what it means.

    A void (resolved, air) is "about" its cut volume; an unresolved body or a
    weak indication is "up to about" the resolution across, since anything
    smaller than the resolution shows at about the resolution's size; a
    water- or clay-filled one is "at least" what the cube shows, because
    first arrivals go around slow bodies (:data:`SLOW_BODY_REASON`), and may
    be larger.

    Parameters
    ----------
    tier : {"void", "unresolved_body", "weak_indication"}
    fill : {"air", "water_or_clay"}
    volume_m3, span_m, resolution_m : float
        Volume cut from the cube (m^3), largest horizontal width (m) and the
        resolution at its depth (m).
    """
    if tier == TIER_VOID:
        if fill == FILL_AIR:
            return (f"about {_m3_words(volume_m3)}, {span_m:.0f} m across, as cut from the cube at half "
                    "its peak anomaly")
        return (f"at least {_m3_words(volume_m3)} and {span_m:.0f} m across, and may be larger: "
                + SLOW_BODY_REASON)
    up_to = f"up to about {resolution_m:.0f} m across (smaller than the resolution of {resolution_m:.1f} m here"
    if fill == FILL_AIR:
        return up_to + ", so its size cannot be measured)"
    return (up_to + " as it shows); as a slow body it may be larger than it shows: " + SLOW_BODY_REASON)


def void_table_rows(bodies) -> list[dict]:
    """One flat dictionary per body with the keys of :data:`VOID_TABLE_COLUMNS`.

    Distances to planned works are None when the site has none (or, for
    ``roof_below_work_m``, when no work lies over the body in plan).
    ``tier`` is :func:`body_tier` of the status; ``strength_noise_floors``
    the peak anomaly over the noise floor of its depth slab (None when the
    body carries no noise floor); ``size_up_to_m`` the resolution at its
    depth for an unresolved body (None for a void); ``lower_bound`` true for
    a slow body; ``size_words`` from :func:`size_words`.
    A body refined against the picks adds the key ``refined``
    (:meth:`reconstruct.interpret.refine.RefinedBody.as_dict`).
    """
    rows = []
    for b in bodies:
        row = {"body_id": b.body_id, "status": b.status, "fill": b.fill, "volume_m3": b.volume_m3}
        for prefix, values in (("centroid", b.centroid_m), ("bbox_min", b.bbox_min_m),
                               ("bbox_max", b.bbox_max_m)):
            for axis, value in zip("xyz", values):
                row[f"{prefix}_{axis}_m"] = value
        tier = body_tier(b.status)
        derived = {"tier": tier, "lower_bound": b.fill == FILL_WATER_OR_CLAY,
                   "strength_noise_floors": abs(b.peak_anomaly_ns_per_m) / b.noise_floor_ns_per_m,
                   "size_up_to_m": b.resolution_m if tier != TIER_VOID else math.nan,
                   "size_words": size_words(tier, b.fill, b.volume_m3, b.span_m, b.resolution_m)}
        for key in VOID_TABLE_COLUMNS[13:]:
            value = derived[key] if key in derived else getattr(b, key)
            row[key] = None if isinstance(value, float) and not math.isfinite(value) else value
        if b.refined is not None:  # the fit against the picks, for voids.json; not a column of voids.csv
            row["refined"] = b.refined.as_dict()
        rows.append(row)
    return rows
