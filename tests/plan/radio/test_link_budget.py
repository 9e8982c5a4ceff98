"""Tests for plan.radio.link_budget.

Outside sources: the exact complex-wavenumber values in REFERENCES.md (computed
with scipy.constants); the textbook closed form of the attenuation constant of
a conductive dielectric; Davis & Annan (1989) table of typical properties;
the Friis (1946) transmission equation and the free-space loss formula of
ITU-R P.525; the Fresnel equations at normal incidence; the head-wave example
of REFERENCES.md; the short dipole's sin^2 power pattern (Balanis, C. A. (2016),
Antenna Theory, 4th ed., chapter 4, from memory); the pattern of a dipole on a
dielectric half-space (Engheta, Papas & Elachi (1982), Radio Science 17(6);
Smith (1984), IEEE Trans. Antennas Propag. 32(3); from memory): the value
straight down is the Fresnel normal-incidence transmission, the far field
vanishes along the surface, and without a boundary the pattern is the free
dipole's; the rule of thumb range = 35 / conductivity attributed to Annan
(from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.constants

from plan.radio.link_budget import (
    LOW_LOSS_DB_PER_M,
    LinkBudget,
    link_budget_for_site,
    air_wave_arrives_first,
    attenuation_db_per_m,
    attenuation_low_loss_db_per_m,
    conductivity_rule_range_m,
    dipole_pattern_loss_db,
    ground_normals,
    ground_wave_loss_db,
    half_space_pattern_loss_db,
    interface_loss_db,
    link_range_m,
    pair_links,
    phase_velocity_m_per_ns,
    range_check,
    rule_of_thumb_range_m,
    site_pair_links,
    spreading_loss_db,
    straight_line_air_path,
)
from reconstruct.errors import InputError
from reconstruct.io.site import parse_site
from reconstruct.io.tables import Nodes

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9


def _site(ground=None, velocity=0.12, conductivity=1.0):
    return parse_site({
        "name": "test",
        "model": {"origin_m": [0, 0, 0], "size_m": [40, 20, 20], "cell_m": 1.0},
        "ground": ground or {"flat_elevation_m": 15.0},
        "rock": {"velocity_m_per_ns": velocity, "conductivity_ms_per_m": conductivity,
                 "antenna_frequency_mhz": 100},
    })


# REFERENCES.md "Attenuation": exact alpha from k = sqrt(w^2 mu0 eps - j w mu0 sigma), computed
# with scipy.constants; v = omega / beta.
@pytest.mark.parametrize("f_mhz, k_rel, sigma, exact_db, low_loss_db, v", [
    (100, 25, 30, 9.761, 9.816, 0.0596),
    (100, 9, 10, 5.427, 5.453, 0.0994),
    (250, 6, 1, 0.6679, 0.6679, 0.1224),
])
def test_attenuation_against_reference_table(f_mhz, k_rel, sigma, exact_db, low_loss_db, v):
    assert attenuation_db_per_m(f_mhz, k_rel, sigma) == pytest.approx(exact_db, abs=1.5e-3)
    assert attenuation_low_loss_db_per_m(k_rel, sigma) == pytest.approx(low_loss_db, abs=1.5e-3)
    assert phase_velocity_m_per_ns(f_mhz, k_rel, sigma) == pytest.approx(v, abs=1e-4)


def test_attenuation_matches_textbook_closed_form():
    # alpha = omega sqrt(mu eps / 2) sqrt(sqrt(1 + (sigma / (omega eps))^2) - 1), Np/m
    # (any electromagnetics text, e.g. Griffiths, Introduction to Electrodynamics, plane waves
    # in conductors; from memory)
    f, k_rel = np.array([50.0, 100.0, 400.0]), np.array([4.0, 16.0, 30.0])
    sigma = np.array([0.1, 20.0, 500.0])
    omega = 2 * np.pi * f * 1e6
    eps = k_rel * scipy.constants.epsilon_0
    ratio = sigma * 1e-3 / (omega * eps)
    alpha = omega * np.sqrt(scipy.constants.mu_0 * eps / 2) * np.sqrt(np.sqrt(1 + ratio**2) - 1)
    np.testing.assert_allclose(attenuation_db_per_m(f, k_rel, sigma), 20 * np.log10(np.e) * alpha, rtol=1e-9)


def test_low_loss_constant_is_1636_and_1_69_is_three_percent_high():
    # REFERENCES.md: Z0 / 2 * 8.686 dB/Np * 1e-3 = 1.636; the handbook 1.69 is about 3 % high
    z0 = math.sqrt(scipy.constants.mu_0 / scipy.constants.epsilon_0)
    assert LOW_LOSS_DB_PER_M == pytest.approx(z0 / 2 * 1e-3 * 20 * math.log10(math.e), rel=1e-12)
    assert round(LOW_LOSS_DB_PER_M, 3) == 1.636
    assert 1.69 / LOW_LOSS_DB_PER_M - 1 == pytest.approx(0.033, abs=0.003)


@pytest.mark.parametrize("material, k_range, sigma_range, v_table, alpha_range", [
    # Davis & Annan (1989), Ground-penetrating radar for high-resolution mapping of soil and
    # rock stratigraphy, Geophysical Prospecting 37(5), table of typical properties (REFERENCES.md)
    ("limestone", (4, 8), (0.5, 2), 0.12, (0.4, 1)),
    ("granite", (4, 6), (0.01, 1), 0.13, (0.01, 1)),
    ("clay", (5, 40), (2, 1000), 0.06, (1, 300)),
])
def test_mid_range_rock_against_davis_annan_table(material, k_range, sigma_range, v_table, alpha_range):
    # mid-range values: arithmetic mean of K, geometric mean of sigma, at 100 MHz
    k_mid = sum(k_range) / 2
    sigma_mid = math.sqrt(sigma_range[0] * sigma_range[1])
    v = phase_velocity_m_per_ns(100, k_mid, sigma_mid)
    alpha = attenuation_db_per_m(100, k_mid, sigma_mid)
    assert v == pytest.approx(v_table, abs=0.01), material  # the table's +-0.01 m/ns
    assert alpha_range[0] <= alpha <= alpha_range[1], material


def test_spreading_is_the_friis_free_space_loss():
    # Friis (1946): Pr / Pt = Gt Gr (lambda / (4 pi r))^2 with isotropic gains
    lam = scipy.constants.c / 100e6
    r = np.array([5.0, 10.0, 100.0])
    friis_db = -10 * np.log10((lam / (4 * np.pi * r)) ** 2)
    np.testing.assert_allclose(spreading_loss_db(r, lam), friis_db, rtol=1e-12)
    # ITU-R P.525: L = 32.44 + 20 log10(f / MHz) + 20 log10(d / km) dB
    assert spreading_loss_db(10.0, lam) == pytest.approx(32.44 + 40 - 40, abs=0.01)
    assert spreading_loss_db(0.01, lam) == 0.0  # near field: no gain


def test_dipole_pattern_follows_sin_squared_with_a_null_on_the_axis():
    # Balanis (2016), chapter 4 (from memory): the short dipole's power pattern is sin^2(theta),
    # zero along its axis, largest broadside
    axis = np.tile([0.0, 0.0, -1.0], (4, 1))
    theta = np.radians([90.0, 30.0, 60.0, 0.0])
    direction = np.column_stack([np.sin(theta), np.zeros(4), np.cos(theta)])
    loss = dipole_pattern_loss_db(axis, direction)
    np.testing.assert_allclose(loss[:3], -10 * np.log10(np.sin(theta[:3]) ** 2), atol=1e-9)
    assert loss[3] == 60.0
    assert dipole_pattern_loss_db(np.full((1, 3), np.nan), direction[:1])[0] == 0.0  # isotropic


def test_interface_loss_is_the_fresnel_normal_incidence_transmission():
    # Fresnel equations at normal incidence: R = ((n - 1) / (n + 1))^2, transmitted T = 1 - R
    for k_rel in (1.0, 4.0, 6.8, 81.0):
        n = math.sqrt(k_rel)
        reflected = ((n - 1) / (n + 1)) ** 2
        assert interface_loss_db(k_rel) == pytest.approx(-10 * math.log10(1 - reflected), abs=1e-12)


def _budget(**changes):
    values = dict(system_performance_db=100.0, attenuation_db_per_m=0.5, wavelength_m=1.2,
                  interface_loss_db=1.0, velocity_m_per_ns=0.12, attenuation_low_loss_db_per_m=0.5)
    values.update(changes)
    return LinkBudget(**values)


def test_range_in_lossless_rock_is_where_friis_uses_the_whole_budget():
    # Friis (1946) solved for r: r = lambda / (4 pi) * 10^(P / 20)
    budget = _budget(attenuation_db_per_m=0.0, attenuation_low_loss_db_per_m=0.0)
    assert link_range_m(budget) == pytest.approx(1.2 / (4 * math.pi) * 1e5, rel=1e-12)


def test_range_with_attenuation_leaves_zero_margin():
    budget = _budget()
    r = link_range_m(budget)
    spread = -10 * math.log10((1.2 / (4 * math.pi * r)) ** 2)  # Friis
    assert 100.0 - spread - 0.5 * r == pytest.approx(0.0, abs=1e-6)


def test_rule_of_thumb_is_ten_to_fifteen_wavelengths():
    # common practice, no published source: penetration of 10 to 15 wavelengths in resistive rock
    assert rule_of_thumb_range_m(1.15) == pytest.approx((11.5, 17.25))


def test_air_path_over_a_bench_step_by_hand_geometry():
    # lower bench z = 10 for y < 10, upper bench z = 15 for y >= 10 (vertical face at y = 10)
    site = _site({"benches": [
        {"name": "low", "floor_m": 10, "polygon_m": [[0, 0], [40, 0], [40, 10], [0, 10]]},
        {"name": "high", "floor_m": 15, "polygon_m": [[0, 10], [40, 10], [40, 20], [0, 20]]}]})
    a = np.array([[20.0, 5.0, 10.0], [20.0, 2.0, 5.0]])
    b = np.array([[20.0, 15.0, 15.0], [20.0, 18.0, 5.0]])
    air, crossings = straight_line_air_path(site.ground.elevation_m, a, b, step_m=0.01)
    # first line: in the air from (5, 10) up to the face at (10, 12.5): sqrt(25 + 6.25) m,
    # less the 0.5 m next to the node that counts as ground (the node is coupled to the ground);
    # two crossings: out of the ground beside the node, into the face
    assert air[0] == pytest.approx(math.sqrt(31.25) - 0.5, abs=0.02)
    assert crossings[0] == 2
    # second line: buried all the way
    assert air[1] == 0.0 and crossings[1] == 0


def test_air_wave_first_for_the_reference_example_and_not_for_deep_close_nodes():
    # REFERENCES.md: nodes 3 m deep, 44 m apart, 0.115 m/ns: head wave about 195 ns, direct about 380 ns
    site = _site(velocity=0.115)
    a = np.array([[0.0, 10.0, 12.0], [10.0, 10.0, 1.0]])
    b = np.array([[39.9, 10.0, 12.0], [14.0, 10.0, 1.0]])
    a[0, 0], b[0, 0] = -2.0, 42.0
    h, x, v, c = 3.0, 44.0, 0.115, SPEED_OF_LIGHT_M_PER_NS
    assert x / c + 2 * h * math.sqrt(1 / v**2 - 1 / c**2) == pytest.approx(195, abs=1)
    flags = air_wave_arrives_first(site.ground.elevation_m, a, b, 0.115)
    assert flags.tolist() == [True, False]


def test_pair_margin_adds_up_the_terms_and_free_space_is_friis():
    # rock at the speed of light without conductivity: free space, so the margin is the budget
    # less the Friis loss (Friis 1946) for two surface nodes
    site = _site(velocity=0.2998, conductivity=0.0)
    budget = _budget(attenuation_db_per_m=0.0, attenuation_low_loss_db_per_m=0.0, wavelength_m=2.998)
    xyz = np.array([[5.0, 10.0, 15.0], [25.0, 10.0, 15.0], [5.0, 10.0, 5.0]])
    axes = np.array([[np.nan] * 3, [np.nan] * 3, [0.0, 0.0, -1.0]])
    links = pair_links(site, budget, xyz, axes, [0, 0], [1, 2])
    friis = -10 * math.log10((2.998 / (4 * math.pi * 20.0)) ** 2)
    assert links.margin_db[0] == pytest.approx(100.0 - friis, abs=1e-9)
    # node 2 sits straight below node 0 on a vertical dipole axis: the null
    assert links.pattern_db[1] == 60.0
    total = links.spreading_db + links.attenuation_db + links.pattern_db + links.crossing_db
    np.testing.assert_allclose(links.margin_db, 100.0 - total)
    assert links.heard.tolist() == [True, True] and links.air_wave_first[0]


def test_link_budget_refuses_bad_settings():
    from reconstruct.errors import InputError

    with pytest.raises(InputError, match="system_performance_db must be a finite number > 0"):
        _budget(system_performance_db=-1.0)


def _directions_at(theta_deg, phi_deg=0.0):
    """Unit directions at theta from straight down (the inward normal), azimuth phi."""
    t, p = np.radians(np.atleast_1d(theta_deg)), math.radians(phi_deg)
    return np.column_stack([np.sin(t) * math.cos(p), np.sin(t) * math.sin(p), -np.cos(t)])


def test_half_space_pattern_without_a_boundary_is_the_free_dipole_averaged_over_azimuth():
    # n = 1: no boundary. A horizontal short dipole radiates as sin^2 of the angle to its axis
    # (Balanis 2016); averaged over the dipole's azimuth that is 1 - sin^2(theta) / 2
    theta = np.array([0.0, 20.0, 45.0, 70.0, 85.0])
    d = _directions_at(theta)
    up = np.tile([0.0, 0.0, 1.0], (theta.size, 1))
    free = 1.0 - np.sin(np.radians(theta)) ** 2 / 2.0
    np.testing.assert_allclose(half_space_pattern_loss_db(up, d, 1.0), -10 * np.log10(free), atol=1e-9)
    # the same average of the textbook sin^2 pattern, numerically over azimuth
    phi = np.radians(np.arange(0.0, 360.0, 1.0))
    for t in np.radians(theta):
        axis_cos = np.sin(t) * np.cos(phi)
        assert np.mean(1.0 - axis_cos**2) == pytest.approx(1.0 - np.sin(t) ** 2 / 2.0, abs=1e-9)


def test_half_space_pattern_straight_down_is_the_fresnel_transmission_and_null_along_the_surface():
    n = math.sqrt(6.8)
    up = np.array([[0.0, 0.0, 1.0]])
    # straight down: the field transmission at normal incidence, 2 n / (1 + n), squared (Fresnel;
    # by reciprocity, a wave from the rock arriving at the dipole); a gain of about 3.2 dB
    nadir = half_space_pattern_loss_db(up, _directions_at(0.0), n)[0]
    assert nadir == pytest.approx(-20 * math.log10(2 * n / (1 + n)), abs=1e-9)
    assert -3.4 < nadir < -3.0
    # along the surface the far field of a dipole on the ground vanishes (Engheta et al. 1982)
    assert half_space_pattern_loss_db(up, _directions_at(90.0), n)[0] == 60.0
    # at the critical angle sin(theta) = 1 / n the TE field doubles (total reflection) and the TM
    # tangential field vanishes: power (4 + 0) / 2 = 2
    critical = math.degrees(math.asin(1 / n))
    assert half_space_pattern_loss_db(up, _directions_at(critical), n)[0] == pytest.approx(
        -10 * math.log10(2.0), abs=1e-6)
    # straight up into the air: transmission 2 / (1 + n) from the air side (Fresnel), a loss
    zenith = half_space_pattern_loss_db(up, -_directions_at(0.0), n)[0]
    assert zenith == pytest.approx(-20 * math.log10(2 / (1 + n)), abs=1e-9)
    # a node not on the ground (NaN normal) has no half-space pattern
    assert half_space_pattern_loss_db(np.full((1, 3), np.nan), _directions_at(30.0), n)[0] == 0.0


def test_ground_wave_bound_falls_as_one_over_r_squared():
    # Annan (1973), from memory: the ground wave's amplitude falls as 1/r^2, a further
    # 20 log10(k r) dB over the path, half at each end
    lam = 1.15
    for r in (5.0, 20.0, 40.0):
        assert 2 * ground_wave_loss_db(r, lam) == pytest.approx(20 * math.log10(2 * math.pi * r / lam))
    assert ground_wave_loss_db(0.05, lam) == 0.0


def test_rule_of_thumb_range_is_35_over_the_conductivity_and_the_warning_counts_the_pairs():
    # attributed to Annan, from memory: range in metres about 35 / sigma[mS/m] in low-loss rock
    assert conductivity_rule_range_m(1.0) == 35.0
    assert conductivity_rule_range_m(0.5) == 70.0
    assert conductivity_rule_range_m(0.0) == math.inf
    length = np.array([10.0, 20.0, 30.0, 40.0, 50.0, 80.0])
    heard = np.array([True, True, True, True, True, False])
    check = range_check(length, heard, 1.0)
    assert check["heard_beyond_rule"] == 2 and check["share_of_heard_beyond_rule"] == pytest.approx(0.4)
    assert "2 of the 5 heard pairs (40 %)" in check["warning"] and "35 m" in check["warning"]
    assert check["heard_length_m_percentiles"]["50"] == pytest.approx(np.median(length[heard]))
    quiet = range_check(length, length < 35, 1.0)
    assert quiet["heard_beyond_rule"] == 0 and quiet["warning"] is None
    assert range_check(length, heard, 0.0)["rule_range_m"] is None


def _bench_site(near_surface_loss_db=0.0):
    return parse_site({
        "name": "test benches",
        "model": {"origin_m": [0, 0, 0], "size_m": [40, 20, 20], "cell_m": 1.0},
        "ground": {"benches": [
            {"name": "low", "floor_m": 10, "polygon_m": [[0, 0], [40, 0], [40, 10], [0, 10]]},
            {"name": "high", "floor_m": 15, "polygon_m": [[0, 10], [40, 10], [40, 20], [0, 20]]}]},
        "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "boreholes": [{"id": "BH1", "collar_m": [20, 5, 10], "azimuth_deg": 0, "dip_deg": 90, "length_m": 9}],
        "radar": {"near_surface_loss_db": near_surface_loss_db},
    })


def _bench_nodes():
    xyz = np.array([[20.0, 4.0, 10.0], [20.0, 10.05, 12.5], [20.0, 5.0, 3.0], [30.0, 4.0, 10.0]])
    return Nodes(ids=("S1", "F1", "B1", "S2"), xyz_m=xyz, kinds=("surface", "face", "borehole", "surface"),
                 boreholes=(None, None, "BH1", None), lines=np.arange(2, 6), source="test nodes")


def test_ground_normals_point_up_on_a_bench_and_out_of_a_face():
    normals = ground_normals(_bench_site(), _bench_nodes())
    np.testing.assert_allclose(normals[0], [0, 0, 1], atol=1e-12)  # flat bench floor
    np.testing.assert_allclose(normals[1], [0, -1, 0], atol=1e-12)  # the face looks south, to the lower bench
    assert np.isnan(normals[2]).all()  # borehole node: a dipole along its hole instead


def test_near_surface_loss_is_charged_at_each_node_on_the_ground():
    site = _bench_site(near_surface_loss_db=2.5)
    budget = link_budget_for_site(site)
    links = site_pair_links(site, budget, _bench_nodes(), [0, 0, 2], [2, 3, 3])
    # surface to borehole: one end on the ground; surface to surface: two; the terms add up
    np.testing.assert_allclose(links.near_surface_db, [2.5, 5.0, 2.5])
    total = links.spreading_db + links.attenuation_db + links.pattern_db + links.near_surface_db + links.crossing_db
    np.testing.assert_allclose(links.margin_db, budget.system_performance_db - total)
    with pytest.raises(InputError, match="radar.near_surface_loss_db"):
        _bench_site(near_surface_loss_db=-1.0)
