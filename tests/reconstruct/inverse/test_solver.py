"""Checks of the regularised travel-time inversion against outside references.

Sources named beside each check:
- Paige, C. C. and Saunders, M. A. (1982), LSQR: an algorithm for sparse linear
  equations and sparse least squares, ACM Trans. Math. Softw. 8(1), 43-71:
  LSQR converges to the least-squares solution of the stacked system, which
  numpy's dense ``lstsq`` gives directly.
- Davis, J. L. and Annan, A. P. (1989), Ground-penetrating radar for
  high-resolution mapping of soil and rock stratigraphy, Geophysical Prospecting
  37(5), 531-551: limestone about 0.12 m/ns, air 0.30 m/ns, water 0.033 m/ns.
- Morozov, V. A. (1966), On the solution of functional equations by the method
  of regularization, Soviet Math. Dokl. 7, 414-417: the discrepancy principle.
- Hansen, P. C. (1992), Analysis of discrete ill-posed problems by means of the
  L-curve, SIAM Review 34(4), 561-580: the corner is the point of largest curvature.
"""

import numpy as np
import pytest
import scipy.constants
import scipy.sparse as sp

from reconstruct.errors import InputError
from reconstruct.model.grid import Grid, ground_mask
from reconstruct.inverse.solver import InversionOptions, _l_curve_corner, _ScaledProblem, invert_travel_times
from reconstruct.inverse.time_zero import time_zero_matrix
from reconstruct.inverse.multilevel import coarse_level
from reconstruct.inverse.regularization import first_difference_operator
from reconstruct.forward.straight_rays import straight_ray_matrix

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9
LIMESTONE_M_PER_NS = 0.12  # Davis and Annan (1989), table of typical properties


def _crosshole(fast_velocity=0.2, refine=2, noise_ns=0.3, offsets_sd_ns=2.0, seed=1):
    """Two boreholes 26 m apart in limestone with a fast 6 m block between them.

    The picks are straight-ray times through the truth on a grid ``refine``
    times finer than the inversion grid, plus clock offsets and noise.
    """
    grid = Grid((0, 0, 0), (1, 1, 1), (30, 10, 30))
    zs = np.arange(2.0, 29.0)
    a = np.c_[np.full(zs.size, 2.0), np.full(zs.size, 5.0), zs]
    b = np.c_[np.full(zs.size, 28.0), np.full(zs.size, 5.0), zs]
    xyz = np.r_[a, b]
    ia, ib = np.meshgrid(np.arange(zs.size), np.arange(zs.size) + zs.size, indexing="ij")
    tx = np.r_[ia.ravel(), ib.ravel()]
    rx = np.r_[ib.ravel(), ia.ravel()]
    fine = Grid((0, 0, 0), (1 / refine,) * 3, tuple(n * refine for n in grid.shape))
    centres = fine.cell_centres_m()
    block = (np.abs(centres[..., 0] - 15) < 3) & (np.abs(centres[..., 2] - 15) < 3)
    velocity = np.where(block, fast_velocity, LIMESTONE_M_PER_NS)
    rng = np.random.default_rng(seed)
    offsets = rng.normal(0, offsets_sd_ns, len(xyz))
    t_true = straight_ray_matrix(fine, xyz[tx], xyz[rx]) @ (1 / velocity).ravel()
    t_obs = t_true + offsets[rx] - offsets[tx] + rng.normal(0, noise_ns, tx.size)
    return grid, xyz, tx, rx, t_obs, offsets


def _run(grid, xyz, tx, rx, t_obs, *, sigma=None, ground=None, options=InversionOptions(), coarse=None):
    if ground is None:
        ground = np.ones(grid.shape, dtype=bool)
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    reference = np.where(ground.ravel(), 1 / LIMESTONE_M_PER_NS, 1 / SPEED_OF_LIGHT_M_PER_NS)
    D = first_difference_operator(grid, ground)
    return invert_travel_times(G, t_obs, tx, rx, len(xyz), ground.ravel(), reference, D,
                               cell_m=grid.cell_m, sigma_ns=sigma, options=options, coarse=coarse)


