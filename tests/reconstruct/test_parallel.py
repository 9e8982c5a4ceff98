"""Tests of reconstruct.parallel: one way to spread per-node work over workers.

Outside references: the serial run is the reference; the process pool and
dask (a LocalCluster of two single-threaded worker processes) must return
exactly the same arrays, compared with numpy.array_equal. The per-task
function is a seeded numpy computation that reads the shared array.
"""

from __future__ import annotations

import multiprocessing
import os
import time
import traceback

import numpy as np
import pytest

from reconstruct import parallel
from reconstruct.errors import InputError
from reconstruct.parallel import Executor, executor_from_options, map_tasks

pytestmark = pytest.mark.filterwarnings("error")

N_COLUMNS = 400


# --- task functions (module level: workers import them by name) ----------------


def _weighted_row_sums(task, shared):
    """Row sums of the shared matrix weighted by a vector seeded by the task."""
    weights = np.random.default_rng(task).standard_normal(N_COLUMNS)
    # elementwise product and numpy's own sum, not a BLAS dot product: BLAS may
    # split the sum differently with a different thread count (dask workers run
    # with one BLAS thread), which would change the last bits
    return np.sum(shared["matrix"] * weights, axis=1) + shared["offset"]


def _sleep_then_tag(task, shared):
    index, delay_s = task
    time.sleep(delay_s)
    return index, os.getpid()


def _fail_on_node_3(task, shared):
    if task == 3:
        raise ValueError("node 3 has no neighbours inside the ground")
    return task


def _fail_or_sleep(task, shared):
    if task == "fail":
        raise RuntimeError("first task failed")
    time.sleep(60.0)
    return task


def _write_into_shared(task, shared):
    shared["matrix"][0, 0] = 1.0
    return task


def _shared_keys(task, shared):
    return None if shared is None else sorted(shared)


# --- fixtures ------------------------------------------------------------------


@pytest.fixture(scope="module")
def shared():
    rng = np.random.default_rng(20240611)
    return {"matrix": rng.standard_normal((3000, N_COLUMNS)), "offset": 0.25}  # about 10 MB


@pytest.fixture(scope="module")
def scheduler_address():
    """A running two-worker cluster, reached by its address as a user would."""
    from distributed import LocalCluster

    cluster = LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address="127.0.0.1:0"
    )
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close()


def _executors(address):
    return {
        "processes": Executor("processes", workers=2),
        "dask": Executor("dask", scheduler=address),
    }


# --- results -------------------------------------------------------------------


def test_processes_and_dask_equal_the_serial_run_exactly(shared, scheduler_address):
    tasks = list(range(12))
    reference = map_tasks(Executor("serial"), _weighted_row_sums, tasks, shared=shared)
    assert len(reference) == 12 and reference[0].shape == (3000,)
    for name, executor in _executors(scheduler_address).items():
        results = map_tasks(executor, _weighted_row_sums, tasks, shared=shared)
        assert len(results) == len(reference), name
        for got, want in zip(results, reference):
            assert np.array_equal(got, want), name


def test_a_local_dask_cluster_equals_the_serial_run_and_is_closed(shared):
    tasks = [5, 1, 7]
    before = {p.pid for p in multiprocessing.active_children()}
    reference = map_tasks(Executor("serial"), _weighted_row_sums, tasks, shared=shared)
    results = map_tasks(Executor("dask", workers=2), _weighted_row_sums, tasks, shared=shared)
    for got, want in zip(results, reference):
        assert np.array_equal(got, want)
    assert {p.pid for p in multiprocessing.active_children()} <= before


def test_the_function_reads_shared(shared, scheduler_address):
    changed = dict(shared, offset=10.25)
    for executor in [Executor("serial"), *_executors(scheduler_address).values()]:
        [base] = map_tasks(executor, _weighted_row_sums, [4], shared=shared)
        [moved] = map_tasks(executor, _weighted_row_sums, [4], shared=changed)
        np.testing.assert_allclose(moved - base, 10.0, rtol=0, atol=1e-12)
        assert map_tasks(executor, _shared_keys, [0, 1], shared=shared) == [["matrix", "offset"]] * 2
        assert map_tasks(executor, _shared_keys, [0]) == [None]


def test_order_is_kept_when_early_tasks_finish_last(scheduler_address):
    tasks = [(0, 0.6), (1, 0.0), (2, 0.3), (3, 0.0), (4, 0.0), (5, 0.1)]
    for name, executor in _executors(scheduler_address).items():
        results = map_tasks(executor, _sleep_then_tag, tasks)
        assert [index for index, _ in results] == [0, 1, 2, 3, 4, 5], name
        # the slow first task forced the others onto the second worker
        assert len({pid for _, pid in results}) == 2, name


def test_progress_is_called_once_per_task(scheduler_address):
    tasks = list(range(7))
    for executor in [Executor("serial"), *_executors(scheduler_address).values()]:
        calls = []
        map_tasks(executor, _fail_on_node_3, [t + 10 for t in tasks], progress=lambda d, n: calls.append((d, n)))
        assert calls == [(k, 7) for k in range(1, 8)], executor.kind


def test_no_tasks_give_an_empty_list_without_progress():
    calls = []
    assert map_tasks(Executor("processes"), _fail_on_node_3, [], progress=lambda d, n: calls.append(d)) == []
    assert calls == []


