"""Occam's choice of the regularisation weight (reconstruct.inverse.occam).

Outside references: Constable, S. C., Parker, R. L. and Constable, C. G.
(1987), Occam's inversion: a practical algorithm for generating smooth models
from electromagnetic sounding data, Geophysics 52(3), 289-300 (the two
phases: the largest weight reaching chi^2 = N, else the least misfit); the
dense Tikhonov solutions come from scipy.linalg.lstsq over a fine lambda grid.
"""

import numpy as np
import pytest
import scipy.linalg

from reconstruct.inverse.occam import occam_weight

LOG10_TOLERANCE = 0.05  # the search's bracket width, decades


def _small_problem():
    """A smoothing problem with a known answer: m = 60 data of a smooth model
    of n = 30 unknowns through a random operator, unit noise (sigma = 1)."""
    rng = np.random.default_rng(7)
    m, n = 60, 30
    G = rng.normal(size=(m, n))
    x_true = np.sin(np.linspace(0, 3 * np.pi, n))
    d = G @ x_true + rng.normal(size=m)
    L = np.diff(np.eye(n), axis=0)  # first differences
    return G, d, L


def _dense_chi2(G, d, L, lam):
    """chi^2 of the Tikhonov solution min |G x - d|^2 + lam^2 |L x|^2 by scipy.linalg.lstsq."""
    A = np.vstack([G, lam * L])
    b = np.concatenate([d, np.zeros(L.shape[0])])
    x = scipy.linalg.lstsq(A, b)[0]
    return float(np.sum((G @ x - d) ** 2)), x


def _misfit_of(G, d, L, calls):
    def misfit_of(lam, nearest):
        calls.append(lam)
        return _dense_chi2(G, d, L, lam)
    return misfit_of


@pytest.mark.parametrize("start", [None, 1e-2, 30.0])
def test_phase_2_takes_the_largest_weight_reaching_chi2_n(start):
    # Constable et al. (1987): of the models fitting to chi^2 = N, the smoothest,
    # i.e. the largest weight; the dense grid of scipy.linalg.lstsq solutions gives it
    G, d, L = _small_problem()
    target = float(G.shape[0])
    grid = np.geomspace(1e-3, 1e3, 1201)  # 0.005 decades apart
    chi2 = np.array([_dense_chi2(G, d, L, lam)[0] for lam in grid])
    assert chi2[0] < target < chi2[-1]  # the target is inside the range
    largest_reaching = grid[np.flatnonzero(chi2 <= target).max()]
    calls = []
    choice = occam_weight(_misfit_of(G, d, L, calls), 1e-3, 1e3, target, start=start,
                          log10_tolerance=LOG10_TOLERANCE)
    assert choice.phase == 2 and choice.reached
    assert choice.chi2 <= target
    # within the search tolerance below the largest weight reaching the target
    # (plus the dense grid's spacing above it)
    assert largest_reaching * 10 ** -LOG10_TOLERANCE <= choice.lambda_smooth <= largest_reaching * 10**0.005
    assert len(calls) <= 12  # a bracketing walk and a bisection, not a dense sweep


def test_phase_1_takes_the_least_misfit_when_no_weight_reaches_the_target():
    # target below the misfit floor in the range: Occam's phase 1 minimises the misfit
    G, d, L = _small_problem()
    lam_min, lam_max = 1.0, 100.0
    grid = np.geomspace(lam_min, lam_max, 201)
    chi2 = np.array([_dense_chi2(G, d, L, lam)[0] for lam in grid])
    target = 0.5 * chi2.min()
    choice = occam_weight(_misfit_of(G, d, L, []), lam_min, lam_max, target, start=10.0)
    assert choice.phase == 1 and not choice.reached
    assert choice.lambda_smooth == pytest.approx(grid[np.argmin(chi2)])
    assert choice.chi2 == pytest.approx(chi2.min(), rel=1e-9)


def test_the_largest_weight_in_the_range_when_it_already_reaches_the_target():
    G, d, L = _small_problem()
    target = 10.0 * _dense_chi2(G, d, L, 1e3)[0]  # every weight up to 1e3 fits
    choice = occam_weight(_misfit_of(G, d, L, []), 1e-3, 1e3, target, start=1.0)
    assert choice.phase == 2 and choice.lambda_smooth == 1e3


def test_bad_ranges_are_refused():
    with pytest.raises(ValueError):
        occam_weight(lambda lam, near: (0.0, None), 2.0, 1.0, 1.0)


def test_phase_1_finds_the_least_misfit_above_the_start_when_the_misfit_is_not_monotone():
    # e.g. a misfit computed after clipping the model into bounds falls as the weight
    # grows until clipping stops; phase 1 (Constable et al., 1987) still wants the least
    # misfit in the range. Known minimum at lambda = 10**0.5.
    def misfit_of(lam, nearest):
        return (np.log10(lam) - 0.5) ** 2 + 5.0, None

    choice = occam_weight(misfit_of, 1e-3, 1e3, 1.0, start=1e-2, factor=10**0.5)
    assert choice.phase == 1 and not choice.reached
    assert choice.lambda_smooth == pytest.approx(10**0.5)
