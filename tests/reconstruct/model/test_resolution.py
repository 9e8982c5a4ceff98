"""Tests for reconstruct.model.resolution: wavelength and first Fresnel zone."""

import numpy as np
import pytest
from scipy import constants

from reconstruct.model.resolution import fresnel_half_width_m, wavelength_m


def test_wavelength_in_air_at_100_mhz_is_about_three_metres():
    # c from scipy.constants (CODATA): lambda = c / f = 2.998 m at 100 MHz
    c_m_per_ns = constants.c * 1e-9
    assert wavelength_m(c_m_per_ns, 100.0) == pytest.approx(constants.c / 100e6, rel=1e-12)


def test_fresnel_midpoint_worked_example():
    # Williamson (1991), "A guide to the limits of resolution imposed by scattering in
    # ray tomography", Geophysics 56; Spetzler & Snieder (2004), "The Fresnel volume and
    # transmitted waves", Geophysics 69: half-period criterion, midpoint half-width
    # sqrt(lambda L / 4 + lambda^2 / 16); lambda = 1 m, L = 20 m gives 2.25 m
    # (worked value listed in tests/REFERENCES.md).
    assert fresnel_half_width_m(1.0, 20.0) == pytest.approx(2.25, abs=1e-12)


def test_fresnel_zone_is_the_half_period_ellipsoid_along_the_ray():
    # Definition of the first Fresnel zone (Spetzler & Snieder 2004): points whose
    # detour source -> point -> receiver exceeds L by exactly lambda / 2 on the boundary.
    lam, length = 0.8, 30.0
    x = np.linspace(0.5, 29.5, 13)
    r = fresnel_half_width_m(lam, length, x)
    detour = np.hypot(x, r) + np.hypot(length - x, r) - length
    np.testing.assert_allclose(detour, lam / 2, rtol=1e-10)
    assert np.argmax(r) == 6  # widest at the midpoint


def test_bad_values_are_refused():
    with pytest.raises(ValueError, match="wavelength"):
        fresnel_half_width_m(0.0, 10.0)
    with pytest.raises(ValueError, match="frequency_mhz"):
        wavelength_m(0.1, -5)
