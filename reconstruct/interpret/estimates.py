"""Quantities with their spread: the shared language of body refinement, screening and reports.

A body refined against the picks (:mod:`reconstruct.interpret.refine`)
carries each size as an :class:`Estimate`: the fitted value, one standard
deviation, and a cautious 95 % interval. Screening reads the cautious side
(the thinnest plausible roof, the widest plausible span) through
:meth:`Estimate.cautious_low` and :meth:`Estimate.cautious_high`; reports
print :meth:`Estimate.as_dict`.

The 95 % interval is not assumed symmetric: a bootstrap or a bounded
parameter can make it lopsided, and a slow body's extent is only a lower
bound (its ``high95`` is then infinite).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Estimate", "estimate_from_sigma", "Z_95"]

#: Two-sided 95 % quantile of the standard normal distribution (1.959964...), as
#: scipy.stats.norm.ppf(0.975) gives it.
Z_95 = 1.959963984540054


@dataclass(frozen=True)
class Estimate:
    """A fitted quantity: value, one standard deviation and a cautious 95 % interval.

    Units are those of the field that holds it (``volume_m3`` in m^3,
    ``roof_thickness_m`` in m, ...). ``low95 <= value <= high95``; ``sigma``
    may be NaN when no spread could be estimated, and then the interval is
    (-inf, inf) unless set otherwise.
    """

    value: float
    sigma: float
    low95: float
    high95: float

    def __post_init__(self):
        if not (self.low95 <= self.value <= self.high95) and math.isfinite(self.value):
            raise ValueError(f"Estimate: value {self.value!r} outside its 95 % interval "
                             f"[{self.low95!r}, {self.high95!r}]")

    def cautious_low(self) -> float:
        """The low end of the 95 % interval (for a roof: the thinnest plausible)."""
        return self.low95

    def cautious_high(self) -> float:
        """The high end of the 95 % interval (for a span: the widest plausible)."""
        return self.high95

    def as_dict(self, digits: int = 3) -> dict:
        """``{"value", "sigma", "low95", "high95"}``, rounded; None for non-finite figures (JSON has no inf)."""
        def clean(x):
            return round(float(x), digits) if x is not None and math.isfinite(x) else None
        return {"value": clean(self.value), "sigma": clean(self.sigma),
                "low95": clean(self.low95), "high95": clean(self.high95)}

    def words(self, unit: str, digits: int = 1) -> str:
        """For a report: "12.3 m (95 %: 10.1-14.6 m)", or "at least 12.3 m" for an open upper end."""
        fmt = f"{{:.{digits}f}}"
        if not math.isfinite(self.high95):
            return f"at least {fmt.format(self.low95 if math.isfinite(self.low95) else self.value)} {unit}"
        return (f"{fmt.format(self.value)} {unit} (95 %: {fmt.format(self.low95)}-"
                f"{fmt.format(self.high95)} {unit})")


def estimate_from_sigma(value: float, sigma: float, *, lower_limit: float = -math.inf,
                        upper_limit: float = math.inf) -> Estimate:
    """A symmetric normal 95 % interval, ``value +- Z_95 sigma``, clipped to physical limits.

    ``lower_limit`` and ``upper_limit`` are the limits the quantity cannot
    pass (a volume is at least 0). A NaN ``sigma`` gives the widest interval
    the limits allow.
    """
    if not math.isfinite(sigma):
        return Estimate(value, sigma, lower_limit, upper_limit)
    low = max(value - Z_95 * sigma, lower_limit)
    high = min(value + Z_95 * sigma, upper_limit)
    return Estimate(value, sigma, min(low, value), max(high, value))