def test_crosshole_fast_block_and_clock_offsets_are_recovered():
    grid, xyz, tx, rx, t_obs, offsets = _crosshole()
    result = _run(grid, xyz, tx, rx, t_obs, sigma=np.full(tx.size, 0.3))
    velocity = result.velocity_m_per_ns.reshape(grid.shape)
    # within 25 % of the truth (0.2 m/ns) at the block centre
    assert abs(velocity[15, 5, 15] - 0.2) / 0.2 < 0.25
    # the fastest cell of the ray plane lies within 2 cells of the block centre
    ix, iz = np.unravel_index(np.argmax(velocity[:, 5, :]), (30, 30))
    assert abs(ix + 0.5 - 15) <= 2 and abs(iz + 0.5 - 15) <= 2
    # background stays limestone (Davis and Annan, 1989) away from the block
    assert abs(np.median(velocity[:, 5, :]) - LIMESTONE_M_PER_NS) < 0.01
    # clock offsets (relative to their mean: a common shift changes no time)
    error = result.time_zero_ns - (offsets - offsets.mean())
    assert np.max(np.abs(error)) < 0.3


def test_discrepancy_principle_reaches_chi2_equal_to_n():
    # Morozov (1966): lambda such that chi^2 equals the number of data
    grid, xyz, tx, rx, t_obs, _ = _crosshole(noise_ns=0.5)
    result = _run(grid, xyz, tx, rx, t_obs, sigma=np.full(tx.size, 0.5))
    assert result.lambda_method == "discrepancy"
    assert result.chi2 == pytest.approx(tx.size, rel=0.05)
    assert "chi^2" in result.lambda_note


def test_coarse_lambda_search_agrees_with_the_model_grid_search():
    grid, xyz, tx, rx, t_obs, _ = _crosshole(noise_ns=0.5)
    sigma = np.full(tx.size, 0.5)
    ground = np.ones(grid.shape, dtype=bool)
    direct = _run(grid, xyz, tx, rx, t_obs, sigma=sigma)
    coarse = _run(grid, xyz, tx, rx, t_obs, sigma=sigma, coarse=coarse_level(grid, ground, 2))
    assert coarse.lambda_smooth == pytest.approx(direct.lambda_smooth, rel=0.3)
    assert coarse.chi2 == pytest.approx(tx.size, rel=0.05)
    v1 = direct.velocity_m_per_ns.reshape(grid.shape)[:, 5, :]
    v2 = coarse.velocity_m_per_ns.reshape(grid.shape)[:, 5, :]
    assert np.max(np.abs(v1 - v2) / v1) < 0.1
    assert "coarse grid" in coarse.lambda_note


def test_l_curve_is_used_without_sigmas():
    grid, xyz, tx, rx, t_obs, _ = _crosshole()
    result = _run(grid, xyz, tx, rx, t_obs)
    assert result.lambda_method == "l-curve"
    assert result.chi2 is None
    opts = InversionOptions()
    assert opts.lambda_min <= result.lambda_smooth <= opts.lambda_max


def test_l_curve_corner_is_on_the_rounded_corner_of_an_l():
    # Hansen (1992): the corner is the point of largest curvature. Geometry: an L
    # traversed as an L-curve is from large to small lambda (left along the flat
    # leg y = 0, then up the steep leg x = 0), with the legs joined by a quarter
    # circle of radius 1 around (1, 1): curvature 1 on the arc, 0 on the legs.
    flat = np.c_[np.linspace(6, 1, 6)[:-1], np.zeros(5)]
    angles = np.linspace(1.5 * np.pi, np.pi, 7)
    arc = np.c_[1 + np.cos(angles), 1 + np.sin(angles)]
    steep = np.c_[np.zeros(5), np.linspace(1, 6, 6)[1:]]
    points = np.r_[flat, arc, steep]
    k = _l_curve_corner(points[:, 0], points[:, 1])
    assert 5 <= k <= 11  # an index on the arc
    # samples bunched at the end of the steep leg (as when the misfit levels
    # off) must not pull the corner there
    bunched = np.r_[flat, arc, np.c_[np.zeros(4), 1 + np.cumsum([1.0, 0.1, 0.01, 0.001])]]
    assert 5 <= _l_curve_corner(bunched[:, 0], bunched[:, 1]) <= 11


