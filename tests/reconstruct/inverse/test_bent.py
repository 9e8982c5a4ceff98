"""Bent-ray forward model and iterations.

Outside references named beside each check: geometry (straight lines in a
homogeneous medium), Fermat's principle (first arrivals are never later than
any other path, the straight one included; Cerveny, V. (2001), Seismic Ray
Theory, Cambridge University Press), and the serial run as the reference for
the parallel engines.
"""

import warnings

import numpy as np
import pytest

from plan.synthetic.simulate import simulate_picks
from plan.synthetic.truth import parse_truth
from reconstruct.inverse.bent import BentOptions, bent_ray_tomography
from reconstruct.forward.first_arrivals import bent_ray_forward, choose_sources, first_arrival_times
from reconstruct.model.grid import Grid
from reconstruct.inverse.solver import InversionOptions
from reconstruct.parallel import Executor
from reconstruct.io.site import parse_site
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.tables import Nodes, Picks

ROCK = 0.12  # m/ns, limestone (Davis and Annan, 1989)


def _crosshole_nodes():
    zs = np.arange(2.0, 17.0, 2.0)
    a = np.c_[np.full(zs.size, 2.5), np.full(zs.size, 4.5), zs]
    b = np.c_[np.full(zs.size, 17.5), np.full(zs.size, 4.5), zs]
    return np.r_[a, b]


def test_choose_sources_covers_every_pair_once():
    a, b = np.triu_indices(6, 1)
    tasks = choose_sources(a, b, 6)
    covered = np.concatenate([t[1] for t in tasks])
    assert sorted(covered.tolist()) == list(range(a.size))
    for source, index, others in tasks:
        assert np.all((a[index] == source) | (b[index] == source))
        assert np.all(others == np.where(a[index] == source, b[index], a[index]))


def test_choose_sources_with_positions_starts_at_the_ends_and_still_covers_every_pair():
    # nodes on a line: ties go to the node farthest from the centroid of the nodes
    # still waiting, so the sources work inwards from both ends
    xyz = np.c_[np.arange(7.0) * 10, np.zeros(7), np.zeros(7)]
    a, b = np.triu_indices(7, 1)
    tasks = choose_sources(a, b, 7, xyz)
    assert sorted(np.concatenate([t[1] for t in tasks]).tolist()) == list(range(a.size))
    waiting = set(range(7))
    for source, _, _ in tasks:
        assert source in (min(waiting), max(waiting))  # always an end of the waiting interval
        waiting.discard(source)
    assert len(tasks) == 6  # a complete graph needs n - 1 sources


HOMOGENEOUS_RTOL = 1e-3  # our target: within 0.1 % of distance / velocity
FERMAT_RTOL = 1e-3


@pytest.fixture(scope="module")
def homogeneous_forward():
    """Times and rays of all crosshole pairs through homogeneous rock (computed once)."""
    grid = Grid((0, 0, 0), (1, 1, 1), (20, 9, 18))
    xyz = _crosshole_nodes()
    a, b = np.triu_indices(len(xyz), 1)
    slowness = np.full(grid.shape, 1 / ROCK)
    fwd = bent_ray_forward(grid, slowness, xyz, a, b, executor=Executor(kind="serial"), keep_rays=True)
    distance = np.linalg.norm(xyz[b] - xyz[a], axis=1)
    return grid, xyz, a, b, fwd, distance


def test_homogeneous_times_are_distance_over_velocity(homogeneous_forward):
    # geometry: the first arrival in a homogeneous medium runs along the straight line
    *_, fwd, distance = homogeneous_forward
    far = distance >= 4
    np.testing.assert_allclose(fwd.time_ns[far], distance[far] / ROCK, rtol=HOMOGENEOUS_RTOL)


def test_homogeneous_bent_rays_are_straight(homogeneous_forward):
    # geometry: the first arrival in a homogeneous medium runs along the straight line
    grid, xyz, a, b, fwd, distance = homogeneous_forward
    for k, line in enumerate(fwd.polylines):
        start, end = xyz[a[k]], xyz[b[k]]
        axis = (end - start) / distance[k]
        offset = (line - start) - np.outer((line - start) @ axis, axis)
        assert np.linalg.norm(offset, axis=1).max() < 0.05, f"pair {k}: ray leaves the straight line"
    # per-cell lengths: a ray running exactly in a cell face (the horizontal pairs,
    # nodes on lattice planes) may be booked to either side of the face, where the
    # two cells are alike; elsewhere the cells crossed must match Siddon's
    straight = straight_ray_matrix(grid, xyz[a], xyz[b])
    in_face = xyz[a, 2] == xyz[b, 2]
    assert abs(fwd.operator[~in_face] - straight[~in_face]).max() < 0.2
    np.testing.assert_allclose(np.asarray(fwd.operator.sum(axis=1)).ravel(), distance, rtol=2e-3)


