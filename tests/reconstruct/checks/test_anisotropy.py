"""Tests for elliptical anisotropy: the pick-check fit, the stretched geometry of the forward
model, and the inversion with and without the anisotropy modelled.

Outside check: the exact travel time in homogeneous elliptically anisotropic rock (Thomsen 1986,
Weak elastic anisotropy, Geophysics 51(10), the elliptical case epsilon = delta): the wavefront
from a point is an ellipsoid, t^2 = (d_across_axis / v_along_beds)^2 + (d_along_axis / v_across_beds)^2.
"""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from reconstruct.checks.anisotropy import fit_elliptical_anisotropy
from reconstruct.forward.anisotropy import stretched_geometry
from reconstruct.model.grid import Grid

V_ALONG, V_ACROSS = 0.125, 0.105  # m/ns, ratio 1.19: a bedded limestone or shale (invented)


def _exact_ns(a, b, v_along=V_ALONG, v_across=V_ACROSS):
    d = np.asarray(b, dtype=float) - np.asarray(a, dtype=float)
    return np.sqrt((np.hypot(d[..., 0], d[..., 1]) / v_along) ** 2 + (d[..., 2] / v_across) ** 2)


def _borehole_pairs():
    # three vertical holes, nodes 6 to 16 m deep; every pair once
    xyz = np.array([[x, y, 18.0 - z] for x, y in ((3, 3), (17, 4), (10, 8)) for z in range(6, 17, 2)], dtype=float)
    a, b = np.triu_indices(len(xyz), 1)
    return xyz, a, b


def test_the_fit_recovers_the_ratio_and_says_when_it_is_measurable():
    xyz, a, b = _borehole_pairs()
    rng = np.random.default_rng(2)
    t = _exact_ns(xyz[a], xyz[b]) + rng.normal(0, 0.3, a.size)
    fit = fit_elliptical_anisotropy(xyz[a], xyz[b], t, np.full(a.size, 0.3), "z")
    assert abs(fit.ratio - V_ALONG / V_ACROSS) < 3 * fit.ratio_sd and fit.measurable
    assert fit.velocity_along_beds_m_per_ns == pytest.approx(V_ALONG, rel=0.01)
    iso = _exact_ns(xyz[a], xyz[b], 0.115, 0.115) + rng.normal(0, 0.3, a.size)
    fit = fit_elliptical_anisotropy(xyz[a], xyz[b], iso, np.full(a.size, 0.3), "z")
    assert not fit.measurable and abs(fit.ratio - 1) < 3 * fit.ratio_sd


def test_stretched_geometry_keeps_straight_ray_times_exact():
    from reconstruct.forward.straight_rays import straight_ray_matrix

    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (20, 10, 20))
    xyz, a, b = _borehole_pairs()
    ray_grid, ray_xyz = stretched_geometry(grid, xyz, V_ALONG / V_ACROSS, "z")
    G = straight_ray_matrix(ray_grid, ray_xyz[a], ray_xyz[b])
    times = G @ np.full(grid.n_cells, 1.0 / V_ALONG)
    np.testing.assert_allclose(times, _exact_ns(xyz[a], xyz[b]), rtol=1e-9)


def test_eikonal_fields_in_the_stretched_geometry_give_the_elliptical_times():
    # bent-ray physics: the travel-time field of the stretched grid, homogeneous rock (no air)
    from reconstruct.forward.first_arrivals import first_arrival_times
    from reconstruct.parallel import Executor

    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (20, 10, 20))
    xyz, a, b = _borehole_pairs()
    ray_grid, ray_xyz = stretched_geometry(grid, xyz, V_ALONG / V_ACROSS, "z")
    times = first_arrival_times(ray_grid, np.full(grid.shape, 1.0 / V_ALONG), ray_xyz, a, b,
                                executor=Executor(kind="serial"))
    exact = _exact_ns(xyz[a], xyz[b])
    assert np.max(np.abs(times / exact - 1)) < 0.01  # the eikonal's own accuracy in uniform rock


