"""Choice of the regularisation weight inside a nonlinear inversion: Occam's two phases.

At every linearised step, Occam's inversion (Constable, Parker and Constable,
1987) looks for the smoothest model that fits the data to the target misfit:

* phase 2, when some weight in the search range reaches ``chi^2 <= target``:
  the *largest* such weight (the smoothest model that fits);
* phase 1, when none does: the weight giving the *least* misfit in the range.

:func:`occam_weight` does that search over any misfit function of the weight,
assumed non-decreasing in the weight (true of Tikhonov-regularised least
squares; Hansen, 1992); where it is not (e.g. a misfit computed after
clipping the model into bounds), phase 1 still returns the least misfit among
the weights tried. The search walks from a start by a constant factor
until the target is bracketed, then bisects in log weight, so that the weight
returned reaches the target and lies within ``log10_tolerance`` (decades) of the
largest weight that does.

References
----------
.. [1] Constable, S. C., Parker, R. L. and Constable, C. G. (1987), Occam's
   inversion: a practical algorithm for generating smooth models from
   electromagnetic sounding data, Geophysics 52(3), 289-300,
   doi:10.1190/1.1442303.
.. [2] Hansen, P. C. (1992), Analysis of discrete ill-posed problems by means
   of the L-curve, SIAM Review 34(4), 561-580, doi:10.1137/1034115.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["OccamChoice", "occam_weight"]


@dataclass(frozen=True)
class OccamChoice:
    """The weight chosen by :func:`occam_weight`.

    Attributes
    ----------
    lambda_smooth : float
        The weight chosen.
    chi2 : float
        The misfit at it.
    phase : int
        2: the target was reached and this is the largest weight found that
        reaches it; 1: no weight in the range reaches it, this one gives the
        least misfit.
    reached : bool
        ``chi2 <= target``.
    payload : object
        What ``misfit_of`` returned beside the misfit at the chosen weight.
    trials : tuple of (float, float)
        Every (weight, misfit) evaluated, in order.
    """

    lambda_smooth: float
    chi2: float
    phase: int
    reached: bool
    payload: object = None
    trials: tuple = field(default=())


def occam_weight(misfit_of, lambda_min: float, lambda_max: float, target: float, *, start: float | None = None,
                 factor: float = 10.0, log10_tolerance: float = 0.05) -> OccamChoice:
    """Occam's choice of the regularisation weight in ``[lambda_min, lambda_max]``.

    Parameters
    ----------
    misfit_of : callable
        ``misfit_of(lam, nearest_payload) -> (chi2, payload)``: the misfit of the
        model solved at weight ``lam``; ``nearest_payload`` is the payload of the
        evaluated weight nearest in log (None at first), e.g. to warm-start a solver.
    lambda_min, lambda_max : float
        Search range, ``0 < lambda_min <= lambda_max``.
    target : float
        Target misfit (``N``, the number of data, for chi-square).
    start : float, optional
        First weight tried (clamped into the range; default ``lambda_max``).
        Starting at the previous iteration's weight saves solves.
    factor : float
        Step of the walk that brackets the target (> 1).
    log10_tolerance : float
        Width in decades of the final bracket.

    Returns
    -------
    OccamChoice

    References
    ----------
    Constable, Parker and Constable (1987), see the module notes.
    """
    if not 0 < lambda_min <= lambda_max:
        raise ValueError("need 0 < lambda_min <= lambda_max")
    if not factor > 1 or not log10_tolerance > 0:
        raise ValueError("need factor > 1 and log10_tolerance > 0")
    evaluated: dict[float, tuple] = {}
    order: list = []

    def evaluate(lam):
        lam = float(np.clip(lam, lambda_min, lambda_max))
        if lam not in evaluated:
            nearest = None
            if evaluated:
                nearest = evaluated[min(evaluated, key=lambda k: abs(np.log(k / lam)))][1]
            evaluated[lam] = misfit_of(lam, nearest)
            order.append((lam, float(evaluated[lam][0])))
        return evaluated[lam][0] <= target

    lam = lambda_max if start is None else float(np.clip(start, lambda_min, lambda_max))
    if evaluate(lam):
        # walk up until the target is lost (or the range ends)
        lo, hi = lam, None
        while lo < lambda_max:
            up = min(lo * factor, lambda_max)
            if evaluate(up):
                lo = up
            else:
                hi = up
                break
    else:
        # walk down until the target is reached (or the range ends)
        lo, hi = None, lam
        while hi > lambda_min:
            down = max(hi / factor, lambda_min)
            if evaluate(down):
                lo = down
                break
            hi = down
    if lo is None:
        # phase 1: no weight reaches the target; the least misfit (the largest
        # weight among equals, the smoother model). Below the start the misfit
        # was walked down to the floor; where the misfit is not monotone it may
        # also fall above the start: walk up while it keeps falling.
        up = lam
        while up < lambda_max:
            higher = min(up * factor, lambda_max)
            if evaluate(higher):
                # not monotone after all: a larger weight reaches the target
                return OccamChoice(higher, float(evaluated[higher][0]), 2, True, evaluated[higher][1],
                                   tuple(order))
            if evaluated[higher][0] >= evaluated[up][0]:
                break
            up = higher
        best = min(evaluated, key=lambda k: (evaluated[k][0], -k))
        chi2, payload = evaluated[best]
        return OccamChoice(best, float(chi2), 1, False, payload, tuple(order))
    while hi is not None and np.log10(hi / lo) > log10_tolerance:
        mid = float(np.sqrt(lo * hi))
        if evaluate(mid):
            lo = mid
        else:
            hi = mid
    chi2, payload = evaluated[lo]
    return OccamChoice(lo, float(chi2), 2, True, payload, tuple(order))
