"""Recovery tests of a layout with the real inversion: a checkerboard and inserted voids.

Before fieldwork, the question is which voids this layout could show. The
tests here run the processor's own regularised inversion
(:func:`reconstruct.inverse.solver.solve_inverse_problem` with the straight-ray
operator, lambda by the discrepancy principle) on synthetic data made for the
layout:

- **Checkerboard**: cubes of ``checker_size_m`` with velocity alternately
  ``+/- checker_contrast`` around the rock velocity, straight-ray times on a
  grid twice as fine (so that the data are not made with the inversion's own
  operator), Gaussian noise. The recovered pattern is compared with the true
  one by the correlation coefficient over the target cells crossed by rays,
  in depth bands. Caution (Leveque et al., 1993): a recovered small
  checkerboard does not prove that larger structures are resolved, and a
  checkerboard tests the linear problem only.
- **Voids**: a sphere of each diameter in ``void_sizes_m`` at each depth in
  ``depths_m`` under each planned work (:func:`void_locations`: the area
  centroid of a polygon, half-way along a polyline; the centre of the target
  volume when the site has no planned works), filled with each of ``fills``
  (air is fast; water and clay are slow). The smallest void resolved is
  reported per work, fill and depth. The data are
  *first-arrival* time changes from our eikonal solver
  (:func:`reconstruct.forward.first_arrivals.first_arrival_times`): the times with
  the void minus the times without it, on the same grid, so that the
  solver's discretisation errors cancel. First arrivals are drawn into fast
  voids but go round slow ones, so a slow void heals: it may change no time
  by more than the noise, and then no processing can show it. Noise is
  added and the change is inverted around the rock velocity.

Only the pairs the link budget hears (:mod:`plan.radio.link_budget`) take
part, and each pair's pick noise grows as its margin falls
(:func:`weak_signal_noise_ns`); ``link_budget=False`` uses every pair with
the same noise.

The voids are inverted with the smoothing weight the discrepancy principle
chose for the checkerboard (same layout and noise), one solve each.

A void counts as *resolved* when the mean recovered velocity change over its
cells has the sign of the true change, is at least ``min_visible_change`` of
the rock velocity (a change a section would show) and at least three times the standard
deviation of the recovered model away from it (ground crossed by rays more
than one diameter plus two cells from the centre; in a model too small for
that, all crossed ground outside the void), and the strongest change
of that sign in the whole model lies within the void's radius plus one cell
of its centre (the inversion puts it in the right place). The recovered
amplitude of an air void is always far below the true one (smoothing, and
straight rays in the inversion while first arrivals bend); it is reported. A void counts as
*seen in the data* when at least one pair's first arrival changes by more
than twice that pair's pick noise.

Run time is held down by working on a coarser copy of the model grid: the
smallest whole multiple of the model cell that keeps the ground cells at or
under ``max_cells`` (stated in the results), and by computing void time
changes only for pairs whose straight line passes near the void. The void
time changes are computed on a grid up to four times finer than the recovery
grid, fine enough for the void to span at least two cells: averaged into a
single coarse cell, a slow void could not be gone round and would look more
visible than it is. Voids smaller than that are not tested (stated).

References
----------
Leveque, J.-J., Rivera, L. and Wittlinger, G. (1993), On the use of the
    checker-board test to assess the resolution of tomographic inversions,
    Geophys. J. Int. 115, 313-318.
Wielandt, E. (1987), On the validity of the ray approximation for
    interpreting delay times, Geophysics 52 (slow bodies heal in first
    arrivals; from memory).
Davis, J. L. and Annan, A. P. (1989), Ground-penetrating radar for
    high-resolution mapping of soil and rock stratigraphy, Geophysical
    Prospecting 37(5), 531-551 (fill velocities).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.sparse as sp

from reconstruct.forward.first_arrivals import first_arrival_times
from reconstruct.forward.eikonal import EikonalOptions
from reconstruct.errors import InputError, is_whole_number
from reconstruct.model.grid import Grid, ground_mask, ground_top_m
from reconstruct.inverse.problem import InverseProblem, build_inverse_problem, reference_slowness
from reconstruct.inverse.solver import InversionOptions, solve_inverse_problem
from reconstruct.parallel import Executor
from reconstruct.model.placement import place_nodes
from reconstruct.io.site import Site
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.tables import Nodes

from plan.assess.coverage import CoverageStandard, target_mask
from plan.radio.link_budget import link_budget_for_site, site_pair_links
from plan.synthetic.simulate import all_pairs, refined_grid
from plan.synthetic.truth import FILL_VELOCITY_M_PER_NS, Body

__all__ = ["RecoveryOptions", "RecoveryResult", "recovery_grid", "run_recovery_tests", "box_elevation",
           "weak_signal_noise_ns", "void_locations"]

_SUBSAMPLES = 4  # points per cell and axis for the partial volume of a void
# no refined local solve around each source: ten times faster, and the time
# *changes* used here difference two fields made with the same settings; fast
# bodies treated as in the inversion and simulated picks (EikonalOptions' default)
_EIKONAL = EikonalOptions(source_refine=1)
_MAX_FORWARD_REFINE = 4  # forward-model cells per recovery cell and axis, at most


@dataclass(frozen=True)
class RecoveryOptions:
    """Settings of the recovery tests.

    Parameters
    ----------
    void_sizes_m : tuple of float
        Void diameters, metres; empty (default) uses 1.5, 3 and 5 recovery cells.
    depths_m : tuple of float
        Depths of the void centres below the ground, metres; empty (default)
        uses 1/4, 1/2 and 3/4 of the depth of interest.
    fills : tuple of str
        Void fills, from ``air``, ``water``, ``clay`` (default air and clay).
    noise_sigma_ns : float
        Standard deviation of the Gaussian pick noise, ns (default 0.5).
    max_cells : int
        Largest number of ground cells of the recovery grid (default 12,000).
    checker_size_m : float or None
        Edge of the checkerboard cubes, metres; default 4 recovery cells.
    checker_contrast : float
        Relative velocity change of the checkerboard cubes (default 0.05).
    min_visible_change : float
        Smallest recovered velocity change, as a share of the rock velocity,
        that a section would show (default 0.01, i.e. 1 %).
    seed : int
        Seed of the noise (default 0).
    link_budget : bool
        Keep only the pairs the link budget hears and let the pick noise grow
        as their margin falls (:func:`weak_signal_noise_ns`); default True.
        False: every pair within the standard's ``max_distance_m``, with
        ``noise_sigma_ns`` on every pick.
    noise_reference_margin_db : float
        Link margin in dB at and above which a pick has ``noise_sigma_ns``
        (default 20 dB).
    system_performance_db : float or None
        Overrides ``site.radar.system_performance_db``.
    """

    void_sizes_m: tuple = ()
    depths_m: tuple = ()
    fills: tuple = ("air", "clay")
    noise_sigma_ns: float = 0.5
    max_cells: int = 12000
    checker_size_m: float | None = None
    checker_contrast: float = 0.05
    min_visible_change: float = 0.01
    seed: int = 0
    link_budget: bool = True
    noise_reference_margin_db: float = 20.0
    system_performance_db: float | None = None

    def __post_init__(self):
        problems = []

        def positive_list(name):
            values = getattr(self, name)
            try:
                values = tuple(float(v) for v in values)
            except (TypeError, ValueError):
                problems.append(f"{name} must be a list of numbers (got {values!r})")
                return
            if any(not (math.isfinite(v) and v > 0) for v in values):
                problems.append(f"{name} must hold numbers > 0 in metres (got {list(values)})")
            object.__setattr__(self, name, values)

        positive_list("void_sizes_m")
        positive_list("depths_m")
        fills = tuple(self.fills)
        bad = [f for f in fills if f not in FILL_VELOCITY_M_PER_NS]
        if bad or not fills:
            problems.append(f"fills must be chosen from {', '.join(FILL_VELOCITY_M_PER_NS)} (got {list(fills)})")
        object.__setattr__(self, "fills", fills)
        for name, low, high in (("noise_sigma_ns", 0, None), ("checker_contrast", 0, 0.9),
                                ("min_visible_change", 0, 1)):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v > low and (high is None or v <= high)):
                problems.append(f"{name} must be > {low}" + (f" and <= {high}" if high else "") + f" (got {v!r})")
        if self.checker_size_m is not None and not (self.checker_size_m > 0):
            problems.append(f"checker_size_m must be > 0 metres (got {self.checker_size_m!r})")
        if not is_whole_number(self.max_cells, 100):
            problems.append(f"max_cells must be a whole number >= 100 (got {self.max_cells!r})")
        ref = self.noise_reference_margin_db
        if not (isinstance(ref, (int, float)) and math.isfinite(ref) and ref >= 0):
            problems.append(f"noise_reference_margin_db must be a number >= 0 in dB (got {ref!r})")
        if not is_whole_number(self.seed, 0):
            problems.append(f"seed must be a whole number >= 0 (got {self.seed!r})")
        if problems:
            raise InputError(problems, source="recovery options")


@dataclass(frozen=True)
class RecoveryResult:
    grid: Grid
    n_nodes: int
    n_pairs: int
    checkerboard: dict
    voids: tuple
    smallest_resolved_m: dict  # fill -> {depth: diameter resolved at every place, or None}
    statements: tuple
    settings: dict = field(default_factory=dict)
    by_work: tuple = ()  # per place: work, kind, plan_m, level_m, smallest_resolved_void_m
    pairs: dict = field(default_factory=dict)  # the pairs kept by the link budget and their noise

    def summary(self) -> dict:
        return {
            "recovery_grid": {"cell_m": list(self.grid.cell_m), "shape": list(self.grid.shape),
                              "origin_m": list(self.grid.origin_m)},
            "nodes": self.n_nodes, "pairs": self.n_pairs, "settings": self.settings,
            "link_budget": self.pairs,
            "checkerboard": self.checkerboard,
            "voids": list(self.voids),
            "smallest_resolved_void_m": self.smallest_resolved_m,
            "smallest_resolved_void_by_work": list(self.by_work),
            "statements": list(self.statements),
        }


def box_elevation(site: Site):
    """The site's ground elevation with plan positions held inside the model box.

    A coarse recovery grid may reach past the box by part of a cell (its cell
    count is rounded up); its last cells' centres then fall on or past the
    box's edge, where the ground may be undefined. They take the ground at the
    nearest point of the box instead, so that nodes on the box's edge keep
    ground cells under them.
    """
    lo = np.asarray(site.model.origin_m[:2], dtype=float)
    hi = lo + np.asarray(site.model.size_m[:2], dtype=float)
    inset = 1e-6 * max(1.0, float(np.max(hi - lo)))

    def elevation(x_m, y_m):
        return site.ground.elevation_m(np.clip(x_m, lo[0] + inset, hi[0] - inset),
                                       np.clip(y_m, lo[1] + inset, hi[1] - inset))

    return elevation


def recovery_grid(site: Site, max_cells: int):
    """The model box on cells ``f`` times the model cell, ``f`` the smallest whole
    number keeping the ground cells at or under ``max_cells``; returns (grid, ground, f)."""
    factor = 1
    while True:
        cell = tuple(c * factor for c in site.model.cell_m) if isinstance(site.model.cell_m, tuple) \
            else site.model.cell_m * factor
        grid = Grid.from_box(site.model.origin_m, site.model.size_m, cell)
        ground = ground_mask(grid, box_elevation(site))
        if int(ground.sum()) <= max_cells or min(grid.shape) <= 2:
            return grid, ground, factor
        factor += 1


def weak_signal_noise_ns(margin_db, sigma_ns: float, reference_margin_db: float, cap_ns: float):
    """Pick noise that grows as the signal weakens, ns.

    ``sigma = sigma_ns * 10^((reference_margin_db - margin_db) / 20)`` below
    the reference margin, ``sigma_ns`` at and above it, at most ``cap_ns``.

    Parameters
    ----------
    margin_db : array
        Link margin of each pick's pair, dB (the signal above the smallest
        pickable one).
    sigma_ns : float
        Pick noise of strong signals, ns.
    reference_margin_db : float
        Margin from which a signal counts as strong, dB.
    cap_ns : float
        Largest noise, ns (the recovery tests use a quarter of the antenna
        period: beyond it a picker jumps cycles, which Gaussian noise does not
        describe).

    Notes
    -----
    The accuracy of a time-delay measurement is inversely proportional to
    the amplitude signal-to-noise ratio, ``delta_T = 1 / (B sqrt(2 E / N0))``
    (Skolnik 2001, from memory); the margin stands for the signal-to-noise
    ratio in dB less a constant, hence the factor ``10^(-margin / 20)``. The
    reference margin and the cap are choices of this module, stated in the
    results.

    References
    ----------
    Skolnik, M. I. (2001). Introduction to Radar Systems, 3rd ed.,
        McGraw-Hill, chapter 6 (accuracy of range measurement; from memory).
    """
    margin = np.asarray(margin_db, dtype=float)
    grow = 10.0 ** (np.maximum(reference_margin_db - margin, 0.0) / 20.0)
    return np.minimum(sigma_ns * grow, max(cap_ns, sigma_ns))


def _body_fraction(grid: Grid, body: Body) -> np.ndarray:
    """Share of each cell's volume inside the body, by sub-sampling the cells near it."""
    fraction = np.zeros(grid.shape)
    lo = grid.cell_index(np.asarray(body.centre_m) - np.asarray(body.half_size_m))[0]
    hi = grid.cell_index(np.asarray(body.centre_m) + np.asarray(body.half_size_m))[0]
    offsets = (np.arange(_SUBSAMPLES) + 0.5) / _SUBSAMPLES
    sub = np.stack(np.meshgrid(offsets, offsets, offsets, indexing="ij"), axis=-1).reshape(-1, 3)
    cell = np.asarray(grid.cell_m)
    for ix in range(lo[0], hi[0] + 1):
        for iy in range(lo[1], hi[1] + 1):
            for iz in range(lo[2], hi[2] + 1):
                corner = np.asarray(grid.origin_m) + np.array([ix, iy, iz]) * cell
                fraction[ix, iy, iz] = body.contains(corner + sub * cell).mean()
    return fraction