def test_lsqr_equals_dense_lstsq_on_the_stacked_system():
    # Paige and Saunders (1982): LSQR solves min |M y - rhs|; numpy's dense lstsq
    # on the same explicit stacked matrix is the reference.
    rng = np.random.default_rng(3)
    grid = Grid((0, 0, 0), (1.0, 1.5, 1.0), (5, 4, 6))
    ground = ground_mask(grid, lambda x, y: 4.2 + 0.1 * x)
    n_nodes = 8
    xyz = rng.uniform([0, 0, 0], [5, 6, 4], (n_nodes, 3))
    tx, rx = np.nonzero(~np.eye(n_nodes, dtype=bool))
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    t_obs = G @ np.full(grid.n_cells, 1 / 0.11) + rng.normal(0, 0.3, tx.size)
    sigma = rng.uniform(0.2, 0.6, tx.size)
    reference = np.where(ground.ravel(), 1 / LIMESTONE_M_PER_NS, 1 / SPEED_OF_LIGHT_M_PER_NS)
    D = first_difference_operator(grid, ground, horizontal_weight=2.0, vertical_weight=0.5)
    options = InversionOptions(smoothing=0.3, damping_ratio=0.2, tolerance=1e-12, max_iterations=20000,
                               velocity_min_m_per_ns=1e-3, velocity_max_m_per_ns=0.3)
    result = invert_travel_times(G, t_obs, tx, rx, n_nodes, ground.ravel(), reference, D,
                                 cell_m=grid.cell_m, sigma_ns=sigma, options=options)

    # the same system, assembled explicitly
    cols = np.flatnonzero(ground.ravel())
    W = sp.diags(1 / sigma)
    A = (W @ sp.hstack([G[:, cols], time_zero_matrix(tx, rx, n_nodes)])).tocsr()
    Gg = G[:, cols]
    lengths = np.asarray(Gg.sum(axis=1)).ravel()
    kappa_d = np.sqrt(np.sum((lengths / sigma) ** 2) / (cols.size * np.prod(grid.cell_m)))
    kappa_s = kappa_d * np.median(lengths[lengths > 0])
    problem = _ScaledProblem(A, (t_obs - G @ reference) / sigma, D, cols.size, grid.cell_m, kappa_d, kappa_s)
    M, rhs = problem.stacked(0.3, 0.06)
    y, *_ = np.linalg.lstsq(M.toarray(), rhs, rcond=None)
    x = y / problem.scale
    expected_slowness = reference[cols] + x[: cols.size]
    np.testing.assert_allclose(result.slowness_ns_per_m[cols], expected_slowness, rtol=1e-7)
    tau = x[cols.size:]
    np.testing.assert_allclose(result.time_zero_ns, tau - tau.mean(), atol=1e-7)


def test_air_cells_keep_the_speed_of_light():
    grid = Grid((0, 0, 0), (1, 1, 1), (12, 6, 10))
    ground = ground_mask(grid, lambda x, y: np.full_like(x, 7.0))
    rng = np.random.default_rng(5)
    xyz = np.c_[rng.uniform(0.5, 11.5, 12), rng.uniform(0.5, 5.5, 12), rng.uniform(0.5, 6.5, 12)]
    tx, rx = np.triu_indices(12, 1)
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    t_obs = G @ np.full(grid.n_cells, 1 / LIMESTONE_M_PER_NS)
    result = _run(grid, xyz, tx, rx, t_obs, ground=ground, options=InversionOptions(smoothing=0.01))
    air = ~ground.ravel()
    # SI definition of c (scipy.constants): air velocity is fixed, not inverted
    np.testing.assert_allclose(result.velocity_m_per_ns[air], SPEED_OF_LIGHT_M_PER_NS, rtol=1e-12)
    # a uniform truth equal to the reference is returned unchanged
    np.testing.assert_allclose(result.velocity_m_per_ns[~air], LIMESTONE_M_PER_NS, rtol=1e-6)
    assert result.rms_ns < 1e-6


