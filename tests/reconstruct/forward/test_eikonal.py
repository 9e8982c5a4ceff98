"""Checks of the first-arrival solver against outside references.

Each check names its source. Targets from the task: median relative error
<= 0.1 %, max <= 0.5 % at default options on 1 m cells; the measured figures
are noted beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest
import skfmm  # general-purpose reference library (test extra)

from reconstruct.forward.eikonal import EikonalOptions, travel_time_field
from reconstruct.model.grid import Grid
from reconstruct.forward.straight_rays import straight_ray_matrix

SPEED_OF_LIGHT_M_PER_NS = 0.299792458  # SI definition of c (scipy.constants.c)
ROCK_M_PER_NS = 0.115


def _rel(a, b):
    return np.abs(np.asarray(a) / np.asarray(b) - 1.0)


# ---------------------------------------------------------------- 1. gradient
V0, G = 0.10, 0.002


def _gradient_time(p1, p2):
    """Slotnick, M. M. (1959), Lessons in Seismic Computing, SEG; Cerveny, V.
    (2001), Seismic Ray Theory, CUP: t = arccosh(1 + g^2 r^2 / (2 v1 v2)) / g."""
    r = np.linalg.norm(p2 - p1, axis=-1)
    v1 = V0 + G * p1[..., 2]
    v2 = V0 + G * p2[..., 2]
    return np.arccosh(1 + G**2 * r**2 / (2 * v1 * v2)) / G


@pytest.fixture(scope="module")
def gradient_field():
    # z = 0 is a cell centre: the source of the reference table sits inside a cell.
    # The box reaches z = 57.5 m: the analytic rays (circular arcs bulging upwards)
    # to the sampled receivers rise to 53 m. With the top at 41.5 m, 55 of them left
    # the box, whose first arrivals are then legitimately later than the formula
    # for an unbounded medium (up to 1.5 %, which had been taken for a solver error).
    grid = Grid((-20.5, -10.5, -20.5), (1, 1, 1), (180, 21, 78))
    z = grid.edges_m(2)
    # exact cell-average slowness of v = v0 + g z over each 1 m layer
    s_layer = np.log((V0 + G * z[1:]) / (V0 + G * z[:-1])) / G
    slowness = np.broadcast_to(s_layer, grid.shape).copy()
    return grid, travel_time_field(grid, slowness, np.zeros(3))


def test_gradient_reference_table(gradient_field):
    # values computed from the Slotnick (1959) formula above (the last column of
    # the table is the homogeneous time at v0, for scale)
    _, f = gradient_field
    for to, t_ref in [((10, 0, 0), 99.83408), ((0, 0, 10), 91.16078),
                      ((20, 0, 10), 202.73255), ((50, 0, 0), 481.21183)]:
        t = f.interpolate(np.array(to, float))[0]
        assert abs(t / t_ref - 1) < 0.005, (to, t, t_ref)


def _gradient_errors(gradient_field):
    _, f = gradient_field
    rng = np.random.default_rng(7)
    x = rng.uniform(5, 150, 600)
    rx = np.c_[x, rng.uniform(-9.5, 9.5, 600), rng.uniform(-19, 40, 600)]
    r = np.linalg.norm(rx, axis=1)
    rx = rx[(r >= 5) & (r <= 150)]
    return _rel(f.interpolate(rx), _gradient_time(np.zeros(3), rx))


def test_gradient_median(gradient_field):
    e = _gradient_errors(gradient_field)
    assert np.median(e) <= 0.001


def test_gradient_max(gradient_field):
    e = _gradient_errors(gradient_field)
    assert e.max() <= 0.005  # measured 0.13 %, 8 m from the source


def test_gradient_rays_follow_the_analytic_arcs(gradient_field):
    # Slotnick (1959); Cerveny (2001), Seismic Ray Theory: in v = v0 + g z rays are
    # circular arcs centred on z = -v0 / g. Rays traced on the solver's own field
    # must stay within one model cell of them (our tolerance).
    from reconstruct.forward.ray_tracing import trace_rays

    _, f = gradient_field
    receivers = np.array([[30.0, 0.0, 0.0], [80.0, 0.0, 10.0], [140.0, 0.0, 0.0],
                          [60.0, 0.0, 35.0], [100.0, 0.0, -15.0]])
    polylines, reached = trace_rays(f, receivers)
    assert reached.all()
    z_centre = -V0 / G
    for (xr, _, zr), line in zip(receivers, polylines):
        x_centre = (xr**2 + (zr - z_centre) ** 2 - z_centre**2) / (2 * xr)
        radius = np.hypot(x_centre, z_centre)
        distance = np.hypot(line[:, 0] - x_centre, line[:, 2] - z_centre)
        assert np.max(np.abs(distance - radius)) < 1.0
        mid = line[len(line) // 2]
        assert abs(np.hypot(mid[0] - x_centre, mid[2] - z_centre) - radius) < 1.0


# ----------------------------------------------------------- 2. half-space
ZG = 30.0


@pytest.fixture(scope="module")
def half_space():
    grid = Grid((0, 0, 0), (1, 1, 1), (90, 16, 36))
    s = np.full(grid.shape, 1 / ROCK_M_PER_NS)
    s[:, :, int(ZG):] = 1 / SPEED_OF_LIGHT_M_PER_NS
    return grid, s


def _half_space_time(src, rx):
    """First arrival = min(direct, refracted air wave): t = (h1 + h2)
    sqrt(1/v^2 - 1/c^2) + x / c once x >= (h1 + h2) tan(theta_c), sin(theta_c)
    = v / c (head-wave formula with the fast medium above; Telford, Geldart
    and Sheriff (1990), Applied Geophysics, 2nd ed.)."""
    v, c = ROCK_M_PER_NS, SPEED_OF_LIGHT_M_PER_NS
    h1 = max(ZG - src[2], 0.0)
    h2 = np.maximum(ZG - rx[:, 2], 0.0)
    x = np.hypot(rx[:, 0] - src[0], rx[:, 1] - src[1])
    direct = np.linalg.norm(rx - src, axis=1) / v
    refr = (h1 + h2) * np.sqrt(1 / v**2 - 1 / c**2) + x / c
    ok = x >= (h1 + h2) * np.tan(np.arcsin(v / c))
    return np.where(ok, np.minimum(direct, refr), direct)


def _half_space_errors(half_space, depth_src, depths_rx):
    grid, s = half_space
    src = np.array([8.3, 8.1, ZG - max(depth_src, 1e-6)])  # 1 micrometre snap
    f = travel_time_field(grid, s, src)
    rng = np.random.default_rng(3)
    n = 400
    x = rng.uniform(5, 80, n)
    rx = np.c_[src[0] + x, rng.uniform(1, 15, n), ZG - rng.choice(depths_rx, n)]
    return _rel(f.interpolate(rx), _half_space_time(src, rx))


def test_half_space_reference_example(half_space):
    # REFERENCES.md: nodes 3 m deep, 44 m apart, 0.115 m/ns -> about 195 ns
    grid, s = half_space
    f = travel_time_field(grid, s, np.array([10.0, 8.0, ZG - 3]))
    t = f.interpolate(np.array([54.0, 8.0, ZG - 3]))[0]
    t_ref = _half_space_time(np.array([10.0, 8.0, ZG - 3]), np.array([[54.0, 8.0, ZG - 3]]))[0]
    assert abs(t_ref - 195) < 1
    assert abs(t / t_ref - 1) <= 0.001


def test_half_space_surface_source(half_space):
    # surface source, receivers on the surface (x / c through the air) and below
    e = _half_space_errors(half_space, 0.0, [1e-6, 1e-6, 0.5, 1.0, 3.0, 8.0])
    assert np.median(e) <= 0.001
    assert e.max() <= 0.005


def test_half_space_borehole_source(half_space):
    # measured: median 0.005 %, max 0.10 % (before the two wave families: max 2.3 %
    # at 5-7 m, where stencils mixing the direct wave and the refracted air wave
    # ran 1.1 ns early; before the additive air-wave factor: median 0.21 %)
    e = _half_space_errors(half_space, 3.0, [1e-6, 0.5, 1.0, 3.0, 8.0])
    assert np.median(e) <= 0.001
    assert e.max() <= 0.005
    far = _half_space_errors_far(half_space, 3.0)
    assert np.median(far) <= 0.001
    assert far.max() <= 0.005


def test_field_limited_to_receivers_matches_the_whole_box(half_space):
    # A solve asked only for some receivers stops once they are final and leaves
    # out the uniform air above them (a path above them can always be replaced by a
    # chord lower down, no slower). Both are exact: same times and same rays as the
    # whole-box solve, and both agree with the half-space formula (Telford, Geldart
    # and Sheriff 1990, Applied Geophysics, head wave with the fast medium above).
    from reconstruct.forward.ray_tracing import trace_rays

    grid, s = half_space
    src = np.array([8.3, 8.1, ZG - 3.0])
    rx = np.array([[20.0, 5.0, ZG - 1e-6], [30.5, 9.0, ZG - 2.0], [40.0, 12.0, ZG - 6.0],
                   [14.0, 3.0, ZG - 3.0]])
    whole = travel_time_field(grid, s, src)
    limited = travel_time_field(grid, s, src, receivers_xyz_m=rx)
    assert limited.shape[2] < whole.shape[2] and np.isfinite(limited.final_until_ns)
    assert np.isinf(limited.times_ns).mean() > 0.2  # the far part of the box was left out
    np.testing.assert_array_equal(limited.interpolate(rx), whole.interpolate(rx))
    for a, b in zip(trace_rays(whole, rx)[0], trace_rays(limited, rx)[0]):
        np.testing.assert_array_equal(a, b)
    assert _rel(limited.interpolate(rx), _half_space_time(src, rx)).max() <= 0.005


def test_receivers_outside_the_box_are_refused(half_space):
    grid, s = half_space
    with pytest.raises(ValueError, match="receivers_xyz_m: 1 point"):
        travel_time_field(grid, s, np.array([5.0, 5.0, 5.0]), receivers_xyz_m=[[5.0, 5.0, 99.0]])


def _half_space_errors_far(half_space, depth_src):
    grid, s = half_space
    src = np.array([8.3, 8.1, ZG - depth_src])
    f = travel_time_field(grid, s, src)
    rng = np.random.default_rng(4)
    x = rng.uniform(15, 80, 300)
    rx = np.c_[src[0] + x, rng.uniform(1, 15, 300), ZG - rng.choice([1e-6, 1.0, 3.0, 8.0], 300)]
    return _rel(f.interpolate(rx), _half_space_time(src, rx))


# ------------------------------------------------------------ 3. homogeneous
def test_homogeneous_lattice_points():
    # t = d / v in a homogeneous medium (definition of velocity)
    grid = Grid((0, 0, 0), (1, 1, 1), (30, 24, 24))
    v = ROCK_M_PER_NS
    src = np.array([10.3, 11.2, 12.7])
    f = travel_time_field(grid, np.full(grid.shape, 1 / v), src)
    pts = np.stack(np.meshgrid(*[np.arange(n) * 1.0 for n in f.shape], indexing="ij"), -1)
    d = np.linalg.norm(pts - src, axis=-1)
    e = _rel(f.times_ns[d >= 2], d[d >= 2] / v)
    assert np.median(e) <= 0.001
    assert e.max() <= 1e-4  # measured 1e-12: the factored form is exact in a homogeneous medium


def test_homogeneous_between_lattice_points():
    # trilinear interpolation of TimeField adds up to h^2 / (4 r^2): 1 % at 5 m on
    # a 1 m lattice; from 10 m on the target holds
    grid = Grid((0, 0, 0), (1, 1, 1), (40, 30, 30))
    v = ROCK_M_PER_NS
    src = np.array([10.3, 15.2, 14.7])
    f = travel_time_field(grid, np.full(grid.shape, 1 / v), src)
    rng = np.random.default_rng(5)
    rx = rng.uniform([0, 0, 0], [40, 30, 30], (2000, 3))
    d = np.linalg.norm(rx - src, axis=1)
    e = _rel(f.interpolate(rx[d >= 10]), d[d >= 10] / v)
    assert np.median(e) <= 0.001
    assert e.max() <= 0.003


def _crosshole_nodes():
    # two vertical boreholes 15 m apart, nodes every 2 m, 1 m cells
    z = np.arange(2.0, 17.0, 2.0)
    return np.array([[2.5, 4.5, zz] for zz in z] + [[17.5, 4.5, zz] for zz in z])


def _crosshole_times(slowness):
    """Time of every node pair (i < j): source at node i, TimeField read at node j."""
    grid = Grid((0, 0, 0), (1, 1, 1), (20, 9, 18))
    nodes = _crosshole_nodes()
    pairs, times = [], []
    for i, src in enumerate(nodes):
        f = travel_time_field(grid, slowness, src)
        for j in range(i + 1, len(nodes)):
            pairs.append((i, j))
            times.append(f.interpolate(nodes[j])[0])
    pairs = np.array(pairs)
    return grid, nodes[pairs[:, 0]], nodes[pairs[:, 1]], np.array(times)


def test_homogeneous_crosshole_pairs():
    # geometry: t = |x_r - x_s| / v in a homogeneous medium. Sources half-way
    # between lattice planes in x and y: a point and its mirror across the
    # source plane are equally far away (measured before the fix: 0.1-0.24 %
    # late, e.g. 33.372 ns against 33.333 ns for a 4 m vertical pair)
    v = 0.12
    grid = Grid((0, 0, 0), (1, 1, 1), (20, 9, 18))
    _, tx, rx, t = _crosshole_times(np.full(grid.shape, 1 / v))
    d = np.linalg.norm(rx - tx, axis=1)
    assert np.all(d >= 2)
    e = _rel(t, d / v)
    assert e.max() <= 1e-4  # measured 1e-12: the factored form is exact here


def _crosshole_void_ratio():
    grid = Grid((0, 0, 0), (1, 1, 1), (20, 9, 18))
    s = np.full(grid.shape, 1 / 0.12)
    c = grid.cell_centres_m()
    s[np.linalg.norm(c - np.array([10.0, 4.5, 9.0]), axis=-1) <= 3.5] = 1 / 0.2998
    _, tx, rx, t = _crosshole_times(s)
    straight = straight_ray_matrix(grid, tx, rx) @ s.ravel()
    return t / straight


def test_axis_through_an_air_filled_cube():
    # Fermat's principle (Cerveny 2001, Seismic Ray Theory, sec. 3.1): between two
    # points on the axis of an air-filled cube in rock the straight line is the
    # first-arrival path (any detour lengthens the rock part), so
    # t = (L - a) / v + a / c. Measured 0.31 % early (the wave entering a closed
    # void over its whole face; see the module notes); the 0.5 % target holds.
    grid = Grid((0, 0, 0), (1, 1, 1), (40, 20, 20))
    s = np.full(grid.shape, 1 / 0.12)
    s[16:24, 6:14, 6:14] = 1 / 0.2998
    src, rx = np.array([2.5, 10.0, 10.0]), np.array([37.5, 10.0, 10.0])
    t = travel_time_field(grid, s, src).interpolate(rx)[0]
    exact = (35.0 - 8.0) / 0.12 + 8.0 / 0.2998
    assert abs(t / exact - 1) <= 0.005


@pytest.mark.parametrize("fast_bodies", ["nearest_and_largest", "all"])
@pytest.mark.parametrize("src, void", [
    ((20.3, 8.1, 10.2), (slice(24, 26), slice(7, 9), slice(14, 16))),  # 20 m deep, void 6 m away
    ((20.3, 8.1, 5.2), (slice(33, 35), slice(3, 5), slice(5, 7))),  # 25 m deep, void 14 m away
])
def test_a_void_nearer_than_the_ground_surface_delays_no_first_arrival(half_space, src, void, fast_bodies):
    # Fermat's principle (Cerveny, V. (2001), Seismic Ray Theory, CUP, sec. 3.1):
    # the first arrival is the least time over all paths, so making some cells
    # faster can only make it earlier. A small air-filled void nearer a deep
    # borehole source than the ground surface must not delay the refracted air
    # wave at the surface receivers: a single fast-medium factor, anchored in the
    # void (fast_bodies="nearest"), delays it by 0.39 ns here (up to 4.1 ns on
    # the demo quarry). Allowed with the default (the inversion's) and with "all"
    # (simulated picks): 0.05 ns, a tenth of the pick accuracy of cheap nodes.
    grid, s = half_space
    with_void = s.copy()
    with_void[void] = 1 / SPEED_OF_LIGHT_M_PER_NS  # a 2 m air-filled void
    x = np.linspace(5.5, 85.5, 33)
    rx = np.r_[np.c_[x, np.full(x.size, 8.4), np.full(x.size, ZG - 1e-6)],  # on the surface
               np.c_[np.full(12, 60.5), np.full(12, 7.6), np.linspace(3.0, 28.0, 12)]]  # a borehole
    options = EikonalOptions(fast_bodies=fast_bodies)
    before = travel_time_field(grid, s, np.array(src), options=options).interpolate(rx)
    after = travel_time_field(grid, with_void, np.array(src), options=options).interpolate(rx)
    assert np.max(after - before) <= 0.05


def test_a_small_void_beside_a_larger_one_delays_no_first_arrival_with_all_bodies(half_space):
    # Fermat's principle (Cerveny, V. (2001), Seismic Ray Theory, CUP, sec. 3.1):
    # adding a small air-filled void nearer the source than a larger one must not
    # delay the waves through the larger one. fast_bodies="all" keeps the delay
    # below a tenth of the pick accuracy of cheap nodes (0.05 ns). The default
    # ("nearest_and_largest", used to simulate and to invert, see EikonalOptions
    # for why) does not: the small void takes the factor from the larger one and
    # the arrivals behind it come 1.48 ns late here (2.85 ns on the demo quarry).
    grid, s = half_space
    larger = s.copy()
    larger[30:40, 4:12, 8:16] = 1 / SPEED_OF_LIGHT_M_PER_NS
    both = larger.copy()
    both[17:19, 1:3, 12:14] = 1 / SPEED_OF_LIGHT_M_PER_NS
    src = np.array([22.3, 8.1, 12.2])
    rx = np.c_[np.full(12, 60.5), np.full(12, 7.6), np.linspace(3.0, 28.0, 12)]  # a borehole behind
    options = EikonalOptions(fast_bodies="all")
    before = travel_time_field(grid, larger, src, options=options).interpolate(rx)
    after = travel_time_field(grid, both, src, options=options).interpolate(rx)
    assert np.max(after - before) <= 0.05
    default_delay = np.max(travel_time_field(grid, both, src).interpolate(rx)
                           - travel_time_field(grid, larger, src).interpolate(rx))
    assert default_delay > 1.0  # the default's known limitation, documented in EikonalOptions


def test_crosshole_void_never_later_than_straight_ray_target():
    # Fermat's principle (Cerveny, V. (2001), Seismic Ray Theory, CUP, sec. 3.1):
    # the first arrival is no later than the time along any path, the straight
    # ray through the same cells (reconstruct.forward.straight_rays) included.
    # measured: none of 120 later by more than 0.1 % (10, worst 1.41 %, before
    # the additive factor of the wave in the void)
    assert np.all(_crosshole_void_ratio() <= 1 + 1e-3)


def test_crosshole_void_never_later_than_straight_ray_level():
    ratio = _crosshole_void_ratio()
    assert np.sum(ratio > 1 + 1e-3) <= 10
    assert ratio.max() <= 1.015
    assert np.any(ratio < 0.97)  # the void really pulls rays in


# -------------------------------------------------------------- 4. skfmm
def _smooth_model(grid, seed=11):
    rng = np.random.default_rng(seed)
    c = grid.cell_centres_m()
    v = np.full(grid.shape, 0.11)
    for _ in range(4):
        centre = rng.uniform(grid.origin_m, grid.end_m)
        v += rng.uniform(-0.02, 0.03) * np.exp(-np.sum((c - centre) ** 2, axis=-1) / (2 * 6.0**2))
    return 1 / v


def _skfmm_times(grid, slowness, src, refine):
    """scikit-fmm travel_time on a grid ``refine`` times finer, order 2, one-cell source."""
    h = grid.cell_m[0] / refine
    fine = np.repeat(np.repeat(np.repeat(slowness, refine, 0), refine, 1), refine, 2)
    centres = [grid.origin_m[a] + h * (np.arange(fine.shape[a]) + 0.5) for a in range(3)]
    idx = [int(np.argmin(np.abs(centres[a] - src[a]))) for a in range(3)]
    phi = np.ones(fine.shape)
    phi[tuple(idx)] = -1
    t = skfmm.travel_time(phi, 1 / fine, dx=h, order=2)
    return centres, np.asarray(t)


def test_against_skfmm_fine_grid():
    grid = Grid((0, 0, 0), (1, 1, 1), (24, 20, 20))
    s = _smooth_model(grid)
    src = np.array([4.5, 10.5, 10.5])
    mine = travel_time_field(grid, s, src)
    centres, ref = _skfmm_times(grid, s, src, 4)
    # compare at cell centres of the model grid that are nodes-of-centres of the fine grid
    rng = np.random.default_rng(2)
    idx = rng.integers(0, [96, 80, 80], (800, 3))
    pts = np.c_[centres[0][idx[:, 0]], centres[1][idx[:, 1]], centres[2][idx[:, 2]]]
    d = np.linalg.norm(pts - src, axis=1)
    keep = d >= 8
    e_mine = _rel(mine.interpolate(pts[keep]), ref[idx[keep, 0], idx[keep, 1], idx[keep, 2]])
    # naive skfmm on the model grid itself
    c1, naive = _skfmm_times(grid, s, src, 1)
    ii = np.clip(np.round((pts[keep] - 0.5) / 1.0).astype(int), 0, [23, 19, 19])
    on_centre = np.all(np.abs(pts[keep] - (ii + 0.5)) < 0.2, axis=1)
    e_naive = _rel(naive[ii[:, 0], ii[:, 1], ii[:, 2]][on_centre], ref[idx[keep, 0], idx[keep, 1], idx[keep, 2]][on_centre])
    print(f"vs skfmm 4x order 2: mine median {np.median(e_mine):.2e} max {e_mine.max():.2e}; "
          f"naive skfmm 1 m median {np.median(e_naive):.2e} max {e_naive.max():.2e}")
    # skfmm 4x finer still starts from a one-cell source (about 0.5 % error of
    # its own near the source), so it cannot referee 0.1 %: assert only that
    # this solver is closer to it than skfmm run naively on the model grid
    assert np.median(e_mine) < 0.5 * np.median(e_naive)
    assert e_mine.max() < e_naive.max()


# ------------------------------------------------------------- 5. Fermat
def _fermat_ratio():
    grid = Grid((0, 0, 0), (1, 1, 1), (30, 20, 20))
    s = np.full(grid.shape, 1 / ROCK_M_PER_NS)
    c = grid.cell_centres_m()
    s[np.linalg.norm(c - np.array([15, 10, 10]), axis=-1) <= 4] = 1 / SPEED_OF_LIGHT_M_PER_NS
    src = np.array([2.2, 10.1, 9.7])
    f = travel_time_field(grid, s, src)
    rng = np.random.default_rng(9)
    rx = np.c_[rng.uniform(20, 30, 300), rng.uniform(0, 20, 300), rng.uniform(0, 20, 300)]
    straight = straight_ray_matrix(grid, np.repeat(src[None], len(rx), 0), rx) @ s.ravel()
    return f.interpolate(rx) / straight


def test_never_later_than_straight_ray_target():
    # Fermat's principle: the first arrival is no later than any path's time,
    # the straight ray included. measured: none later (18 of 300, worst 0.29 %,
    # before the additive factor of the wave in the void)
    assert np.all(_fermat_ratio() <= 1 + 1e-3)


def test_never_later_than_straight_ray_level():
    ratio = _fermat_ratio()
    assert np.all(ratio <= 1.005)
    assert np.any(ratio < 0.97)  # the void really pulls rays in


# ---------------------------------------------------------- bad inputs
@pytest.mark.parametrize("slow, src, message", [
    (np.ones((3, 3)), (1, 1, 1), "slowness_ns_per_m has shape"),
    ("nan", (1, 1, 1), "slowness_ns_per_m holds NaN"),
    ("zero", (1, 1, 1), "slowness_ns_per_m must be > 0"),
    (None, (1, 1, 9), "source_xyz_m"),
    (None, (1, 1), "source_xyz_m has shape"),
    (None, (1, np.nan, 1), "source_xyz_m holds NaN"),
])
def test_bad_inputs(slow, src, message):
    grid = Grid((0, 0, 0), (1, 1, 1), (4, 4, 4))
    s = np.full(grid.shape, 8.0)
    if isinstance(slow, np.ndarray):
        s = slow
    elif slow == "nan":
        s[1, 1, 1] = np.nan
    elif slow == "zero":
        s[1, 1, 1] = 0.0
    with pytest.raises(ValueError, match=message):
        travel_time_field(grid, s, src)


def test_outside_box_message():
    grid = Grid((0, 0, 0), (1, 1, 1), (4, 4, 4))
    with pytest.raises(ValueError, match="outside the model box"):
        travel_time_field(grid, np.full(grid.shape, 8.0), (1, 1, 4.5))


def test_bad_options():
    with pytest.raises(ValueError, match="EikonalOptions.refine"):
        EikonalOptions(refine=0)


def test_input_not_modified():
    grid = Grid((0, 0, 0), (1, 1, 1), (4, 4, 4))
    s = np.full(grid.shape, 8.0)
    s0 = s.copy()
    travel_time_field(grid, s, (1.5, 1.5, 1.5))
    assert np.array_equal(s, s0)