def _passes_near(xyz, a, b, centre, radius_m):
    p0, p1 = xyz[a], xyz[b]
    d = p1 - p0
    t = np.clip(np.einsum("ij,ij->i", centre - p0, d) / np.maximum(np.einsum("ij,ij->i", d, d), 1e-12), 0, 1)
    return np.linalg.norm(p0 + t[:, None] * d - centre, axis=1) <= radius_m


def _checkerboard(grid, ground, rock_slowness, size_m, contrast):
    centres = grid.cell_centres_m() - np.asarray(grid.origin_m)
    parity = np.floor(centres / size_m).astype(np.int64).sum(axis=-1) % 2
    sign = np.where(parity == 0, 1.0, -1.0)
    velocity = (1.0 / rock_slowness) * (1.0 + contrast * sign)
    return np.where(ground, 1.0 / velocity - rock_slowness, 0.0)


def _correlation(x, y):
    if x.size < 3 or np.std(x) == 0 or np.std(y) == 0:
        return None
    return float(np.corrcoef(x, y)[0, 1])


def run_recovery_tests(
    site: Site,
    nodes: Nodes,
    standard: CoverageStandard = CoverageStandard(),
    options: RecoveryOptions = RecoveryOptions(),
    *,
    executor: Executor | None = None,
    progress=None,
) -> RecoveryResult:
    """Checkerboard and void recovery tests of a layout with the real inversion.

    Parameters
    ----------
    site : Site
    nodes : Nodes
        The layout (node table).
    standard : CoverageStandard
        Gives the target volume, the depth of interest and the pair range.
    options : RecoveryOptions
    executor : reconstruct.parallel.Executor, optional
        Where the travel-time fields are computed (default serial).
    progress : callable, optional
        ``progress(message)``.

    Returns
    -------
    RecoveryResult
    """
    say = progress or (lambda message: None)
    layout = _RecoveryLayout.build(site, nodes, standard, options, say)
    depths = options.depths_m or tuple(round(standard.depth_of_interest_m * f, 2) for f in (0.25, 0.5, 0.75))
    sizes = options.void_sizes_m or tuple(round(layout.cell * f, 2) for f in (1.5, 3.0, 5.0))
    checker, smoothing = _checkerboard_test(layout, depths, say)
    voids, places = _void_tests(layout, executor or Executor(kind="serial"), depths, sizes, smoothing, say)
    by_work, statements = _statements(voids, places, options, depths, sizes, layout)
    settings = {
        "recovery_cell_m": layout.cell, "model_cells_per_recovery_cell": layout.factor,
        "void_sizes_m": list(sizes), "depths_m": list(depths), "fills": list(options.fills),
        "noise_sigma_ns": options.noise_sigma_ns, "min_visible_change": options.min_visible_change,
        "noise_reference_margin_db": options.noise_reference_margin_db,
        "void_places": ("one per planned work (area centroid of a polygon, half-way along a polyline), depths "
                        "below the lower of the ground and the work; the centre of the target volume without "
                        "planned works"),
        "seed": options.seed,
        "inversion": ("straight rays, clock time-zero terms, both directions of every pair; smoothing "
                      "chosen by the discrepancy principle (chi^2 = N) on the checkerboard data and kept "
                      "for the voids"),
        "smoothing": smoothing,
        "void_data": "first-arrival time changes from the eikonal solver, pairs passing near the void",
    }
    return RecoveryResult(grid=layout.grid, n_nodes=len(layout.xyz), n_pairs=int(layout.a.size),
                          checkerboard=checker, voids=tuple(voids), smallest_resolved_m=_at_every_place(by_work),
                          statements=tuple(statements), settings=settings, by_work=tuple(by_work),
                          pairs=layout.pairs_note)


