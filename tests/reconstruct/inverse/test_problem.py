"""The inverse problem assembled once (reconstruct.inverse.problem).

Outside references named beside each check: the speed of light in vacuum,
c = 299 792 458 m/s exactly (SI definition, BIPM (2019), The International
System of Units, 9th edition), so air cells have slowness 1/c = 3.33564 ns/m;
the default velocity band 0.03 to 0.30 m/ns (water to air; Davis, J. L. and
Annan, A. P. (1989), Geophysical Prospecting 37(5), 531-551); and the
weighted least-squares weights 1/sigma of a Gaussian likelihood (common
practice, no published source).
"""

import numpy as np
import pytest

from reconstruct.inverse.problem import InverseProblem, build_inverse_problem
from reconstruct.inverse.solver import InversionOptions, invert_travel_times, solve_inverse_problem
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.model.grid import Grid

C_M_PER_NS = 0.299792458  # SI definition of the metre


def _box():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (6, 4, 6))
    ground = np.zeros(grid.shape, dtype=bool)
    ground[:, :, :5] = True  # the top layer is air
    xyz = np.array([[0.5, 2.0, 0.5], [0.5, 2.0, 4.5], [5.5, 2.0, 0.5], [5.5, 2.0, 4.5]])
    tx = np.array([0, 0, 1, 1, 2])
    rx = np.array([2, 3, 2, 3, 3])
    return grid, ground, xyz, tx, rx


def test_reference_weights_and_bounds():
    grid, ground, xyz, tx, rx = _box()
    sigma = np.array([0.5, 1.0, 2.0, 0.25, 1.0])
    problem = build_inverse_problem(grid, ground, 0.1, np.full(5, 50.0), tx, rx, 4, sigma_ns=sigma)
    ref = problem.reference_slowness_ns_per_m.reshape(grid.shape)
    assert np.allclose(ref[~ground], 1.0 / C_M_PER_NS) and np.allclose(ref[ground], 10.0)
    assert np.allclose(problem.weight, 1.0 / sigma)
    # the round 0.30 m/ns is a little faster than c, so the fast bound is 1/c; the slow one 1/0.03
    assert problem.slowness_bounds_ns_per_m == pytest.approx((1 / C_M_PER_NS, 1 / 0.03))
    # clock model: +1 at the receiver, -1 at the transmitter (t = ... + tau_rx - tau_tx)
    C = problem.time_zero_columns.toarray()
    assert np.array_equal(C[np.arange(5), rx], np.ones(5)) and np.array_equal(C[np.arange(5), tx], -np.ones(5))
    assert problem.ground_columns.size == int(ground.sum())
    assert problem.coarse is None  # a small grid is searched directly


def test_without_sigmas_the_default_sets_the_weights():
    grid, ground, _, tx, rx = _box()
    problem = build_inverse_problem(grid, ground, 0.1, np.full(5, 50.0), tx, rx, 4,
                                    options=InversionOptions(default_sigma_ns=2.0))
    assert not problem.sigma_given and np.allclose(problem.weight, 0.5)


def test_with_times_changes_only_the_times():
    grid, ground, _, tx, rx = _box()
    problem = build_inverse_problem(grid, ground, 0.1, np.full(5, 50.0), tx, rx, 4)
    other = problem.with_times(np.arange(5.0) + 40)
    assert np.array_equal(other.time_ns, np.arange(5.0) + 40)
    assert other.smoothing_operator is problem.smoothing_operator
    assert np.array_equal(other.time_zero_columns.toarray(), problem.time_zero_columns.toarray())


@pytest.mark.parametrize("change, message", [
    (dict(sigma_ns=np.array([1.0, 1.0, 0.0, 1.0, 1.0])), "sigma_ns must be positive"),
    (dict(time_ns=np.array([1.0, np.nan, 1.0, 1.0, 1.0])), "NaN"),
    (dict(tx=np.array([0, 0, 1, 1, 7])), "node numbers from 0 to 3"),
    (dict(robust_exempt=np.ones(3, dtype=bool)), "robust_exempt must have one entry per pick"),
])
def test_bad_arrays_are_named(change, message):
    grid, ground, _, tx, rx = _box()
    problem = build_inverse_problem(grid, ground, 0.1, np.full(5, 50.0), tx, rx, 4)
    with pytest.raises(ValueError, match=message):
        InverseProblem(**{**dict(time_ns=problem.time_ns, tx=tx, rx=rx, n_nodes=4, ground_flat=problem.ground_flat,
                                 reference_slowness_ns_per_m=problem.reference_slowness_ns_per_m,
                                 smoothing_operator=problem.smoothing_operator, cell_m=grid.cell_m), **change})


def test_uniform_rock_is_recovered_through_the_problem():
    # times of a uniform rock at 0.1 m/ns (length / velocity) give back that rock;
    # the array-level entry gives the same answer
    grid, ground, xyz, tx, rx = _box()
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    t = np.linalg.norm(xyz[rx] - xyz[tx], axis=1) / 0.1
    options = InversionOptions(time_zero="none", smoothing=1e-3)
    problem = build_inverse_problem(grid, ground, 0.1, t, tx, rx, 4, options=options)
    result = solve_inverse_problem(problem, G)
    assert np.allclose(result.velocity_m_per_ns.reshape(grid.shape)[ground], 0.1, rtol=1e-6)
    same = invert_travel_times(G, t, tx, rx, 4, problem.ground_flat, problem.reference_slowness_ns_per_m,
                               problem.smoothing_operator, cell_m=grid.cell_m, options=options)
    assert np.array_equal(same.slowness_ns_per_m, result.slowness_ns_per_m)
