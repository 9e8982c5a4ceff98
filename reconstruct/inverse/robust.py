"""Robust weights for iteratively reweighted least squares (IRLS).

A pick whose residual is large compared with its uncertainty gets a smaller
weight, so that a few gross errors (cycle skips, picks on noise, a wrong node)
cannot bend the model. Residuals are taken in units of the pick's standard
deviation, ``u = r / (sigma * scale)``.

- Huber: ``w(u) = 1`` for ``|u| <= k``, ``k / |u|`` beyond; ``k = 1.345``.
  The weighted least-squares solution at convergence minimises Huber's loss
  (quadratic inside ``k``, linear outside).
- Tukey's biweight: ``w(u) = (1 - (u / c)^2)^2`` for ``|u| < c``, 0 beyond;
  ``c = 4.685``. Redescending: a gross error ends with weight zero. The loss
  is not convex, so it must start from a good (Huber) solution.

Both constants give 95 % efficiency for Gaussian errors (Holland and Welsch,
1977). The robust scale, where the sigmas are not trusted, is
``1.4826 * median(|u|)`` (the normalised median absolute deviation, which
equals the standard deviation for Gaussian errors).

References
----------
.. [1] Huber, P. J. (1964), Robust estimation of a location parameter, Annals of
   Mathematical Statistics 35(1), 73-101, doi:10.1214/aoms/1177703732.
.. [2] Beaton, A. E. and Tukey, J. W. (1974), The fitting of power series,
   meaning polynomials, illustrated on band-spectroscopic data, Technometrics
   16(2), 147-185, doi:10.1080/00401706.1974.10489171.
.. [3] Holland, P. W. and Welsch, R. E. (1977), Robust regression using
   iteratively reweighted least-squares, Communications in Statistics - Theory
   and Methods 6(9), 813-827, doi:10.1080/03610927708827533.
"""

from __future__ import annotations

import numpy as np

__all__ = ["ROBUST_LOSSES", "HUBER_K", "TUKEY_C", "robust_weights", "robust_scale"]

ROBUST_LOSSES = ("none", "huber", "tukey")
#: Huber's threshold in standard deviations (95 % Gaussian efficiency).
HUBER_K = 1.345
#: Tukey's biweight cut-off in standard deviations (95 % Gaussian efficiency).
TUKEY_C = 4.685
#: Normalised median absolute deviation: MAD times this is sigma for Gaussian data
#: (1 / Phi^-1(3/4); Rousseeuw and Croux 1993, Alternatives to the median absolute
#: deviation, JASA 88, 1273-1283). Defined once here; the void search uses it too.
MAD_TO_SIGMA = 1.482602218505602


def robust_weights(u, loss: str) -> np.ndarray:
    """IRLS weights of standardised residuals ``u`` (residual / sigma / scale).

    Parameters
    ----------
    u : array_like
        Residuals in standard deviations.
    loss : {"none", "huber", "tukey"}

    Returns
    -------
    ndarray
        Weights in [0, 1], same shape as ``u``; the weight multiplies the
        squared residual (so rows of a least-squares system are scaled by its
        square root).
    """
    a = np.abs(np.asarray(u, dtype=float))
    if loss == "none":
        return np.ones_like(a)
    if loss == "huber":
        return np.minimum(1.0, HUBER_K / np.maximum(a, 1e-300))
    if loss == "tukey":
        t = np.clip(a / TUKEY_C, 0.0, 1.0)
        return (1.0 - t * t) ** 2
    raise ValueError(f"loss must be one of {', '.join(ROBUST_LOSSES)} (got {loss!r})")


def robust_scale(u) -> float:
    """Normalised median absolute residual ``1.4826 * median(|u|)`` (> 0)."""
    a = np.abs(np.asarray(u, dtype=float))
    if a.size == 0:
        return 1.0
    value = MAD_TO_SIGMA * float(np.median(a))
    return value if value > 0 else max(float(a.max()), 1e-12)