@dataclass
class _RecoveryLayout:
    """The layout on the recovery grid, its inverse problem and the noise generator
    (drawn from in a fixed order: the checkerboard, then the voids)."""

    site: Site
    standard: CoverageStandard
    options: RecoveryOptions
    grid: Grid
    ground: np.ndarray
    factor: int
    xyz: np.ndarray
    a: np.ndarray
    b: np.ndarray
    crossed: np.ndarray  # cells crossed by a straight ray
    target: np.ndarray
    operator: sp.csr_matrix  # straight rays, both directions of every pair
    problem: InverseProblem
    rng: np.random.Generator
    sigma_ns: np.ndarray  # pick noise of every pair, ns
    pairs_note: dict  # the pairs kept and their noise, for the results

    @property
    def cell(self) -> float:
        return float(max(self.grid.cell_m))

    @property
    def rock_v(self) -> float:
        return self.site.rock.velocity_m_per_ns

    @classmethod
    def build(cls, site, nodes, standard, options, say):
        grid, ground, factor = recovery_grid(site, options.max_cells)
        placement = place_nodes(nodes, grid, ground,
                                snap_tolerance_m=max(2.0, 2.0 * float(np.linalg.norm(grid.cell_m))))
        xyz = placement.xyz_m
        a, b = all_pairs(len(xyz), both_directions=False, xyz_m=xyz, max_distance_m=standard.max_distance_m)
        keep = np.linalg.norm(xyz[b] - xyz[a], axis=1) > 1e-6
        a, b = a[keep], b[keep]
        if a.size == 0:
            raise InputError("recovery tests need at least two nodes at different positions")
        a, b, sigma, pairs_note = _heard_pairs_and_noise(site, nodes, a, b, options, say)
        say(f"recovery grid: {grid.shape[0]} x {grid.shape[1]} x {grid.shape[2]} cells of "
            f"{float(max(grid.cell_m)):g} m ({factor} model cells), {int(ground.sum()):,} ground cells; "
            f"{a.size:,} pairs")
        G = straight_ray_matrix(grid, xyz[a], xyz[b])
        crossed = (np.bincount(G.indices, minlength=grid.n_cells) > 0).reshape(grid.shape)
        target, _ = target_mask(site, grid, ground, standard)
        rng = np.random.default_rng(options.seed)
        # both directions of every pair are picked, as in the field: reciprocal picks
        # separate node clock offsets from the rock (one-way picks let them absorb a void)
        problem = build_inverse_problem(
            grid, ground, site.rock.velocity_m_per_ns, np.zeros(2 * a.size), np.concatenate([a, b]),
            np.concatenate([b, a]), len(xyz), sigma_ns=np.concatenate([sigma, sigma]),
            options=InversionOptions())
        # the recovery grid is already held under max_cells: lambda is searched on it directly
        problem = replace(problem, coarse=None)
        return cls(site=site, standard=standard, options=options, grid=grid, ground=ground, factor=factor,
                   xyz=xyz, a=a, b=b, crossed=crossed, target=target, operator=sp.vstack([G, G], format="csr"),
                   problem=problem, rng=rng, sigma_ns=sigma, pairs_note=pairs_note)

    def invert(self, delta_t, smoothing=None):
        """Velocity change recovered from the time changes ``delta_t`` (one per pair,
        both directions) plus noise, and the inversion result."""
        reference = self.problem.reference_slowness_ns_per_m
        data = self.operator @ reference + np.concatenate([delta_t, delta_t])
        data = data + self.rng.normal(0.0, 1.0, data.size) * np.concatenate([self.sigma_ns, self.sigma_ns])
        posed = self.problem.with_times(data)
        if smoothing is not None:
            posed = replace(posed, options=replace(posed.options, smoothing=smoothing))
        result = solve_inverse_problem(posed, self.operator)
        return (result.velocity_m_per_ns - 1.0 / reference).reshape(self.grid.shape), result

    def depth_below_ground(self):
        top = ground_top_m(self.grid, self.ground)
        return top, top[:, :, None] - self.grid.centres_m(2)[None, None, :]