def _void_times():
    grid = Grid((0, 0, 0), (1, 1, 1), (20, 9, 18))
    centres = grid.cell_centres_m()
    void = np.sum((centres - [10, 4.5, 9]) ** 2, axis=-1) < 3.5**2
    slowness = np.where(void, 1 / 0.2998, 1 / ROCK)
    xyz = _crosshole_nodes()
    a, b = np.triu_indices(len(xyz), 1)
    bent = first_arrival_times(grid, slowness, xyz, a, b, executor=Executor(kind="serial"))
    straight = straight_ray_matrix(grid, xyz[a], xyz[b]) @ slowness.ravel()
    return bent, straight


def test_first_arrivals_are_never_later_than_the_straight_ray_through_a_fast_void():
    # Fermat: the first arrival cannot be later than the time along any path,
    # including the straight one (tolerance: the 0.1 % accuracy asked of the solver)
    bent, straight = _void_times()
    assert np.all(bent <= straight * (1 + FERMAT_RTOL))


def test_rays_are_drawn_into_a_fast_void():
    # Fermat: many first arrivals gain by crossing the fast void
    bent, straight = _void_times()
    assert np.mean(bent < straight - 0.5) > 0.2


@pytest.mark.slow
def test_serial_process_pool_and_dask_give_the_same_forward():
    # the serial run is the reference
    grid = Grid((0, 0, 0), (1, 1, 1), (20, 9, 18))
    rng = np.random.default_rng(4)
    slowness = 1 / rng.uniform(0.10, 0.14, grid.shape)
    xyz = _crosshole_nodes()
    a, b = np.triu_indices(len(xyz), 1)
    results = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        for kind in ("serial", "processes", "dask"):
            executor = Executor(kind=kind, workers=2) if kind != "serial" else Executor(kind="serial")
            results[kind] = bent_ray_forward(grid, slowness, xyz, a, b, executor=executor)
    for kind in ("processes", "dask"):
        np.testing.assert_allclose(results[kind].time_ns, results["serial"].time_ns, rtol=0, atol=1e-9)
        assert abs(results[kind].operator - results["serial"].operator).max() < 1e-9


def _small_site():
    return parse_site({
        "name": "bent test box",
        "model": {"origin_m": [0, 0, 0], "size_m": [20, 9, 18], "cell_m": 1.0},
        "ground": {"flat_elevation_m": 30},  # above the box: all rock, no air
        "rock": {"velocity_m_per_ns": ROCK, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
    })


@pytest.mark.slow
def test_bent_iterations_lower_the_misfit_below_the_straight_ray_start():
    site = _small_site()
    xyz = _crosshole_nodes()
    n = len(xyz)
    nodes = Nodes(ids=tuple(f"N{k}" for k in range(n)), xyz_m=xyz, kinds=("borehole",) * n,
                  boreholes=(None,) * n, lines=np.arange(2, n + 2), source="nodes.csv")
    truth = parse_truth({
        "bodies": [{"shape": "ellipsoid", "centre_m": [10, 4.5, 9], "semi_axes_m": [3, 3, 3], "fill": "air"}],
        "noise": {"sigma_ns": 0.3, "clock_offset_sigma_ns": 0.0, "seed": 3}, "refine": 2,
    })
    survey = simulate_picks(site, nodes, truth, rays="bent", executor=Executor(kind="serial"))
    m = survey.tx.size
    picks = Picks(tx=survey.tx, rx=survey.rx, time_ns=survey.time_ns, sigma_ns=survey.sigma_ns,
                  amplitude=None, quality=None, lines=np.arange(2, m + 2), excluded=(), source="picks.csv",
                  n_rows=m)
    run = bent_ray_tomography(site, nodes, picks, InversionOptions(time_zero="none"),
                              bent=BentOptions(max_iterations=3), executor=Executor(kind="serial"))
    rms = [h["rms_ns"] for h in run.history]
    assert len(rms) >= 2
    assert all(later < earlier for earlier, later in zip(rms, rms[1:]))  # each iteration lowers it
    assert run.rays == "bent"
    # the fast void appears: the fastest cell lies within 2 cells of its centre
    v = run.result.velocity_m_per_ns.reshape(run.grid.shape)
    i = np.array(np.unravel_index(np.argmax(v[:, 4, :]), (20, 18)))
    assert np.all(np.abs(i + 0.5 - [10, 9]) <= 2)
