"""Tests for ``reconstruct.model.petrophysics``.

Outside sources: Topp, G. C., Davis, J. L. and Annan, A. P. (1980),
Electromagnetic determination of soil water content: measurements in coaxial
transmission lines, Water Resources Research 16(3), 574-582 (the two fits;
check pairs computed from those fits); Davis, J. L.
and Annan, A. P. (1989), Ground-penetrating radar for high-resolution mapping
of soil and rock stratigraphy, Geophysical Prospecting 37(5), 531-551 (table
of K and v for air and fresh water); scipy.constants for c.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.constants

from reconstruct.model.petrophysics import (
    SOIL_FIT_CAUTION,
    permittivity_topp,
    petrophysics_arrays,
    relative_permittivity,
    velocity_from_permittivity,
    water_content_topp,
)


@pytest.mark.parametrize("permittivity, theta", [(4, 0.0553), (10, 0.1883), (20, 0.3454), (30, 0.4441)])
def test_water_content_matches_topp_1980_check_pairs(permittivity, theta):
    # Topp, Davis & Annan (1980), theta(K); pairs from REFERENCES.md
    assert water_content_topp(permittivity) == pytest.approx(theta, abs=5e-5)


@pytest.mark.parametrize("theta, permittivity",
                         [(0.05, 3.850), (0.1, 5.343), (0.2, 10.116), (0.3, 16.889), (0.4, 25.201)])
def test_permittivity_matches_topp_1980_check_pairs(theta, permittivity):
    # Topp, Davis & Annan (1980), K(theta); pairs from REFERENCES.md
    assert permittivity_topp(theta) == pytest.approx(permittivity, abs=5e-4)


def test_topp_round_trip_within_the_stated_tolerance():
    # REFERENCES.md: the two fits are separate regressions; round trip within 0.025
    theta = np.linspace(0.05, 0.5, 10)
    assert np.max(np.abs(water_content_topp(permittivity_topp(theta)) - theta)) < 0.025


def test_air_and_fresh_water_permittivity_from_davis_annan_1989_velocities():
    # Davis & Annan (1989) table: air v 0.30 m/ns K 1; fresh water v 0.033 m/ns K 80
    assert relative_permittivity(0.2998) == pytest.approx(1.0, abs=0.001)
    assert relative_permittivity(0.033) == pytest.approx(80.0, rel=0.04)
    c_m_per_ns = scipy.constants.c * 1e-9
    assert velocity_from_permittivity(1.0) == pytest.approx(c_m_per_ns, rel=1e-12)
    # limestone K 4-8 (Davis & Annan 1989) brackets the table's 0.12 m/ns
    assert 4 <= relative_permittivity(0.12) <= 8


def test_relative_permittivity_refuses_non_physical_velocity():
    with pytest.raises(ValueError, match="velocity_m_per_ns"):
        relative_permittivity(np.array([0.1, 0.0]))
    with pytest.raises(ValueError, match="velocity_m_per_ns"):
        relative_permittivity(float("nan"))


def test_cube_arrays_leave_air_and_out_of_fit_cells_without_water_content():
    velocity = np.array([[[0.2998, 0.2998, 0.12, 0.06]]])
    ground = np.array([[[False, True, True, True]]])
    arrays = petrophysics_arrays(velocity, ground)
    k = arrays["relative_permittivity"]
    theta = arrays["water_content_topp"]
    assert k.shape == velocity.shape
    # air cell: no water content; ground cell at air velocity (K = 1) is outside the fit
    assert np.isnan(theta[0, 0, 0]) and np.isnan(theta[0, 0, 1])
    # wet clay at 0.06 m/ns (Davis & Annan 1989 table) is wetter than limestone at 0.12
    assert theta[0, 0, 3] > theta[0, 0, 2] > 0
    assert "soils" in SOIL_FIT_CAUTION