def _heard_pairs_and_noise(site, nodes, a, b, options: RecoveryOptions, say):
    """The pairs the link budget hears and their pick noise (:func:`weak_signal_noise_ns`);
    every pair with the same noise when ``options.link_budget`` is off."""
    if not options.link_budget:
        note = {"link_budget": False, "pairs_within_range": int(a.size), "pairs_heard": int(a.size),
                "noise": f"{options.noise_sigma_ns:g} ns on every pick"}
        return a, b, np.full(a.size, options.noise_sigma_ns), note
    budget = link_budget_for_site(site, system_performance_db=options.system_performance_db)
    links = site_pair_links(site, budget, nodes, a, b)
    heard = links.heard
    if int(heard.sum()) == 0:
        raise InputError("recovery tests: the link budget hears no pair of this layout; place the nodes closer "
                         "together, check radar.system_performance_db, or test every pair with --every-pair")
    cap = 0.25 * 1000.0 / site.rock.antenna_frequency_mhz  # a quarter period, ns
    sigma = weak_signal_noise_ns(links.margin_db[heard], options.noise_sigma_ns,
                                 options.noise_reference_margin_db, cap)
    note = {
        "link_budget": True, "pairs_within_range": int(a.size), "pairs_heard": int(heard.sum()),
        "noise_ns_percentiles": {str(p): float(np.percentile(sigma, p)) for p in (5, 50, 95)},
        "noise": (f"{options.noise_sigma_ns:g} ns at a link margin of {options.noise_reference_margin_db:g} dB "
                  "or more, growing as 10^((reference - margin) / 20) below it (amplitude signal-to-noise; "
                  f"Skolnik 2001), at most a quarter period ({cap:g} ns)"),
    }
    say(f"link budget: {note['pairs_heard']:,} of {a.size:,} pairs heard; pick noise median "
        f"{note['noise_ns_percentiles']['50']:.2f} ns, 95th percentile {note['noise_ns_percentiles']['95']:.2f} ns")
    return a[heard], b[heard], sigma, note