def test_the_pool_leaves_no_processes_behind():
    before = {p.pid for p in multiprocessing.active_children()}
    assert map_tasks(Executor("processes", workers=2), _fail_on_node_3, [0, 1, 2]) == [0, 1, 2]
    assert {p.pid for p in multiprocessing.active_children()} <= before


# --- failures inside tasks -------------------------------------------------------


def test_a_task_exception_reaches_the_caller_with_its_traceback(scheduler_address):
    for executor in [Executor("serial"), *_executors(scheduler_address).values()]:
        with pytest.raises(ValueError, match="node 3 has no neighbours inside the ground") as caught:
            map_tasks(executor, _fail_on_node_3, list(range(6)))
        text = "".join(traceback.format_exception(caught.type, caught.value, caught.tb))
        assert "_fail_on_node_3" in text, executor.kind


def test_a_failing_task_stops_the_pool_without_waiting_for_the_others():
    start = time.perf_counter()
    with pytest.raises(RuntimeError, match="first task failed"):
        map_tasks(Executor("processes", workers=2), _fail_or_sleep, ["sleep", "fail", "sleep"])
    assert time.perf_counter() - start < 20.0  # the sleeping task would take 60 s


def test_shared_arrays_are_read_only_for_every_executor(shared, scheduler_address):
    for executor in [Executor("serial"), *_executors(scheduler_address).values()]:
        with pytest.raises(ValueError, match="read-only"):
            map_tasks(executor, _write_into_shared, [0], shared=shared)
    assert shared["matrix"].flags.writeable  # the caller's array is untouched


# --- options ---------------------------------------------------------------------


def test_options_default_to_a_local_pool_and_a_scheduler_means_dask():
    assert executor_from_options(None, None, None) == Executor("processes")
    assert executor_from_options(None, None, "tcp://10.0.0.5:8786") == Executor("dask", None, "tcp://10.0.0.5:8786")
    assert executor_from_options("dask", 3, None) == Executor("dask", 3)
    assert executor_from_options("serial", None, None).n_workers == 1
    assert Executor("processes").n_workers == os.cpu_count()


@pytest.mark.parametrize(
    "kind, workers, scheduler, message",
    [
        ("threads", None, None, "--executor 'threads': unknown kind; use one of serial, processes, dask"),
        ("processes", 0, None, "--workers 0: must be a whole number >= 1"),
        ("processes", 2.5, None, "--workers 2.5: must be a whole number >= 1"),
        ("serial", 4, None, "--workers 4: a serial run uses one process; drop --workers or choose --executor processes"),
        (None, 4, "tcp://h:8786", "--workers 4: with --scheduler the cluster's own workers run the tasks"),
        (None, None, "10.0.0.5:8786", "--scheduler '10.0.0.5:8786': expected the scheduler address tcp://HOST:PORT"),
        (None, None, "tcp://host:99999", "--scheduler 'tcp://host:99999': expected the scheduler address"),
        (None, None, "tcp://host", "--scheduler 'tcp://host': expected the scheduler address"),
        ("processes", None, "tcp://h:8786", "a scheduler address is for --executor dask; drop --scheduler or choose dask"),
    ],
)
def test_bad_options_are_named_with_the_fix(kind, workers, scheduler, message):
    with pytest.raises(InputError) as caught:
        executor_from_options(kind, workers, scheduler)
    assert message in str(caught.value)


def test_every_bad_option_is_reported_at_once():
    with pytest.raises(InputError) as caught:
        executor_from_options("gpu", -1, "http://x")
    assert len(caught.value.problems) == 3


def test_the_dataclass_checks_its_fields():
    with pytest.raises(InputError, match="executor workers 0: must be a whole number >= 1"):
        Executor("processes", workers=0)
    with pytest.raises(InputError, match="executor kind 'pool': unknown kind"):
        Executor("pool")


# --- reaching a cluster ------------------------------------------------------------


def test_an_unreachable_scheduler_is_an_input_error_naming_the_address_and_fix():
    start = time.perf_counter()
    with pytest.raises(InputError) as caught:
        map_tasks(Executor("dask", scheduler="tcp://127.0.0.1:1"), _fail_on_node_3, [0])
    elapsed = time.perf_counter() - start
    message = str(caught.value)
    assert message.startswith("--scheduler tcp://127.0.0.1:1: could not connect within 5 s")
    assert "start a scheduler with `dask scheduler` and workers with `dask worker tcp://HOST:PORT`" in message
    assert "or drop --scheduler" in message
    assert elapsed < parallel._CONNECT_TIMEOUT_S + 5.0


def test_a_scheduler_without_workers_is_an_input_error(monkeypatch):
    from distributed import LocalCluster

    monkeypatch.setattr(parallel, "_CONNECT_TIMEOUT_S", 1.0)
    with LocalCluster(n_workers=0, processes=True, dashboard_address="127.0.0.1:0") as cluster:
        address = cluster.scheduler_address
        with pytest.raises(InputError) as caught:
            map_tasks(Executor("dask", scheduler=address), _fail_on_node_3, [0])
    assert str(caught.value) == (
        f"--scheduler {address}: the scheduler answers but has no workers; start workers "
        f"on the computing machines with `dask worker {address}`, or drop --scheduler"
    )
