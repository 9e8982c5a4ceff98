"""Estimates with their spread (reconstruct.interpret.estimates)."""

import math

import pytest
from scipy.stats import norm

from reconstruct.interpret.estimates import Z_95, Estimate, estimate_from_sigma


def test_z95_is_the_normal_quantile():
    # the 97.5 % quantile of the standard normal, from scipy (a reference library)
    assert Z_95 == pytest.approx(norm.ppf(0.975), abs=1e-12)


def test_symmetric_interval_and_physical_limit():
    e = estimate_from_sigma(10.0, 2.0)
    assert e.low95 == pytest.approx(10.0 - 2.0 * norm.ppf(0.975))
    assert e.high95 == pytest.approx(10.0 + 2.0 * norm.ppf(0.975))
    clipped = estimate_from_sigma(1.0, 2.0, lower_limit=0.0)
    assert clipped.low95 == 0.0 and clipped.cautious_low() == 0.0


def test_value_outside_interval_is_refused():
    with pytest.raises(ValueError):
        Estimate(5.0, 1.0, 6.0, 7.0)


def test_words_and_json():
    e = estimate_from_sigma(12.34, 1.0)
    assert e.words("m") == f"12.3 m (95 %: {12.34 - Z_95:.1f}-{12.34 + Z_95:.1f} m)"
    open_ended = Estimate(8.0, math.nan, 8.0, math.inf)
    assert open_ended.words("m³", 0) == "at least 8 m³"
    assert open_ended.as_dict()["high95"] is None
