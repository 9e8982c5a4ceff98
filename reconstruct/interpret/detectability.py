"""What the cube could and could not show: weak indications, detectability under each planned work,
and what a default detection threshold would have reported.

A short or empty void table must never read as "no voids": it holds only what
passed the detection threshold where rays went. This module says what lies
below that line and where the survey was blind.

Tiers (docs/glossary.md; :data:`reconstruct.interpret.bodies.TIER_VOID` and
its siblings): a *void* is a resolved body; an *unresolved body* passed the
detection threshold but is smaller than the resolution; a *weak indication*
is a group of cells whose anomaly passes the noise floor but not the
detection threshold. Unresolved bodies and weak indications are the
*indications*. Every tier carries one strength figure,
``strength_noise_floors``: the peak anomaly in units of the noise floor.

Noise floor
-----------
Per depth slab, the detection threshold over its number of robust standard
deviations: the larger of the anomaly's robust spread and the slowness
contrast whose delay across the resolution equals the RMS misfit
(:func:`reconstruct.interpret.bodies.find_voids`, step 3). One noise floor
is the smallest anomaly the data can tell from noise at all.

Weak indications
----------------
Cells crossed by rays whose anomaly, of one sign, passes one noise floor are
joined through faces, edges and corners; a group that touches no body and
whose peak reaches :data:`WEAK_INDICATION_FLOORS` noise floors (2: a single
cell of Gaussian noise passes two standard deviations, either sign, with a
chance of 4.6 %, any normal table) but not the detection threshold is cut at
half its peak, like a body, and each piece is a weak indication. The number
of such groups that pure noise of the cube's smoothness would give is stated
beside them (the expected Euler characteristic,
:func:`reconstruct.interpret.bodies.expected_noise_clusters`).

Zone of influence of a planned work
-----------------------------------
The ground under the work's plan footprint grown by :data:`ZONE_MARGIN_M`
(5 m) on every side, from the ground surface down to :data:`ZONE_DEPTH_M`
(30 m) below the lower of the ground and the work's lowest point: the same
rule and defaults as the planner's target volume
(``plan.assess.coverage.target_mask``), so that a plan and its survey are
judged on the same ground (common practice, no published source). A ground
cell of the zone is *covered* when at least one ray crosses it (``ray_count``).

Smallest detectable body
------------------------
At a depth slab with resolution ``w`` (the first Fresnel zone width,
Williamson 1991), detection threshold ``T`` (ns/m) and background slowness
``s0``, a sphere of diameter ``d`` and slowness ``s1`` is taken to show in
the cube with the peak anomaly

    a(d) = dS(d) * F3(d / (2 sigma)),   sigma = w / sqrt(8 ln 2)

The second factor is the centre value of the sphere blurred by an isotropic
Gaussian point spread whose full width at half maximum is the resolution
``w``: the share of a 3D Gaussian within radius ``d / 2``, the distribution
function of the chi distribution with 3 degrees of freedom,
``F3(x) = erf(x / sqrt 2) - sqrt(2 / pi) x exp(-x^2 / 2)``. A first arrival
averages the slowness over its Fresnel volume (Spetzler & Snieder 2004), so
the model cannot be sharper than ``w``; modelling that blur as a Gaussian of
FWHM ``w`` is our choice (no published source), and a cautious one: on the
demo site (invented truth) it predicts a peak of 1.7 ns/m for the 147 m^3
air-filled cavity that the bent-ray inversion shows at 4.5 ns/m, and
0.38 ns/m for the 198 m^3 clay-filled pocket that it shows at 0.57 ns/m, so
the smallest detectable sizes it gives are, if anything, too large.

The first factor is the contrast: ``|s1 - s0|`` for an air-filled void
(first arrivals run through a fast body). A slow body is avoided: the first arrival goes around it as soon as
the detour is quicker than the way through, so its delay is at most ``s0``
times the detour around a sphere centred between transmitter and receiver
(``L`` apart, the median pick distance; tangents plus arc, plain geometry;
the body midway gives the shortest detour, the cautious case), and
``dS(d) = min(s1 - s0, s0 * detour(d) / d)``. The smallest detectable
diameter solves ``a(d) = T``; a slab where no ``d`` below ``L`` reaches ``T``
detects none. Air-filled voids take the speed of light in air; slow bodies
:data:`SLOW_FILL_VELOCITY_M_PER_NS` (0.06 m/ns, clay; water, at 0.033 m/ns,
gives a larger contrast, so clay is the cautious choice). For a zone the
largest of these diameters over the depth slabs of its covered cells is
reported: a void smaller than that could be missed somewhere in the
covered part.

Threshold override
------------------
When the threshold was given (``--threshold-sigmas``) or derived from a
false-alarm chance other than the default, the body search is run again
with the default options and both counts are recorded.

References
----------
Williamson, P. R. (1991). A guide to the limits of resolution imposed by
    scattering in ray tomography. Geophysics, 56(2), 202-207.
Spetzler, J., & Snieder, R. (2004). The Fresnel volume and transmitted
    waves. Geophysics, 69(3), 653-663.
Wielandt, E. (1987). On the validity of the ray approximation for
    interpreting delay times. In Seismic Tomography (ed. Nolet), Reidel
    (from memory): slow bodies are avoided by first arrivals and heal.
Davis, J. L., & Annan, A. P. (1989). Ground-penetrating radar for
    high-resolution mapping of soil and rock stratigraphy. Geophysical
    Prospecting, 37(5), 531-551 (velocities of clay, about 0.06 m/ns, and
    fresh water, 0.033 m/ns; from memory).
Worsley, K. J., et al. (1996). A unified statistical approach for
    determining significant signals in images of cerebral activation.
    Human Brain Mapping, 4(1), 58-73.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import SimpleNamespace

import numpy as np
from scipy import ndimage

from reconstruct.errors import InputError
from reconstruct.interpret.bodies import (
    FILL_AIR,
    FILL_WATER_OR_CLAY,
    STATUS_RESOLVED,
    TIER_WEAK_INDICATION,
    VoidOptions,
    _column_tops_m,
    _plan_extent,
    _work_points_m,
    _work_relations,
    depth_below_ground_m,
    expected_noise_clusters,
    find_voids,
    size_words,
)
from reconstruct.io.site import work_footprint
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.model.grid import Grid, ground_top_m

__all__ = [
    "ZONE_MARGIN_M",
    "ZONE_DEPTH_M",
    "WEAK_INDICATION_FLOORS",
    "SLOW_FILL_VELOCITY_M_PER_NS",
    "WeakIndication",
    "WorkDetectability",
    "ThresholdOverride",
    "Detectability",
    "blurred_peak_fraction",
    "detour_around_sphere_m",
    "smallest_detectable_diameter_m",
    "zone_of_influence",
    "find_weak_indications",
    "threshold_override",
    "assess_detectability",
    "WEAK_INDICATION_COLUMNS",
    "weak_indication_rows",
    "detectability_rows",
]

#: Plan margin around a planned work's footprint, m (the planner's works buffer; common practice,
#: no published source).
ZONE_MARGIN_M = 5.0
#: Depth of the zone of influence below the lower of the ground and the work, m (the planner's
#: depth of interest; common practice, no published source).
ZONE_DEPTH_M = 30.0
#: Peak, in noise floors, that a weak indication must reach (a Gaussian cell passes 2 sigma, either
#: sign, with a chance of 4.6 %).
WEAK_INDICATION_FLOORS = 2.0
#: Velocity of the fill of a slow body, m/ns: clay (Davis & Annan 1989, from memory); the cautious
#: choice between clay and fresh water (0.033 m/ns).
SLOW_FILL_VELOCITY_M_PER_NS = 0.06


def _sphere_m3(diameter_m: float) -> float:
    return math.pi * diameter_m**3 / 6.0 if math.isfinite(diameter_m) else math.inf


def _m3_text(volume_m3: float) -> str:
    return f"{volume_m3:.0f} m^3" if volume_m3 >= 10 else f"{volume_m3:.1f} m^3"


@dataclass(frozen=True)
class WeakIndication:
    """A group of cells past the noise floor but short of the detection threshold; lengths in m.

    ``peak_anomaly_ns_per_m`` is signed (negative: faster than the background,
    fill ``air``); ``noise_floor_ns_per_m`` and ``threshold_ns_per_m`` are
    those of the depth slab of the peak; ``nearest_work``, ``standoff_m``,
    ``roof_below_work_m`` and ``roof_below_work_name`` as for a body (to a
    blast pattern's holes, collar to toe, when they are known).
    """

    indication_id: int
    fill: str
    n_cells: int
    volume_m3: float
    centroid_m: tuple
    bbox_min_m: tuple
    bbox_max_m: tuple
    roof_elevation_m: float
    roof_depth_m: float
    span_m: float
    resolution_m: float
    peak_anomaly_ns_per_m: float
    noise_floor_ns_per_m: float
    threshold_ns_per_m: float
    mean_ray_count: float
    nearest_work: str | None
    standoff_m: float
    roof_below_work_m: float = math.inf
    roof_below_work_name: str | None = None

    @property
    def tier(self) -> str:
        return TIER_WEAK_INDICATION

    @property
    def strength_noise_floors(self) -> float:
        """Peak anomaly in units of the noise floor (dimensionless)."""
        return abs(self.peak_anomaly_ns_per_m) / self.noise_floor_ns_per_m

    @property
    def lower_bound(self) -> bool:
        return self.fill == FILL_WATER_OR_CLAY

    @property
    def size_words(self) -> str:
        return size_words(self.tier, self.fill, self.volume_m3, self.span_m, self.resolution_m)


@dataclass(frozen=True)
class WorkDetectability:
    """What the survey could have found in the zone of influence of one planned work.

    Diameters are the largest over the depth slabs of the zone's covered
    cells (m), infinite when no body of that fill could pass the threshold
    there, NaN when no cell of the zone is covered.
    """

    work: str
    kind: str
    ground_cells: int
    covered_cells: int
    smallest_void_across_m: float
    smallest_slow_body_across_m: float
    body_ids: tuple
    indication_ids: tuple
    words: str

    @property
    def covered_fraction(self) -> float:
        return self.covered_cells / self.ground_cells if self.ground_cells else 0.0


@dataclass(frozen=True)
class ThresholdOverride:
    """Whether the user set the detection threshold, and what the default would have reported."""

    overridden: bool
    threshold_sigmas: float
    false_alarm: float
    default_threshold_sigmas: float
    default_false_alarm: float
    this_run: dict
    default_run: dict | None
    words: str

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Detectability:
    """Result of :func:`assess_detectability`, in memory."""

    weak_indications: tuple
    labels: np.ndarray  # (nx, ny, nz) int32: indication_id, 0 for none
    works: tuple
    expected_from_noise: float
    method: dict
    threshold_override: ThresholdOverride | None = None
    notes: tuple = field(default=())


def blurred_peak_fraction(diameter_m, resolution_m):
    """Centre value of a unit sphere blurred by an isotropic Gaussian of FWHM ``resolution_m`` (0..1).

    ``F3(d / (2 sigma))`` with ``sigma = w / sqrt(8 ln 2)`` and ``F3`` the
    distribution function of the chi distribution with 3 degrees of freedom
    (the share of a 3D standard Gaussian within a radius):
    ``F3(x) = erf(x / sqrt 2) - sqrt(2 / pi) x exp(-x^2 / 2)``.
    """
    from scipy.special import erf

    sigma = float(resolution_m) / math.sqrt(8.0 * math.log(2.0))
    x = 0.5 * np.asarray(diameter_m, dtype=float) / sigma
    return erf(x / math.sqrt(2.0)) - math.sqrt(2.0 / math.pi) * x * np.exp(-0.5 * x * x)


def detour_around_sphere_m(radius_m: float, path_length_m: float) -> float:
    """Extra length of the shortest path around a sphere centred midway between two points, m.

    The points are ``L = path_length_m`` apart and the sphere, of radius
    ``r < L / 2``, sits midway on the line between them. In the plane
    through both points and the centre the shortest path runs along the
    tangents from each point (``sqrt(a^2 - r^2)`` each, ``a = L / 2``) and
    the arc between the tangent points (angle ``pi - 2 arccos(r / a)``):

        detour = 2 sqrt(a^2 - r^2) + r (pi - 2 arccos(r / a)) - L

    Plain geometry (the shortest path around a convex obstacle wraps it).
    """
    a = 0.5 * float(path_length_m)
    r = float(radius_m)
    if not (0.0 <= r < a):
        raise ValueError(f"radius_m must be >= 0 and below half the path length (got {r!r}, L = {path_length_m!r})")
    return 2.0 * math.sqrt(a * a - r * r) + r * (math.pi - 2.0 * math.acos(r / a)) - 2.0 * a


def _shown_anomaly_ns_per_m(diameter_m, fill_slowness, background_slowness, resolution_m, path_length_m):
    """Peak anomaly (magnitude, ns/m) that a sphere of ``diameter_m`` shows under the module's rule."""
    contrast = abs(fill_slowness - background_slowness)
    if fill_slowness > background_slowness and diameter_m < path_length_m:
        detour = detour_around_sphere_m(0.5 * diameter_m, path_length_m)
        contrast = min(contrast, background_slowness * detour / diameter_m)
    return contrast * float(blurred_peak_fraction(diameter_m, resolution_m))


def smallest_detectable_diameter_m(threshold_ns_per_m: float, background_velocity_m_per_ns: float,
                                   resolution_m: float, path_length_m: float, fill: str) -> float:
    """Smallest diameter (m) of a sphere of the given fill that passes the detection threshold.

    Solves ``a(d) = T`` for the shown anomaly ``a`` of the module docstring
    (monotone in ``d``) by bisection to 1 mm; infinite when even a sphere as
    wide as the path length stays below the threshold (beyond that the
    sphere would swallow the nodes), or when the fill is no faster (air) or
    slower (water or clay) than the background.

    Parameters
    ----------
    threshold_ns_per_m : float
        Detection threshold, ns/m, > 0.
    background_velocity_m_per_ns : float
        Background velocity of the depth slab, m/ns.
    resolution_m : float
        Resolution (first Fresnel zone width) at that depth, m.
    path_length_m : float
        Typical transmitter-receiver distance, m.
    fill : {"air", "water_or_clay"}
    """
    for name, value in (("threshold_ns_per_m", threshold_ns_per_m), ("resolution_m", resolution_m),
                        ("background_velocity_m_per_ns", background_velocity_m_per_ns),
                        ("path_length_m", path_length_m)):
        if not (math.isfinite(value) and value > 0):
            raise InputError(f"{name} must be finite and > 0 (got {value!r})")
    s0 = 1.0 / background_velocity_m_per_ns
    s1 = 1.0 / (AIR_VELOCITY_M_PER_NS if fill == FILL_AIR else SLOW_FILL_VELOCITY_M_PER_NS)
    if (fill == FILL_AIR and s1 >= s0) or (fill != FILL_AIR and s1 <= s0):
        return math.inf
    top = path_length_m * (1.0 - 1e-9)

    def shown(d):
        return _shown_anomaly_ns_per_m(d, s1, s0, resolution_m, path_length_m)

    if shown(top) < threshold_ns_per_m:
        return math.inf
    low, high = 0.0, top
    while high - low > 1e-3:
        middle = 0.5 * (low + high)
        low, high = (middle, high) if shown(middle) < threshold_ns_per_m else (low, middle)
    return high


def zone_of_influence(grid: Grid, ground, work, margin_m: float = ZONE_MARGIN_M,
                      depth_m: float = ZONE_DEPTH_M) -> np.ndarray:
    """Ground cells of the zone of influence of a planned work (module docstring), (nx, ny, nz) bool."""
    ground = np.asarray(ground, dtype=bool)
    x2, y2 = np.meshgrid(grid.centres_m(0), grid.centres_m(1), indexing="ij")
    near, lowest_m = work_footprint(work, x2, y2, margin_m)
    bottom = np.minimum(ground_top_m(grid, ground), lowest_m) - depth_m
    with np.errstate(invalid="ignore"):
        return ground & near[:, :, None] & (grid.centres_m(2)[None, None, :] >= bottom[:, :, None])


def _slab_arrays(grid: Grid, analysis, surface_m):
    """Per cell: slab index; per slab: noise floor, threshold (ns/m), resolution (m), background (m/ns)."""
    slabs = analysis.slabs
    sigmas = float(analysis.parameters["threshold_sigmas"])
    threshold = np.array([s["threshold_ns_per_m"] for s in slabs], dtype=float)
    depth = depth_below_ground_m(grid, surface_m)
    index = np.minimum(np.floor(np.maximum(depth, 0.0) / grid.cell_m[2]).astype(np.int64), len(slabs) - 1)
    return index, dict(noise_floor=threshold / sigmas, threshold=threshold,
                       resolution=np.array([s["resolution_m"] for s in slabs], dtype=float),
                       background=np.array([s["background_velocity_m_per_ns"] for s in slabs], dtype=float))


def _indication_from_cells(grid: Grid, ijk, anomaly, slab_index, per_slab, context):
    """A :class:`WeakIndication` (id 0) from its cells; ``context`` holds surface, rays, works."""
    magnitude = np.abs(anomaly[ijk])
    peak_at = int(np.argmax(magnitude))
    peak_cell = tuple(int(a[peak_at]) for a in ijk)
    k = int(slab_index[peak_cell])
    cell = np.asarray(grid.cell_m)
    centres = np.asarray(grid.origin_m) + (np.stack(ijk, axis=1) + 0.5) * cell
    tops = _column_tops_m(grid, ijk)
    roof_column = max(tops, key=lambda c: tops[c])
    span, _, _ = _plan_extent(grid, list(tops))
    nearest, standoff, below_name, below = _work_relations(grid, ijk, tops, context["works_points"])
    return WeakIndication(
        indication_id=0, fill=FILL_AIR if anomaly[peak_cell] < 0 else FILL_WATER_OR_CLAY,
        n_cells=int(ijk[0].size), volume_m3=float(ijk[0].size * np.prod(cell)),
        centroid_m=tuple(float(v) for v in centres.mean(axis=0)),
        bbox_min_m=tuple(float(v) for v in centres.min(axis=0) - cell / 2),
        bbox_max_m=tuple(float(v) for v in centres.max(axis=0) + cell / 2),
        roof_elevation_m=float(tops[roof_column]),
        roof_depth_m=float(max(context["surface_m"][roof_column] - tops[roof_column], 0.0)),
        span_m=float(span), resolution_m=float(per_slab["resolution"][k]),
        peak_anomaly_ns_per_m=float(anomaly[peak_cell]),
        noise_floor_ns_per_m=float(per_slab["noise_floor"][k]),
        threshold_ns_per_m=float(per_slab["threshold"][k]),
        mean_ray_count=float(np.asarray(context["ray_count"])[ijk].mean()),
        nearest_work=nearest, standoff_m=float(standoff), roof_below_work_m=float(below),
        roof_below_work_name=below_name)


def find_weak_indications(grid: Grid, analysis, ground, ray_count, surface_m, planned_works=(),
                          floors: float = WEAK_INDICATION_FLOORS):
    """Weak indications of a void analysis (module docstring).

    Parameters
    ----------
    grid : Grid
    analysis : reconstruct.interpret.bodies.VoidAnalysis
    ground : ndarray of bool (nx, ny, nz)
    ray_count : ndarray (nx, ny, nz)
    surface_m : ndarray (nx, ny)
        Ground elevation at the column centres, m.
    planned_works : sequence of reconstruct.io.site.PlannedWork
    floors : float
        Peak, in noise floors, a weak indication must reach (default 2).

    Returns
    -------
    (tuple of WeakIndication, ndarray of int32)
        The indications, strongest first, numbered from 1; and the cube of
        their ids (0 elsewhere).
    """
    if not (math.isfinite(floors) and floors >= 1.0):
        raise InputError(f"floors must be a number >= 1 (got {floors!r})")
    slab_index, per_slab = _slab_arrays(grid, analysis, surface_m)
    anomaly = np.nan_to_num(np.asarray(analysis.anomaly_ns_per_m, dtype=float))
    covered = np.asarray(ground, dtype=bool) & (np.asarray(ray_count) > 0)
    floor = per_slab["noise_floor"][slab_index]
    threshold = per_slab["threshold"][slab_index]
    structure = ndimage.generate_binary_structure(3, 3)
    taken = ndimage.binary_dilation(np.asarray(analysis.labels) > 0, structure=structure)
    cell = 0.5 * float(np.min(grid.cell_m[:2]))
    context = dict(surface_m=np.asarray(surface_m), ray_count=ray_count,
                   works_points=[(w.name, _work_points_m(w, cell)) for w in planned_works])
    found = []
    for sign in (-1.0, 1.0):
        magnitude = np.where(covered, sign * anomaly, 0.0)
        component, _ = ndimage.label(magnitude >= floor, structure=structure)
        for k, box in enumerate(ndimage.find_objects(component), start=1):
            inside = component[box] == k
            if taken[box][inside].any():
                continue  # the fringe of a body, not an indication of its own
            pieces, n_pieces = ndimage.label(inside & (magnitude[box] >= 0.5 * magnitude[box][inside].max()),
                                             structure=structure)
            offset = [s.start for s in box]
            for piece in range(1, n_pieces + 1):
                ijk = tuple(a + o for a, o in zip(np.nonzero(pieces == piece), offset))
                ratio = magnitude[ijk] / floor[ijk]
                if ratio.max() >= floors and np.all(magnitude[ijk] < threshold[ijk]):
                    found.append((_indication_from_cells(grid, ijk, sign * magnitude, slab_index, per_slab,
                                                         context), ijk))
    found.sort(key=lambda pair: (-pair[0].strength_noise_floors, pair[0].centroid_m))
    labels = np.zeros(grid.shape, dtype=np.int32)
    indications = []
    for number, (indication, ijk) in enumerate(found, start=1):
        labels[ijk] = number
        indications.append(WeakIndication(**{**indication.__dict__, "indication_id": number}))
    return tuple(indications), labels


def _count_words(counts: dict) -> str:
    def n(count, one, many):
        return f"{count} {one if count == 1 else many}"

    return (f"{n(counts['voids'], 'void', 'voids')}, {n(counts['unresolved_bodies'], 'unresolved body', 'unresolved bodies')}"
            f" and {n(counts['weak_indications'], 'weak indication', 'weak indications')}")


def _counts(bodies, weak_indications) -> dict:
    resolved = sum(b.status == STATUS_RESOLVED for b in bodies)
    return {"voids": resolved, "unresolved_bodies": len(bodies) - resolved, "weak_indications": len(weak_indications)}


def threshold_override(inversion, analysis, weak_indications) -> ThresholdOverride:
    """Whether the detection threshold was set by the user; if so, the counts of a default run.

    ``inversion`` is the :class:`reconstruct.interpret.folder.InversionFolder`
    the analysis came from; the default run searches the same cube again with
    :class:`~reconstruct.interpret.bodies.VoidOptions` defaults (and finds its
    weak indications), writing nothing.
    """
    p = analysis.parameters
    default = VoidOptions()
    used, false_alarm = float(p["threshold_sigmas"]), float(p["false_alarm"])
    given = p.get("threshold_sigmas_rule") == "given"
    this_run = _counts(analysis.bodies, weak_indications)
    if not given and false_alarm == default.false_alarm:
        return ThresholdOverride(
            overridden=False, threshold_sigmas=used, false_alarm=false_alarm, default_threshold_sigmas=used,
            default_false_alarm=default.false_alarm, this_run=this_run, default_run=None,
            words=(f"The detection threshold is the default one: {used:.2f} robust standard deviations of the "
                   f"anomaly, for a false-alarm chance of {100 * default.false_alarm:g} %."))
    again = find_voids(
        inversion.grid, inversion.velocity_m_per_ns, inversion.ground, inversion.ray_count, inversion.surface_m,
        frequency_mhz=inversion.site.rock.antenna_frequency_mhz, path_length_m=inversion.path_length_m,
        rms_ns=inversion.rms_ns, planned_works=inversion.site.planned_works, options=default)
    weak_again, _ = find_weak_indications(inversion.grid, again, inversion.ground, inversion.ray_count,
                                          inversion.surface_m, inversion.site.planned_works)
    default_run = _counts(again.bodies, weak_again)
    how = (f"given as {used:g} robust standard deviations" if given
           else f"derived from a false-alarm chance of {100 * false_alarm:g} %")
    k0 = float(again.parameters["threshold_sigmas"])
    return ThresholdOverride(
        overridden=True, threshold_sigmas=used, false_alarm=false_alarm, default_threshold_sigmas=k0,
        default_false_alarm=default.false_alarm, this_run=this_run, default_run=default_run,
        words=(f"The detection threshold was set by the user ({how}): {used:.2f} robust standard deviations of "
               f"the anomaly, where the default (false-alarm chance {100 * default.false_alarm:g} %) is {k0:.2f}. "
               f"This run reports {_count_words(this_run)}; with the default threshold the same cube gives "
               f"{_count_words(default_run)}."))


def _work_words(name, ground_cells, covered_cells, void_d, slow_d, body_ids, indication_ids) -> str:
    """The sentence of one planned work (module docstring); never a verdict on the ground."""
    if ground_cells == 0:
        return (f"The zone of influence of {name} holds no ground cell of the model box: this survey says "
                "nothing about voids there.")
    if covered_cells == 0:
        return (f"No ray crosses the zone of influence of {name} ({ground_cells} ground cells): this survey "
                "cannot tell whether voids lie there; 100 % not covered.")
    covered = 100.0 * covered_cells / ground_cells
    share = f"the covered {covered:.0f} % of this zone; {100.0 - covered:.0f} % not covered"
    if math.isfinite(void_d):
        limit = f"no void larger than {_m3_text(_sphere_m3(void_d))} (about {void_d:.1f} m across) found in {share}"
    else:
        limit = (f"the detection threshold here exceeds the contrast of an air-filled void, so no void of any size "
                 f"could have been found in {share}")
    found = []
    for ids, one, many in ((body_ids, "body", "bodies"), (indication_ids, "weak indication", "weak indications")):
        if ids:
            found.append(f"{one if len(ids) == 1 else many} " + ", ".join(str(i) for i in ids))
    sentence = (limit[0].upper() + limit[1:] + ".") if not found else (
        f"In this zone: {'; '.join(found)} (see the tables). Elsewhere, {limit}.")
    if math.isfinite(slow_d):
        slow = (f" A water- or clay-filled body would show only if larger than about {_m3_text(_sphere_m3(slow_d))} "
                f"({slow_d:.0f} m across), and then only as a lower bound of its extent.")
    else:
        slow = " A water- or clay-filled body of any size could be missed here: first arrivals go around it."
    return sentence + slow


def _work_entry(grid, work, zone, covered, labels, indication_labels, slab_index, smallest) -> WorkDetectability:
    """The detectability of one planned work from its zone (bool cube) and the per-slab smallest diameters."""
    in_covered = zone & covered
    slabs = np.unique(slab_index[in_covered])
    void_d = float(smallest["air"][slabs].max()) if slabs.size else math.nan
    slow_d = float(smallest["slow"][slabs].max()) if slabs.size else math.nan
    body_ids = tuple(int(b) for b in np.unique(labels[zone]) if b > 0)
    indication_ids = tuple(int(i) for i in np.unique(indication_labels[zone]) if i > 0)
    ground_cells, covered_cells = int(zone.sum()), int(in_covered.sum())
    return WorkDetectability(
        work=work.name, kind=work.kind, ground_cells=ground_cells, covered_cells=covered_cells,
        smallest_void_across_m=void_d, smallest_slow_body_across_m=slow_d, body_ids=body_ids,
        indication_ids=indication_ids,
        words=_work_words(work.name, ground_cells, covered_cells, void_d, slow_d, body_ids, indication_ids))


#: The zone assessed when the site names no planned work: every ground cell of the model box.
WHOLE_MODEL = SimpleNamespace(name="the whole model box (the site names no planned work)", kind="whole_model")


def assess_detectability(inversion, analysis, *, margin_m: float = ZONE_MARGIN_M, depth_m: float = ZONE_DEPTH_M,
                         floors: float = WEAK_INDICATION_FLOORS) -> Detectability:
    """Weak indications, detectability per planned work and the threshold record of one analysis.

    Parameters
    ----------
    inversion : reconstruct.interpret.folder.InversionFolder
        The cube, its coverage and the site (from a folder or from memory).
    analysis : reconstruct.interpret.bodies.VoidAnalysis
        The body search of that cube.
    margin_m, depth_m : float
        Zone of influence: plan margin around each work and depth below it, m.
    floors : float
        Peak, in noise floors, that a weak indication must reach.
    """
    for name, value in (("margin_m", margin_m), ("depth_m", depth_m)):
        if not (math.isfinite(value) and value >= 0):
            raise InputError(f"{name} must be a number >= 0 (got {value!r})")
    grid, works = inversion.grid, inversion.site.planned_works
    weak, indication_labels = find_weak_indications(grid, analysis, inversion.ground, inversion.ray_count,
                                                    inversion.surface_m, works, floors)
    slab_index, per_slab = _slab_arrays(grid, analysis, inversion.surface_m)
    smallest = {key: np.array([smallest_detectable_diameter_m(t, v, w, inversion.path_length_m, fill)
                               for t, v, w in zip(per_slab["threshold"], per_slab["background"],
                                                  per_slab["resolution"])])
                for key, fill in (("air", FILL_AIR), ("slow", FILL_WATER_OR_CLAY))}
    ground = np.asarray(inversion.ground, dtype=bool)
    covered = ground & (np.asarray(inversion.ray_count) > 0)
    entries = tuple(_work_entry(grid, w, zone_of_influence(grid, inversion.ground, w, margin_m, depth_m), covered,
                                analysis.labels, indication_labels, slab_index, smallest) for w in works)
    if not works:  # no planned work: the whole ground of the model box, so that an empty table still says how much
        entries = (_work_entry(grid, WHOLE_MODEL, ground, covered, analysis.labels, indication_labels, slab_index,
                               smallest),)
    p = analysis.parameters
    sigma_model = float(p["sigma_model_ns_per_m"])
    u = floors * float(per_slab["noise_floor"].min()) / sigma_model if sigma_model > 0 else math.inf
    expected = 2.0 * max(expected_noise_clusters(p["resels"], u), 0.0) if math.isfinite(u) else 0.0
    method = {
        "zone_of_influence": (f"the ground under each planned work's plan footprint grown by {margin_m:g} m, from "
                              f"the surface down to {depth_m:g} m below the lower of the ground and the work"),
        "zone_margin_m": margin_m, "zone_depth_m": depth_m,
        "covered": "a ground cell crossed by at least one ray",
        "smallest_detectable_rule": ("a sphere shows with its contrast times its centre value after a Gaussian "
                                     "blur as wide (FWHM) as the resolution; a slow body's contrast is capped by "
                                     "the detour around it; the smallest diameter whose shown anomaly reaches the "
                                     "detection threshold, the largest over the zone's covered depths"),
        "slow_fill_velocity_m_per_ns": SLOW_FILL_VELOCITY_M_PER_NS,
        "weak_indication_rule": (f"cells crossed by rays past one noise floor, joined, touching no body, peaking at "
                                 f"{floors:g} noise floors or more but below the detection threshold, cut at half "
                                 "their peak"),
        "weak_indication_floors": floors,
        "weak_indications_expected_from_noise": expected,
        "weak_indications_words": (
            f"{len(weak)} weak indication{'' if len(weak) == 1 else 's'} past {floors:g} noise floors but below "
            f"the detection threshold; pure noise of this cube's smoothness would give about {expected:.1f}. "
            "A weak indication is a place to look again (another layout, a probe hole), not a finding; its "
            "size is not known beyond 'up to about the resolution'."),
        "per_depth_slab": [{"depth_from_m": s["depth_from_m"], "depth_to_m": s["depth_to_m"],
                            "noise_floor_ns_per_m": float(f), "smallest_void_across_m": _finite(a),
                            "smallest_slow_body_across_m": _finite(b)}
                           for s, f, a, b in zip(analysis.slabs, per_slab["noise_floor"], smallest["air"],
                                                 smallest["slow"])],
    }
    notes = () if works else ("the site has no planned works: detectability is given for the whole ground of "
                              "the model box instead of a zone of influence",)
    return Detectability(weak_indications=weak, labels=indication_labels, works=entries, expected_from_noise=expected,
                         method=method, threshold_override=threshold_override(inversion, analysis, weak), notes=notes)


def _finite(value):
    return float(value) if value is not None and math.isfinite(value) else None


#: Columns of ``weak_indications.csv`` (the same keys in ``voids.json`` under ``weak_indications``).
WEAK_INDICATION_COLUMNS = (
    "indication_id", "tier", "fill", "centroid_x_m", "centroid_y_m", "centroid_z_m", "bbox_min_x_m", "bbox_min_y_m",
    "bbox_min_z_m", "bbox_max_x_m", "bbox_max_y_m", "bbox_max_z_m", "roof_elevation_m", "roof_depth_m",
    "size_up_to_m", "size_words", "lower_bound", "peak_anomaly_ns_per_m", "noise_floor_ns_per_m",
    "threshold_ns_per_m", "strength_noise_floors", "mean_ray_count", "nearest_work", "standoff_m",
)


def weak_indication_rows(weak_indications) -> list[dict]:
    """One flat dictionary per weak indication with the keys of :data:`WEAK_INDICATION_COLUMNS`."""
    rows = []
    for w in weak_indications:
        row = {"indication_id": w.indication_id, "tier": w.tier, "fill": w.fill}
        for prefix, values in (("centroid", w.centroid_m), ("bbox_min", w.bbox_min_m), ("bbox_max", w.bbox_max_m)):
            for axis, value in zip("xyz", values):
                row[f"{prefix}_{axis}_m"] = value
        row.update(roof_elevation_m=w.roof_elevation_m, roof_depth_m=w.roof_depth_m, size_up_to_m=w.resolution_m,
                   size_words=w.size_words, lower_bound=w.lower_bound, peak_anomaly_ns_per_m=w.peak_anomaly_ns_per_m,
                   noise_floor_ns_per_m=w.noise_floor_ns_per_m, threshold_ns_per_m=w.threshold_ns_per_m,
                   strength_noise_floors=w.strength_noise_floors, mean_ray_count=w.mean_ray_count,
                   nearest_work=w.nearest_work, standoff_m=_finite(w.standoff_m))
        rows.append(row)
    return rows


def detectability_rows(detectability: Detectability) -> list[dict]:
    """The ``detectability`` list of ``voids.json``: one entry per planned work, with its ``words``."""
    rows = []
    for e in detectability.works:
        covered = 100.0 * e.covered_fraction
        rows.append({
            "work": e.work, "kind": e.kind, "ground_cells": e.ground_cells, "covered_cells": e.covered_cells,
            "covered_percent": covered, "not_covered_percent": 100.0 - covered if e.ground_cells else None,
            "smallest_void_across_m": _finite(e.smallest_void_across_m),
            "smallest_void_m3": _finite(_sphere_m3(e.smallest_void_across_m)),
            "smallest_slow_body_across_m": _finite(e.smallest_slow_body_across_m),
            "smallest_slow_body_m3": _finite(_sphere_m3(e.smallest_slow_body_across_m)),
            "body_ids": list(e.body_ids), "indication_ids": list(e.indication_ids), "words": e.words,
        })
    return rows
