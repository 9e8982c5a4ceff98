"""Running one function over many tasks (one task per node, say) on workers.

A solver that has per-node work takes an :class:`Executor` argument and calls
:func:`map_tasks`; it never chooses the workers itself. The caller (the
command line, a script, a test) builds the executor, usually through
:func:`executor_from_options`, which checks the user's options.

Three kinds of executor
-----------------------
``serial``
    Every task runs in the calling process, one after the other. Use it to
    debug, and as the reference the other kinds must agree with.
``processes`` (default)
    A pool of local worker processes, one per core unless ``workers`` says
    otherwise. The pool is created for one :func:`map_tasks` call and closed
    at its end, so no process outlives the call. On Linux the workers are
    started with ``fork``: they begin as copies of the caller, with every
    module already imported and every numba function already compiled, and
    ``shared`` is inherited rather than copied through a pipe. Elsewhere
    (macOS, Windows) ``fork`` is unsafe or missing and ``spawn`` is used: each
    worker starts a fresh interpreter, imports the function's module and
    receives one pickled copy of ``shared``. A script using ``spawn`` must
    guard its top level with ``if __name__ == "__main__":``.
``dask``
    The tasks go to a dask.distributed cluster. With ``scheduler=None`` a
    cluster of local processes (one thread each) is started for the call and
    closed after it; with ``scheduler="tcp://HOST:PORT"`` an existing cluster,
    possibly spread over several machines, is used.

Pointing voidcube at a cluster
------------------------------
1. On one machine, start the scheduler: ``dask scheduler`` (it listens on
   port 8786 and prints its address, ``tcp://HOST:8786``).
2. On each machine that should compute, start workers:
   ``dask worker tcp://HOST:8786``. Give each worker one thread
   (``--nthreads 1``) and as many worker processes as cores
   (``--nworkers N``); the per-node work is single-threaded. Every worker
   machine needs voidcube installed in the same version as the machine that
   submits, with the same numpy, scipy and distributed: the tasks name
   voidcube's functions, and the workers import them.
3. Run the command with ``--scheduler tcp://HOST:8786``.

Memory
------
Each worker holds one copy of ``shared`` (the slowness model, the node
positions, ...) for the duration of a map, plus the working memory of the
task it is running and the results not yet sent back. With ``processes`` on
Linux, the inherited copy of ``shared`` costs nothing until written, and it
is never written (its arrays are handed to the function read-only). Peak
memory is therefore roughly ``caller + workers * (shared + one task)`` with
``spawn`` or dask, and ``caller + workers * one task`` with ``fork``. Lower
``workers`` when a machine runs short of memory.

Bad input (options of :func:`executor_from_options` and :class:`Executor`)
-------------------------------------------------------------------------
Every case raises :class:`~reconstruct.errors.InputError`, all problems at once:

- kind not one of ``serial``, ``processes``, ``dask``: names the allowed kinds;
- workers not a whole number, or below 1: asks for a whole number >= 1;
- workers with ``serial``: refused (a serial run has one worker); drop it or
  choose ``processes``;
- workers together with a scheduler address: refused (the cluster's own
  workers run the tasks); drop it and size the cluster with ``dask worker``;
- scheduler address not of the form ``tcp://HOST:PORT`` with a port in
  1..65535: names the expected form;
- scheduler together with kind ``serial`` or ``processes``: refused; drop one;
- scheduler that cannot be reached within a few seconds, or that has no
  workers: raised by :func:`map_tasks`, naming the address and the fix.

An exception raised by a task is not a user mistake: it is re-raised in the
caller, with the worker's traceback text attached (as ``__cause__`` for
``processes``, as the traceback itself for ``dask``).
"""

from __future__ import annotations

import concurrent.futures
import multiprocessing
import os
import re
import sys
import warnings
from dataclasses import dataclass

import numpy as np

from reconstruct.errors import InputError

__all__ = ["Executor", "executor_from_options", "map_tasks", "KINDS"]

KINDS = ("serial", "processes", "dask")

# A connection that has not succeeded within this time will not: a scheduler
# on a working network answers in milliseconds.
_CONNECT_TIMEOUT_S = 5.0

_SCHEDULER_PATTERN = re.compile(r"^tcp://(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+):(?P<port>[0-9]{1,5})$")

_CLUSTER_FIX = (
    "start a scheduler with `dask scheduler` and workers with "
    "`dask worker tcp://HOST:PORT`, or drop --scheduler"
)