def _checkerboard_test(layout: _RecoveryLayout, depths, say):
    """Checkerboard: straight-ray times on a grid twice as fine, linear in the slowness
    change; returns the summary and the smoothing the discrepancy principle chose."""
    options, grid, ground = layout.options, layout.grid, layout.ground
    rock_s = 1.0 / layout.rock_v
    size_m = options.checker_size_m or 4.0 * layout.cell
    fine = refined_grid(grid, 2)
    fine_ground = ground_mask(fine, box_elevation(layout.site))
    pattern_fine = _checkerboard(fine, fine_ground, rock_s, size_m, options.checker_contrast)
    say(f"checkerboard of {size_m:g} m cubes, +/-{100 * options.checker_contrast:g} % velocity")
    delta_t = straight_ray_matrix(fine, layout.xyz[layout.a], layout.xyz[layout.b]) @ pattern_fine.ravel()
    recovered, checker_result = layout.invert(delta_t)
    true_dv = (1.0 / (rock_s + _checkerboard(grid, ground, rock_s, size_m, options.checker_contrast))
               - layout.rock_v)
    use = layout.target & layout.crossed
    _, depth_below = layout.depth_below_ground()
    bands = []
    edges = (0.0,) + tuple(sorted(depths)) + (layout.standard.depth_of_interest_m,)
    for top_d, bottom_d in zip(edges[:-1], edges[1:]):
        if bottom_d <= top_d:
            continue
        band = use & (depth_below >= top_d) & (depth_below < bottom_d)
        bands.append({"depth_from_m": top_d, "depth_to_m": bottom_d, "cells": int(band.sum()),
                      "correlation": _correlation(true_dv[band], recovered[band])})
    checker = {
        "cube_m": size_m, "contrast": options.checker_contrast,
        "correlation": _correlation(true_dv[use], recovered[use]), "cells": int(use.sum()),
        "by_depth": bands,
        "caution": ("Leveque et al. (1993): a recovered small checkerboard does not prove that larger "
                    "structures are resolved; the checkerboard tests the straight-ray linear problem only."),
    }
    return checker, checker_result.lambda_smooth