@pytest.mark.parametrize("bounds_in_solve", [False, True])
def test_velocities_are_kept_inside_the_band(bounds_in_solve):
    # data that call for a slowness beyond water (0.033 m/ns, Davis and Annan 1989)
    grid, xyz, tx, rx, _, _ = _crosshole()
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    t_obs = G @ np.full(grid.n_cells, 1 / 0.02)
    options = InversionOptions(smoothing=0.001, time_zero="none", bounds_in_solve=bounds_in_solve)
    result = _run(grid, xyz, tx, rx, t_obs, options=options)
    v = result.velocity_m_per_ns
    assert v.min() >= 0.03 - 1e-12 and v.max() <= 0.30
    if bounds_in_solve:
        # the solve itself holds the cells at (or, to LSQR's accuracy, just inside)
        # the slow end: nothing left to clip
        assert result.n_clipped == 0
        np.testing.assert_allclose(v, 0.03, rtol=1e-4)
        assert result.chi2_before_clipping is None or result.chi2_before_clipping == result.chi2_after_clipping
    else:
        assert result.n_clipped_slow > 0


def _bounded_problem(m=40, n=25, seed=3):
    rng = np.random.default_rng(seed)
    A = rng.normal(size=(m, n))
    x_true = rng.normal(size=n) * 2.0
    b = A @ x_true + rng.normal(0, 0.1, m)
    lower = np.full(n, -1.0)
    upper = np.full(n, 1.0)
    lower[::5] = -np.inf  # some unknowns bounded on one side only
    return A, b, lower, upper


def test_bounded_lsqr_equals_scipy_lsq_linear():
    # scipy.optimize.lsq_linear (bounded-variable least squares) as the reference
    from scipy.optimize import lsq_linear

    from reconstruct.inverse.solver import bounded_lsqr

    A, b, lower, upper = _bounded_problem()
    reference = lsq_linear(A, b, bounds=(lower, upper), method="bvls", tol=1e-12)
    assert reference.status > 0
    x, _, _, passes, converged = bounded_lsqr(sp.csr_matrix(A), b, lower, upper, tolerance=1e-12,
                                              max_iterations=2000)
    assert converged and passes >= 2  # the bounds are active: the plain solution is outside them
    assert np.all(x >= lower) and np.all(x <= upper)
    np.testing.assert_allclose(x, reference.x, atol=1e-7)
    # and not the clipped unbounded solution
    clipped = np.clip(np.linalg.lstsq(A, b, rcond=None)[0], lower, upper)
    assert np.linalg.norm(A @ x - b) < np.linalg.norm(A @ clipped - b) - 1e-6