def _problems(kind, workers, scheduler, names) -> list[str]:
    """Every problem with the executor options; ``names`` maps field -> label."""
    problems = []
    if kind not in KINDS:
        problems.append(
            f"{names['kind']} {kind!r}: unknown kind; use one of {', '.join(KINDS)}"
        )
    if workers is not None:
        if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)):
            problems.append(f"{names['workers']} {workers!r}: must be a whole number >= 1")
        elif workers < 1:
            problems.append(f"{names['workers']} {workers}: must be a whole number >= 1")
        elif kind == "serial":
            problems.append(
                f"{names['workers']} {workers}: a serial run uses one process; "
                f"drop {names['workers']} or choose {names['kind']} processes"
            )
        elif scheduler is not None:
            problems.append(
                f"{names['workers']} {workers}: with {names['scheduler']} the cluster's own workers "
                f"run the tasks; drop {names['workers']} and start as many `dask worker` as wanted"
            )
    if scheduler is not None:
        match = _SCHEDULER_PATTERN.match(scheduler) if isinstance(scheduler, str) else None
        if match is None or not 1 <= int(match["port"]) <= 65535:
            problems.append(
                f"{names['scheduler']} {scheduler!r}: expected the scheduler address "
                "tcp://HOST:PORT (for example tcp://10.0.0.5:8786), as printed by `dask scheduler`"
            )
        if kind in ("serial", "processes"):
            problems.append(
                f"{names['scheduler']} {scheduler!r} with {names['kind']} {kind}: a scheduler "
                f"address is for {names['kind']} dask; drop {names['scheduler']} or choose dask"
            )
    return problems


@dataclass(frozen=True)
class Executor:
    """How :func:`map_tasks` spreads tasks over workers.

    Attributes
    ----------
    kind : {"serial", "processes", "dask"}
        ``serial``: in the calling process; ``processes``: a local process
        pool; ``dask``: a dask.distributed cluster.
    workers : int, optional
        Number of worker processes for ``processes`` and for the local dask
        cluster; default ``os.cpu_count()``. Not allowed with ``serial`` or
        with ``scheduler``.
    scheduler : str, optional
        ``tcp://HOST:PORT`` of a running dask scheduler (``kind="dask"``
        only). ``None`` with ``kind="dask"`` starts a local cluster for each
        map.

    Raises
    ------
    InputError
        When a field is invalid; the message names the field and the fix.
    """

    kind: str = "processes"
    workers: int | None = None
    scheduler: str | None = None

    def __post_init__(self):
        problems = _problems(
            self.kind, self.workers, self.scheduler,
            {"kind": "executor kind", "workers": "executor workers", "scheduler": "executor scheduler"},
        )
        if problems:
            raise InputError(problems)

    @property
    def n_workers(self) -> int:
        """Number of local workers this executor starts (1 for serial)."""
        if self.kind == "serial":
            return 1
        return int(self.workers) if self.workers is not None else (os.cpu_count() or 1)


def executor_from_options(kind: str | None, workers: int | None, scheduler: str | None) -> Executor:
    """Build an :class:`Executor` from command-line options, checking them.

    Parameters
    ----------
    kind : str or None
        ``serial``, ``processes`` or ``dask``. ``None`` means ``dask`` when a
        scheduler is given, else ``processes``.
    workers : int or None
        Local worker processes; ``None`` for one per core.
    scheduler : str or None
        ``tcp://HOST:PORT`` of a running dask scheduler; implies ``dask``.

    Raises
    ------
    InputError
        Listing every problem with the options (``--executor``, ``--workers``,
        ``--scheduler``) and how to fix it.
    """
    if kind is None:
        kind = "dask" if scheduler is not None else "processes"
    names = {"kind": "--executor", "workers": "--workers", "scheduler": "--scheduler"}
    problems = _problems(kind, workers, scheduler, names)
    if problems:
        raise InputError(problems)
    return Executor(kind=kind, workers=None if workers is None else int(workers), scheduler=scheduler)


def _read_only(shared: dict | None) -> dict | None:
    """A new dict whose arrays are read-only views of the arrays in ``shared``.

    A task that writes into ``shared`` would change it for the tasks after it
    in the same worker but not in the others: results would depend on the
    executor. Read-only views make such a task fail the same way everywhere.
    """
    if shared is None:
        return None
    views = {}
    for key, value in shared.items():
        if isinstance(value, np.ndarray):
            value = value.view()
            value.flags.writeable = False
        views[key] = value
    return views


def _call_task(task, *, function, shared):
    """Run one task (used by every executor, so all call ``function`` alike)."""
    return function(task, shared=_read_only(shared))


# --- local process pool --------------------------------------------------------

# Set in each pool worker by the initializer: the map's shared inputs, sent once
# per worker instead of once per task.
_WORKER_SHARED = None


def _install_shared(shared):
    global _WORKER_SHARED
    _WORKER_SHARED = _read_only(shared)


def _call_in_pool(function, task):
    return function(task, shared=_WORKER_SHARED)


def _pool_context():
    """``fork`` on Linux (modules, numba code and ``shared`` inherited), else ``spawn``."""
    if sys.platform.startswith("linux") and "fork" in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")


def _stop_pool(pool):
    """End a pool now, killing tasks still running (after an error or Ctrl-C)."""
    if hasattr(pool, "terminate_workers"):  # Python >= 3.14
        pool.terminate_workers()
        return
    # before 3.14 the executor offers no way to stop running tasks; waiting for
    # them could take as long as the whole map, so end the processes directly
    for process in list((getattr(pool, "_processes", None) or {}).values()):
        if process.is_alive():
            process.terminate()
    pool.shutdown(wait=True, cancel_futures=True)