class _VoidTimes:
    """First-arrival time changes a void makes, on a forward-model grid fine enough
    for it; the last grid and the last background times are kept for the next void."""

    def __init__(self, layout: _RecoveryLayout, executor):
        self.layout = layout
        self.executor = executor
        self.background: dict = {}  # times without the void for the last pair list
        self.forward_grids: dict = {}  # the last forward-model grid, by refinement
        xyz, a, b = layout.xyz, layout.a, layout.b
        self.fresnel_margin = layout.cell + 0.5 * math.sqrt(
            1000.0 * layout.rock_v / layout.site.rock.antenna_frequency_mhz
            * float(np.max(np.linalg.norm(xyz[b] - xyz[a], axis=1))))

    def forward_grid(self, refine):
        if refine not in self.forward_grids:
            fine_v = refined_grid(self.layout.grid, refine)
            fine_ground_v = ground_mask(fine_v, box_elevation(self.layout.site))
            self.forward_grids = {refine: (fine_v, fine_ground_v, reference_slowness(fine_ground_v,
                                                                                     self.layout.rock_v))}
            self.background.clear()
        return self.forward_grids[refine]

    def changes(self, body, fine_v, fine_ground_v, fine_reference):
        """Time change of every pair (0 for pairs far from the void) and the pairs near it."""
        layout = self.layout
        xyz, a, b = layout.xyz, layout.a, layout.b
        centre, diameter = np.asarray(body.centre_m), 2.0 * body.half_size_m[0]
        fine_slowness = fine_reference + (_body_fraction(fine_v, body) * fine_ground_v
                                          * (1.0 / body.velocity_m_per_ns - 1.0 / layout.rock_v)).ravel()
        near = np.flatnonzero(_passes_near(xyz, a, b, centre, diameter / 2 + self.fresnel_margin))
        delta = np.zeros(a.size)
        if near.size:
            # both fields from the same sources (same pair list), so that the
            # solver's errors near each source cancel in the difference
            key = near.tobytes()
            if key not in self.background:
                self.background.clear()
                self.background[key] = first_arrival_times(fine_v, fine_reference, xyz, a[near], b[near],
                                                           executor=self.executor, eikonal_options=_EIKONAL)
            with_void = first_arrival_times(fine_v, fine_slowness, xyz, a[near], b[near],
                                            executor=self.executor, eikonal_options=_EIKONAL)
            delta[near] = with_void - self.background[key]
        return delta, near