def test_bounded_inversion_solves_the_bounded_stacked_system():
    # the regularised system with the band inside the solve equals scipy's
    # bounded least squares (lsq_linear) on the explicit stacked matrix
    from scipy.optimize import lsq_linear

    from reconstruct.inverse.problem import InverseProblem
    from reconstruct.inverse.solver import _scaled_levels

    # a small crosshole section whose block asks for 0.5 m/ns, beyond the speed of light
    grid = Grid((0, 0, 0), (1, 1, 1), (14, 2, 14))
    zs = np.arange(1.0, 13.5, 1.0)
    xyz = np.r_[np.c_[np.full(zs.size, 0.5), np.full(zs.size, 1.0), zs],
                np.c_[np.full(zs.size, 13.5), np.full(zs.size, 1.0), zs]]
    tx, rx = (g.ravel() for g in np.meshgrid(np.arange(zs.size), np.arange(zs.size) + zs.size, indexing="ij"))
    centres = grid.cell_centres_m()
    block = (np.abs(centres[..., 0] - 7) < 2) & (np.abs(centres[..., 2] - 7) < 2)
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    t_obs = G @ np.where(block, 1 / 0.5, 1 / LIMESTONE_M_PER_NS).ravel()
    ground = np.ones(grid.shape, dtype=bool)
    options = InversionOptions(smoothing=1e-4, time_zero="none", tolerance=1e-10, max_iterations=5000)
    problem = InverseProblem(time_ns=t_obs, tx=tx, rx=rx, n_nodes=len(xyz), ground_flat=ground.ravel(),
                             reference_slowness_ns_per_m=np.full(grid.n_cells, 1 / LIMESTONE_M_PER_NS),
                             smoothing_operator=first_difference_operator(grid, ground), cell_m=grid.cell_m,
                             sigma_ns=np.full(tx.size, 0.3), options=options)
    fine = _scaled_levels(problem, sp.csr_matrix(G)).fine
    lam = options.smoothing
    M, rhs = fine.stacked(lam, options.damping_ratio * lam)
    reference = lsq_linear(M.toarray(), rhs, bounds=fine.bounds, method="bvls", tol=1e-12)
    assert reference.status > 0
    sol = fine.solve(lam, options.damping_ratio * lam, np.zeros(fine.n), options.max_iterations, 1e-10)
    assert sol.bound_passes >= 2  # the plain solution leaves the band here
    at_bound = np.isclose(sol.y, fine.bounds[0], rtol=1e-9)  # the fast end: slowness change at its lowest
    assert at_bound.sum() > 0
    cost = lambda y: float(np.sum((M @ y - rhs) ** 2))  # noqa: E731
    assert cost(sol.y) <= cost(reference.x) * (1 + 1e-6)
    np.testing.assert_allclose(sol.y / fine.scale, reference.x / fine.scale, atol=1e-4)  # ns/m


def _crosshole_section(fast_velocity=0.2, noise_ns=0.3, seed=1):
    """A crosshole section three cells thick, two boreholes 21 m apart and a fast
    6 x 6 m block between them; straight-ray times on a grid twice as fine, plus noise."""
    grid = Grid((0, 0, 0), (1, 1, 1), (24, 3, 24))
    zs = np.arange(1.5, 23.0)
    xyz = np.r_[np.c_[np.full(zs.size, 1.5), np.full(zs.size, 1.5), zs],
                np.c_[np.full(zs.size, 22.5), np.full(zs.size, 1.5), zs]]
    tx, rx = (g.ravel() for g in np.meshgrid(np.arange(zs.size), np.arange(zs.size) + zs.size, indexing="ij"))
    fine = Grid((0, 0, 0), (0.5,) * 3, (48, 6, 48))
    centres = fine.cell_centres_m()
    block = (np.abs(centres[..., 0] - 12) < 3) & (np.abs(centres[..., 2] - 12) < 3)
    velocity = np.where(block, fast_velocity, LIMESTONE_M_PER_NS)
    rng = np.random.default_rng(seed)
    t_obs = straight_ray_matrix(fine, xyz[tx], xyz[rx]) @ (1 / velocity).ravel() + rng.normal(0, noise_ns, tx.size)
    centres = grid.cell_centres_m()[:, 1, :]
    inside = (np.abs(centres[..., 0] - 12) < 3) & (np.abs(centres[..., 2] - 12) < 3)
    return grid, xyz, tx, rx, t_obs, inside