def _inputs(times, xyz, a, b):
    """The small test site, borehole nodes at ``xyz`` and one-way picks ``a -> b`` (sigma 0.3 ns)."""
    from reconstruct.io.site import parse_site
    from reconstruct.io.tables import Nodes, Picks
    from tests.reconstruct.small_site import SITE_YAML

    site = parse_site(yaml.safe_load(SITE_YAML.format(cell=1.0)))
    n, m = len(xyz), a.size
    nodes = Nodes(ids=tuple(f"N{k}" for k in range(n)), xyz_m=xyz, kinds=("borehole",) * n,
                  boreholes=(None,) * n, lines=np.arange(2, n + 2), source="nodes (test)")
    picks = Picks(tx=a, rx=b, time_ns=times, sigma_ns=np.full(m, 0.3), amplitude=None, quality=None,
                  lines=np.arange(2, m + 2), excluded=(), source="picks (test)", n_rows=m)
    return site, nodes, picks


def _run(times, xyz, a, b, ratio, tmp_path, from_picks=False):
    from reconstruct.inverse.options import InversionOptions
    from reconstruct.pipeline import ProcessingSettings, process_survey

    site, nodes, picks = _inputs(times, xyz, a, b)
    settings = ProcessingSettings(rays="straight", find_bodies=True, anisotropy_from_picks=from_picks,
                                  inversion=InversionOptions(anisotropy_ratio=ratio, anisotropy_axis="z"))
    return process_survey(site, nodes, picks, settings)


@pytest.mark.slow
def test_an_anisotropic_half_space_shows_false_anomalies_only_when_inverted_as_isotropic(tmp_path):
    xyz, a, b = _borehole_pairs()
    times = _exact_ns(xyz[a], xyz[b]) + np.random.default_rng(4).normal(0, 0.3, a.size)
    isotropic = _run(times, xyz, a, b, 1.0, tmp_path)
    modelled = _run(times, xyz, a, b, V_ALONG / V_ACROSS, tmp_path)
    covered = modelled.run.ray_count > 0
    v_iso = isotropic.velocity_m_per_ns[covered]
    v_mod = modelled.velocity_m_per_ns[covered]
    # measured: the isotropic cube fits the picks (chi^2/N 0.83) with false structure, 0.097 to
    # 0.131 m/ns (1st to 99th percentile; fast where rays run along the beds, slow where they
    # cross them) in a rock that is uniform; with the anisotropy modelled it is 0.1248 to 0.1250
    # m/ns (chi^2/N 0.77). In this layout the body finder's threshold calls neither a body.
    false_iso = np.abs(v_iso / np.median(v_iso) - 1) > 0.05
    false_mod = np.abs(v_mod / np.median(v_mod) - 1) > 0.05
    assert false_iso.mean() > 0.05 and not false_mod.any()
    assert np.ptp(np.percentile(v_iso, [1, 99])) > 20 * np.ptp(np.percentile(v_mod, [1, 99]))
    assert len(modelled.analysis.bodies) == 0
    assert modelled.run.result.chi2 / modelled.run.result.n_picks < 2.0
    assert np.median(v_mod) == pytest.approx(V_ALONG, rel=0.01)  # the cube holds the velocity along the beds


@pytest.mark.slow
def test_the_ratio_can_come_from_the_pick_checks(tmp_path):
    xyz, a, b = _borehole_pairs()
    times = _exact_ns(xyz[a], xyz[b]) + np.random.default_rng(4).normal(0, 0.3, a.size)
    result = _run(times, xyz, a, b, 1.0, tmp_path, from_picks=True)
    record = result.check_summary["anisotropy_from_picks"]
    assert record["measurably_anisotropic"]
    assert result.run.options.anisotropy_ratio == pytest.approx(V_ALONG / V_ACROSS, abs=3 * record["ratio_sd"])
    v = result.velocity_m_per_ns[result.run.ray_count > 0]
    assert np.ptp(np.percentile(v, [1, 99])) < 0.005