def void_locations(site: Site, grid: Grid, ground: np.ndarray, target: np.ndarray) -> list[dict]:
    """Where the test voids go: one place per planned work, else the centre of the target volume.

    A polygon work (a blast pattern, a bench) gives its area centroid, a
    polyline (a haul road) the point half-way along it. The voids' depths are
    counted from the lower of the ground top there and the work's lowest
    point (as the target volume's). Returns dicts with ``work``, ``kind``,
    ``plan_m`` (x, y) and ``level_m``; places outside the model's ground are
    left out.
    """
    top = ground_top_m(grid, ground)
    places = []
    for work in site.planned_works:
        pts = np.asarray(work.points_m, dtype=float)
        x, y = (_polygon_centroid(pts[:, :2]) if work.geometry == "polygon" and len(pts) >= 3
                else _halfway_along(pts[:, :2]))
        places.append({"work": work.name, "kind": work.kind, "plan_m": [float(x), float(y)],
                       "work_level_m": float(pts[:, 2].min())})
    if not places:
        columns = np.argwhere(target.any(axis=2))
        if columns.size == 0:
            raise InputError("the target volume holds no ground cell; check the planned works and depth of "
                             "interest")
        places.append({"work": "centre of the target volume", "kind": None,
                       "plan_m": [float(np.mean(grid.centres_m(0)[columns[:, 0]])),
                                  float(np.mean(grid.centres_m(1)[columns[:, 1]]))], "work_level_m": np.inf})
    located = []
    for place in places:
        x, y = place.pop("plan_m")
        ic = grid.cell_index([[x, y, grid.origin_m[2]]])[0]
        inside = all(0 <= ic[k] < grid.shape[k] for k in (0, 1))
        z_top = float(top[ic[0], ic[1]]) if inside else math.nan
        if not math.isfinite(z_top):
            continue
        level = min(z_top, place.pop("work_level_m"))
        located.append({**place, "plan_m": [x, y], "level_m": level})
    if not located:
        raise InputError("no planned work lies over ground of the model box; check planned_works in the site")
    return located


def _polygon_centroid(xy):
    x, y = xy[:, 0], xy[:, 1]
    cross = x * np.roll(y, -1) - np.roll(x, -1) * y
    area = cross.sum() / 2.0
    if abs(area) < 1e-12:
        return xy.mean(axis=0)
    return ((x + np.roll(x, -1)) * cross).sum() / (6 * area), ((y + np.roll(y, -1)) * cross).sum() / (6 * area)


def _halfway_along(xy):
    steps = np.linalg.norm(np.diff(xy, axis=0), axis=1)
    if steps.sum() == 0:
        return xy[0]
    along = np.concatenate([[0.0], np.cumsum(steps)])
    half = along[-1] / 2.0
    k = min(int(np.searchsorted(along, half, side="right")) - 1, len(steps) - 1)
    t = (half - along[k]) / steps[k] if steps[k] > 0 else 0.0
    return xy[k] + t * (xy[k + 1] - xy[k])


def _void_tests(layout: _RecoveryLayout, executor, depths, sizes, smoothing, say):
    """Voids at each planned work (:func:`void_locations`), one per fill, depth and size;
    returns the entries and the places."""
    places = void_locations(layout.site, layout.grid, layout.ground, layout.target)
    times = _VoidTimes(layout, executor)
    voids = []
    total = len(places) * len(layout.options.fills) * len(depths) * len(sizes)
    for place in places:
        cx, cy = place["plan_m"]
        for fill in layout.options.fills:
            for depth in depths:
                for diameter in sizes:
                    body = Body(name=f"{fill} {diameter:g} m at {depth:g} m", shape="ellipsoid",
                                centre_m=(cx, cy, place["level_m"] - depth), half_size_m=(diameter / 2,) * 3,
                                fill=fill, velocity_m_per_ns=FILL_VELOCITY_M_PER_NS[fill])
                    entry = {"work": place["work"], **_void_test(layout, times, body, fill, depth, diameter,
                                                                 smoothing)}
                    voids.append(entry)
                    if "largest_time_change_ns" in entry:
                        say(f"void {len(voids)}/{total} ({place['work']}): {body.name}: largest time change "
                            f"{entry['largest_time_change_ns']:.2f} ns, "
                            f"{'resolved' if entry['resolved'] else 'not resolved'}")
    return voids, places