def test_compact_regularisation_draws_a_sharper_body_than_smooth():
    # Portniaguine and Zhdanov (1999), Focusing geophysical inversion images,
    # Geophysics 64(3), 874-887, and Last and Kubik (1983), Compact gravity
    # inversion, Geophysics 48(6), 713-721: at the same fit, the focusing
    # stabilisers recover a blocky body with a peak nearer the truth and less
    # of its anomaly smeared outside it than the smooth (Tikhonov) solution
    grid, xyz, tx, rx, t_obs, inside = _crosshole_section()
    truth_peak = 0.2 / LIMESTONE_M_PER_NS - 1
    sigma = np.full(tx.size, 0.3)
    figures = {}
    for kind in ("smooth", "compact"):
        result = _run(grid, xyz, tx, rx, t_obs, sigma=sigma,
                      options=InversionOptions(time_zero="none", regularisation=kind))
        anomaly = result.velocity_m_per_ns.reshape(grid.shape)[:, 1, :] / LIMESTONE_M_PER_NS - 1
        outside = float(np.abs(anomaly[~inside]).sum() / np.abs(anomaly).sum())
        figures[kind] = (float(anomaly.max()), outside, result)
        assert result.chi2 == pytest.approx(tx.size, rel=0.1)  # both fit to the noise (discrepancy)
    (peak_s, outside_s, smooth), (peak_c, outside_c, compact) = figures["smooth"], figures["compact"]
    assert compact.focusing_reweightings >= 2 and smooth.focusing_reweightings == 0
    assert compact.regularisation == "compact" and compact.focusing_beta_ns_per_m > 0
    assert abs(peak_c - truth_peak) < abs(peak_s - truth_peak) - 0.05
    assert outside_c < outside_s


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(velocity_min_m_per_ns=0.2, velocity_max_m_per_ns=0.1), "velocity band"),
        (dict(velocity_max_m_per_ns=0.5), "faster than light"),
        (dict(time_zero="sometimes"), "time_zero must be one of"),
        (dict(smoothing=-1.0), "smoothing must be > 0"),
        (dict(damping_ratio=float("nan")), "damping_ratio"),
        (dict(horizontal_weight=-1.0), "smoothing weights"),
        (dict(regularisation="blocky"), "regularisation must be one of smooth, compact"),
        (dict(focusing_fraction=0.0), "focusing_fraction"),
    ],
)
def test_bad_options_are_named(kwargs, message):
    with pytest.raises(InputError, match=message):
        InversionOptions(**kwargs)


def test_bad_arrays_raise_value_errors():
    grid, xyz, tx, rx, t_obs, _ = _crosshole()
    t_bad = t_obs.copy()
    t_bad[3] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        _run(grid, xyz, tx, rx, t_bad)
    with pytest.raises(ValueError, match="sigma_ns must be positive"):
        _run(grid, xyz, tx, rx, t_obs, sigma=np.zeros(tx.size))


def test_search_starts_from_the_least_misfit_when_no_trial_reaches_the_target():
    # Occam's phase 1 (Constable, Parker and Constable 1987, Occam's inversion,
    # Geophysics 52(3)): when no weight reaches chi^2 = N, the weight of least
    # misfit is taken. With the band inside the solve the misfit can rise again
    # as the weight falls, so the least misfit need not be the smallest weight.
    from types import SimpleNamespace

    from reconstruct.inverse.solver import _first_trial_choice

    def trials(chi2s):
        return [(10.0 ** -k, SimpleNamespace(misfit=np.sqrt(c))) for k, c in enumerate(chi2s)]

    rising_again = [9e6, 4e5, 6.6e4, 1.1e6, 1.5e6]
    assert _first_trial_choice(trials(rising_again), "discrepancy", 4294.0, False, 0.1) == 2
    falling = [9e6, 4e5, 6.6e4, 2e4]
    assert _first_trial_choice(trials(falling), "discrepancy", 4294.0, False, 0.1) == 3
    reaching = [9e6, 4e5, 4000.0, 3000.0]  # the first (largest) weight that reaches N
    assert _first_trial_choice(trials(reaching), "discrepancy", 4294.0, False, 0.1) == 2