def test_the_fit_with_clock_offsets_is_not_fooled_by_them():
    xyz, a, b = _borehole_pairs()
    rng = np.random.default_rng(8)
    offsets = rng.normal(0, 3.0, len(xyz))
    t = _exact_ns(xyz[a], xyz[b]) + offsets[b] - offsets[a] + rng.normal(0, 0.3, a.size)
    fit = fit_elliptical_anisotropy(xyz[a], xyz[b], t, np.full(a.size, 0.3), "z", clock=(a, b, len(xyz)))
    assert abs(fit.ratio - V_ALONG / V_ACROSS) < 3 * fit.ratio_sd and fit.measurable


def _exact_tilted_ns(a, b, axis, v_along=V_ALONG, v_across=V_ACROSS):
    d = np.asarray(b, dtype=float) - np.asarray(a, dtype=float)
    along_axis = d @ axis
    across = np.linalg.norm(d - along_axis[:, None] * axis, axis=1)
    return np.sqrt((across / v_along) ** 2 + (along_axis / v_across) ** 2)


def test_dipping_beds_by_resampling_keep_straight_ray_and_field_times():
    # beds dipping 30 degrees towards azimuth 120: the axis is their normal
    from reconstruct.forward.anisotropy import anisotropic_geometry, axis_from_text
    from reconstruct.forward.first_arrivals import first_arrival_times
    from reconstruct.forward.straight_rays import straight_ray_matrix
    from reconstruct.parallel import Executor

    axis = axis_from_text("30/120")
    d, az = np.radians(30.0), np.radians(120.0)
    assert np.allclose(axis, [np.sin(d) * np.sin(az), np.sin(d) * np.cos(az), np.cos(d)])
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (20, 10, 20))
    xyz, a, b = _borehole_pairs()
    geometry = anisotropic_geometry(grid, xyz, V_ALONG / V_ACROSS, "30/120")
    exact = _exact_tilted_ns(xyz[a], xyz[b], axis)
    G = geometry.operator(straight_ray_matrix(geometry.grid, geometry.xyz_m[a], geometry.xyz_m[b]))
    np.testing.assert_allclose(G @ np.full(grid.n_cells, 1 / V_ALONG), exact, rtol=1e-6)
    slowness = geometry.slowness(np.full(grid.n_cells, 1 / V_ALONG), 1 / 0.03)
    times = first_arrival_times(geometry.grid, slowness, geometry.xyz_m, a, b, executor=Executor(kind="serial"))
    assert np.max(np.abs(times / exact - 1)) < 0.01
    np.testing.assert_allclose(geometry.to_site(geometry.xyz_m), xyz, atol=1e-9)


@pytest.mark.slow
def test_dipping_beds_modelled_leave_a_uniform_cube(tmp_path):
    from reconstruct.forward.anisotropy import axis_from_text

    xyz, a, b = _borehole_pairs()
    times = _exact_tilted_ns(xyz[a], xyz[b], axis_from_text("30/120")) + np.random.default_rng(5).normal(0, 0.3, a.size)
    results = {}
    from reconstruct.inverse.options import InversionOptions
    from reconstruct.inverse.straight import straight_ray_tomography

    for name, ratio in (("isotropic", 1.0), ("modelled", V_ALONG / V_ACROSS)):
        # one-way picks without clock offsets: no time-zero terms (with them the weight search of
        # this small case stops at chi^2/N 3.7-3.9 whatever the axis: measured, left for later)
        run = straight_ray_tomography(*_inputs(times, xyz, a, b), InversionOptions(
            anisotropy_ratio=ratio, anisotropy_axis="30/120", time_zero="none"))
        results[name] = run.result.velocity_m_per_ns[run.ray_count.ravel() > 0]
    # measured: modelled 0.1248-0.1249 m/ns (chi^2/N 1.03); inverted as isotropic, false structure
    # of about ten per cent
    spread = {k: np.ptp(np.percentile(v, [1, 99])) for k, v in results.items()}
    assert spread["modelled"] < 0.25 * spread["isotropic"]
    assert np.median(results["modelled"]) == pytest.approx(V_ALONG, rel=0.01)