def _void_test(layout: _RecoveryLayout, times: _VoidTimes, body, fill, depth, diameter, smoothing) -> dict:
    """One void: its time changes, the inversion of them and whether it is resolved."""
    grid, ground, cell = layout.grid, layout.ground, layout.cell
    v_fill = body.velocity_m_per_ns
    centre = np.array(body.centre_m)
    fraction = _body_fraction(grid, body) * ground
    entry = {"fill": fill, "velocity_m_per_ns": v_fill, "depth_m": depth, "diameter_m": diameter,
             "centre_m": centre.tolist()}
    if centre[2] - diameter / 2 < grid.origin_m[2] or fraction.sum() == 0:
        entry.update(resolved=False, seen_in_data=False, note="void outside the ground of the model box; not tested")
        return entry
    reference = layout.problem.reference_slowness_ns_per_m
    slowness = reference + (fraction * (1.0 / v_fill - 1.0 / layout.rock_v)).ravel()
    # first arrivals on a grid fine enough that the void spans at least two of
    # its cells: a void averaged into one coarse cell cannot be gone round,
    # which would overstate what slow voids do to first arrivals
    refine = min(_MAX_FORWARD_REFINE, max(1, math.ceil(2.0 * cell / diameter)))
    fine_v, fine_ground_v, fine_reference = times.forward_grid(refine)
    if diameter < 2.0 * cell / refine:
        entry.update(resolved=False, seen_in_data=False,
                     note=f"smaller than two forward-model cells ({cell / refine:g} m); not tested: "
                          "raise --max-cells for a finer recovery grid")
        return entry
    delta, near = times.changes(body, fine_v, fine_ground_v, fine_reference)
    # inverted with the smoothing the discrepancy principle chose for the checkerboard
    # (same layout, same noise): one solve each instead of a lambda search
    recovered, _ = layout.invert(delta, smoothing)
    true_cells = 1.0 / slowness.reshape(grid.shape) - 1.0 / reference.reshape(grid.shape)
    inside = fraction >= 0.5
    if not inside.any():
        inside = fraction == fraction.max()
    distance = np.linalg.norm(grid.cell_centres_m() - centre, axis=-1)
    far = layout.crossed & ground & (distance > diameter + 2 * cell)
    if not far.any():  # small model: every crossed ground cell outside the void
        far = layout.crossed & ground & (fraction == 0)
    spread = float(np.std(recovered[far])) if far.any() else 0.0
    got = float(np.mean(recovered[inside]))
    want = float(np.mean(true_cells[inside]))
    signed = np.where(ground, recovered * np.sign(want), -np.inf)
    peak = np.unravel_index(int(np.argmax(signed)), grid.shape)
    peak_distance = float(distance[peak])
    resolved = (np.sign(got) == np.sign(want) and abs(got) >= 3.0 * spread
                and abs(got) >= layout.options.min_visible_change * layout.rock_v
                and peak_distance <= diameter / 2 + cell)
    largest = float(np.max(np.abs(delta)))
    beyond = np.abs(delta) > 2 * layout.sigma_ns
    entry.update(
        recovered_change_m_per_ns=got, true_cell_change_m_per_ns=want,
        background_spread_m_per_ns=spread, strongest_anomaly_distance_m=peak_distance,
        resolved=bool(resolved),
        largest_time_change_ns=largest,
        pairs_changed_beyond_2_sigma=int(np.sum(beyond)),
        seen_in_data=bool(beyond.any()), pairs_near=int(near.size),
    )
    return entry


def _at_every_place(by_work) -> dict:
    """Per fill and depth, the smallest diameter resolved at every place: the largest of the
    places' smallest, None where some place resolves none."""
    out: dict = {}
    for place in by_work:
        for fill, per_depth in place["smallest_resolved_void_m"].items():
            for depth, diameter in per_depth.items():
                now = out.setdefault(fill, {}).get(depth, 0.0)
                out[fill][depth] = None if (now is None or diameter is None) else max(now, diameter)
    return out


def _statements(voids, places, options: RecoveryOptions, depths, sizes, layout):
    """Smallest resolved void per place, fill and depth, and the sentences of the report."""
    by_work, statements = [], []
    tried = ", ".join(f"{s:g}" for s in sizes)
    for place in places:
        smallest: dict = {}
        for fill in options.fills:
            smallest[fill] = {}
            kind = "fast" if FILL_VELOCITY_M_PER_NS[fill] > layout.rock_v else "slow"
            found = []
            for depth in depths:
                rows = [v for v in voids if v["work"] == place["work"] and v["fill"] == fill and v["depth_m"] == depth]
                ok = sorted(v["diameter_m"] for v in rows if v["resolved"])
                smallest[fill][f"{depth:g}"] = ok[0] if ok else None
                missed = sorted(v["diameter_m"] for v in rows if ok and v["diameter_m"] > ok[0]
                                and not v["resolved"] and "largest_time_change_ns" in v)  # tested, missed
                found.append(f"{ok[0]:g} m at {depth:g} m depth" + (
                    f" (larger ones not all: {', '.join(f'{m:g}' for m in missed)} m not)" if missed else "")
                    if ok else f"none at {depth:g} m depth")
                statements.extend(_unseen_statements(rows, place, fill, kind, depth, options))
            statements.append(f"{place['work']}: smallest {fill}-filled ({kind}) void resolved "
                              f"(of {tried} m tried): " + "; ".join(found) + ".")
        by_work.append({**place, "smallest_resolved_void_m": smallest})
    if any("larger ones not all" in s for s in statements):
        statements.append("Resolution is not a size threshold: where a larger void was missed, check the table.")
    return by_work, statements


def _unseen_statements(rows, place, fill, kind, depth, options):
    out = []
    for v in rows:
        if "largest_time_change_ns" in v and not v["seen_in_data"]:
            out.append(
                f"{place['work']}: a {fill}-filled void {v['diameter_m']:g} m across at {depth:g} m depth changes "
                f"no first arrival by more than twice its pick noise (largest change "
                f"{v['largest_time_change_ns']:.2f} ns, noise {options.noise_sigma_ns:g} ns or more): this layout "
                "cannot show it" + (", because first arrivals go round slow bodies (they heal)." if kind == "slow"
                                    else "."))
    return out