def _map_processes(executor, function, tasks, shared, progress):
    context = _pool_context()
    n_workers = min(executor.n_workers, len(tasks))
    pool = concurrent.futures.ProcessPoolExecutor(
        max_workers=n_workers, mp_context=context, initializer=_install_shared, initargs=(shared,)
    )
    try:
        with warnings.catch_warnings():
            if context.get_start_method() == "fork":
                # Python >= 3.12 warns on fork() whenever the caller has a second
                # thread; numpy's BLAS pool alone is one. BLAS libraries re-arm
                # after fork (pthread_atfork) and the children only run the task
                # loop, so the warning says nothing about this use.
                warnings.filterwarnings(
                    "ignore", message=r".*use of fork\(\) may lead to deadlocks", category=DeprecationWarning
                )
            # workers are forked during the first submit, inside this block
            futures = {pool.submit(_call_in_pool, function, task): i for i, task in enumerate(tasks)}
        results = [None] * len(tasks)
        for done, future in enumerate(concurrent.futures.as_completed(futures), start=1):
            results[futures[future]] = future.result()
            if progress is not None:
                progress(done, len(tasks))
    except BaseException:
        _stop_pool(pool)
        raise
    pool.shutdown(wait=True)
    return results


# --- dask ----------------------------------------------------------------------


def _connect(address):
    import distributed

    try:
        client = distributed.Client(address, timeout=_CONNECT_TIMEOUT_S, set_as_default=False)
    except OSError as error:  # includes the TimeoutError of an unanswered address
        raise InputError(
            f"--scheduler {address}: could not connect within {_CONNECT_TIMEOUT_S:g} s ({error}); "
            + _CLUSTER_FIX
        ) from None
    try:
        client.wait_for_workers(1, timeout=_CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError):
        client.close()
        raise InputError(
            f"--scheduler {address}: the scheduler answers but has no workers; start workers "
            f"on the computing machines with `dask worker {address}`, or drop --scheduler"
        ) from None
    return client


def _map_dask(executor, function, tasks, shared, progress):
    import distributed

    cluster = None
    if executor.scheduler is None:
        cluster = distributed.LocalCluster(
            n_workers=executor.n_workers,
            threads_per_worker=1,
            processes=True,
            # loopback and a free port: never expose a page, never clash on 8787
            dashboard_address="127.0.0.1:0",
        )
        client = distributed.Client(cluster, set_as_default=False)
    else:
        client = _connect(executor.scheduler)
    try:
        # one future for the whole dict (scattering a dict would give one per key);
        # hash=False: hashing tens of MB only to name the data would waste time
        shared_future = None
        if shared is not None:
            [shared_future] = client.scatter([shared], broadcast=True, hash=False)
        futures = client.map(_call_task, tasks, function=function, shared=shared_future, pure=False)
        index = {future.key: i for i, future in enumerate(futures)}
        results = [None] * len(tasks)
        for done, future in enumerate(distributed.as_completed(futures, loop=client.loop), start=1):
            results[index[future.key]] = future.result()
            if progress is not None:
                progress(done, len(tasks))
        return results
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# --- entry point ---------------------------------------------------------------


def map_tasks(executor: Executor, function, tasks: list, *, shared: dict | None = None, progress=None) -> list:
    """Call ``function(task, shared=shared)`` for every task; results in task order.

    Parameters
    ----------
    executor : Executor
        Where the tasks run.
    function : callable
        A module-level function (workers import it by name), called as
        ``function(task, shared=...)``: its second parameter must be named
        ``shared``. It should be single-threaded; the executor supplies the
        parallelism.
    tasks : list
        One picklable item per call (for example a node number).
    shared : dict, optional
        Large read-only inputs needed by every task (numpy arrays, numbers).
        Sent to each worker once per call, not once per task. The function
        receives a new dict whose arrays are read-only views.
    progress : callable, optional
        ``progress(done, total)`` after each result arrives (in completion
        order; the returned list is still in task order).

    Returns
    -------
    list
        ``[function(task, shared) for task in tasks]``.

    Raises
    ------
    InputError
        A dask scheduler that cannot be reached or has no workers.
    Exception
        The first exception raised by a task, re-raised here with the
        worker's traceback text; the remaining tasks are cancelled.
    """
    if not isinstance(executor, Executor):
        raise TypeError(f"executor must be an Executor, not {type(executor).__name__}")
    if shared is not None and not isinstance(shared, dict):
        raise TypeError(f"shared must be a dict or None, not {type(shared).__name__}")
    tasks = list(tasks)
    if not tasks:
        return []
    if executor.kind == "serial":
        views = _read_only(shared)
        results = []
        for done, task in enumerate(tasks, start=1):
            results.append(function(task, shared=views))
            if progress is not None:
                progress(done, len(tasks))
        return results
    if executor.kind == "processes":
        return _map_processes(executor, function, tasks, shared, progress)
    return _map_dask(executor, function, tasks, shared, progress)
