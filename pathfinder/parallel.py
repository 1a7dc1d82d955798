"""Where repeated fits run: in this process, on local worker processes, or on a Dask cluster.

Cross-validation folds, stability subsamples and subset searches all repeat one
fit many times over the same data. They go through one small interface::

    results = run_tasks(fn, tasks, shared, Backend(jobs=2))

which calls ``fn(shared, task)`` for every task and returns the results in task
order, whichever backend ran them:

* ``Backend()``                            a plain loop in this process;
* ``Backend(jobs=N)``                      N local worker processes;
* ``Backend(cluster="tcp://HOST:8786")``   an existing Dask scheduler (or, from
                                           the Python API, a ``dask.distributed.Client``).

Rules for callers
-----------------
* ``fn`` must be a function defined at the top level of an importable module.
  Worker processes find it by its module and name, so a lambda or a function
  defined inside another function cannot be used (it is refused on every
  backend, so that code which works on one backend works on all of them).
* ``shared`` holds the large read-only data (design matrix, response, weights).
  It is sent to each worker once, not once per task. ``fn`` must not change it:
  on a cluster its arrays may arrive marked read-only.
* Each task is small plain data (numbers, index arrays, a small dataclass) and
  carries its own seed. Nothing random may depend on which worker runs a task
  or in which order tasks finish: then the results are the same, byte for
  byte, on every backend.
* Keep tasks coarse. Each task costs a fraction of a millisecond to send and
  collect on local processes and around a millisecond on a Dask cluster, on
  top of the start-up cost below, so a task should be a whole fold or a whole
  subsample (a full penalty path), not one penalty value. Group small fits
  into one task when they are many and quick.
* A script that asks for several local processes must start its work under
  ``if __name__ == "__main__":``, because each worker imports the script's
  module afresh (the pathfinder command is already written this way).

How local worker processes start
--------------------------------
Workers are started with the ``forkserver`` method where the platform has it
(Linux, macOS), otherwise with ``spawn``. Plain ``fork`` copies the parent as
it is, including threads that may be in the middle of something (BLAS thread
pools, compiled parallel loops, a progress-bar refresh thread), which can
leave a child deadlocked. ``forkserver`` instead forks each worker from a
small, single-threaded server process. pathfinder asks that server to import
pathfinder (and the module holding ``fn``) before its first fork, so every
worker starts with the package already loaded. Measured on a 2-core machine,
one call running 2 tasks (a bootstrap penalised path each) on 2 workers took
1.2 s with ``spawn``, 1.0 s with ``forkserver`` alone, and with the preloaded
``forkserver`` 0.7 s for the first call and 0.2 s for each later call (the same
two fits take 0.15 s in this process, so two workers pay off from a few
seconds of fitting upward). The server is shared by the whole Python process:
a preload list set elsewhere before its first start is replaced, and once it
runs the list no longer changes.

The shared data reach each worker through the pool initializer, which stores
them in a module-level slot of the worker process. The parent process never
writes to that slot.

Dask
----
Dask is imported only when a cluster is asked for. The shared data are
scattered once to every worker (``broadcast=True``); each task then refers to
that copy. A client that pathfinder creates is closed afterwards; a client
passed in by the caller is left open, and only the data and tasks of this call
are released from it.

Errors
------
An exception raised inside a task is raised again in this process with its
original type (an ``InputError`` stays an ``InputError``). When several tasks
fail, the first failure to arrive is raised and the tasks not yet started are
cancelled. A scheduler that cannot be reached, or a cluster asked for without
Dask installed, gives an ``InputError``.
"""

from __future__ import annotations

import multiprocessing
import numbers
import sys
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Any, Callable

from threadpoolctl import threadpool_limits

from .errors import InputError

# Seconds to wait for a Dask scheduler before giving up.
CONNECT_TIMEOUT = 10.0


@dataclass(frozen=True)
class Backend:
    """Where the repeated fits of one run are carried out.

    ``jobs`` is the number of local worker processes (1 runs everything in
    this process). ``cluster`` is the address of a running Dask scheduler,
    such as ``"tcp://10.0.0.5:8786"``, or a ``dask.distributed.Client`` that
    the caller already holds; with a cluster the number of workers is the
    cluster's, so ``jobs`` must stay 1. ``connect_timeout`` is how many
    seconds to wait for the scheduler to answer.
    """

    jobs: int = 1
    cluster: Any = None
    connect_timeout: float = CONNECT_TIMEOUT

    def __post_init__(self):
        if isinstance(self.jobs, bool) or not isinstance(self.jobs, numbers.Integral) or self.jobs < 1:
            raise InputError(
                f"the number of local processes (jobs) must be a whole number of at least 1, "
                f"got {self.jobs!r}; give 1 to run in this process or more to use several cores")
        if self.cluster is not None:
            if isinstance(self.cluster, str):
                if not self.cluster.strip():
                    raise InputError(
                        "the cluster address is empty; give the Dask scheduler address, "
                        "for example tcp://10.0.0.5:8786, or leave the cluster option out")
            elif not callable(getattr(self.cluster, "scatter", None)):
                raise InputError(
                    f"the cluster option takes a scheduler address such as tcp://10.0.0.5:8786 "
                    f"or a dask.distributed.Client, got {type(self.cluster).__name__}")
            if self.jobs != 1:
                raise InputError(
                    f"both a cluster ({_cluster_address(self.cluster)}) and {self.jobs} local "
                    f"processes were asked for; give one of the two (the cluster decides its own workers)")
        if not (isinstance(self.connect_timeout, numbers.Real) and self.connect_timeout > 0):
            raise InputError(
                f"the cluster connection timeout must be a positive number of seconds, "
                f"got {self.connect_timeout!r}")


def describe(backend: Backend) -> str:
    """A short phrase for the run record: where the repeated fits ran."""
    if backend.cluster is not None:
        return f"Dask cluster at {_cluster_address(backend.cluster)}"
    if backend.jobs == 1:
        return "this process"
    return f"{backend.jobs} local processes"


def _cluster_address(cluster) -> str:
    """The scheduler address of a cluster given as an address or as a client."""
    if isinstance(cluster, str):
        return cluster.strip()
    address = getattr(getattr(cluster, "scheduler", None), "address", None)
    return str(address) if address else "a scheduler reached through the given client"


class Session:
    """One backend held open for a whole run, so the shared data travel once.

    A run has several stages (cross-validation, relaxation, stability,
    subsets, nested cross-validation) that all read the same problem. Within a
    session the local worker pool, or the Dask client and the scattered copy
    of the shared data, are kept and reused by every stage that passes the
    same ``shared`` object; only tasks and results travel after that::

        with Session(Backend(jobs=2)) as session:
            first = session.run(fn, tasks, problem)
            second = session.run(other_fn, more_tasks, problem)   # problem not sent again

    ``sends`` counts how many times shared data were sent out.
    """

    def __init__(self, backend: Backend, *, max_workers: int | None = None):
        self.backend = backend
        self.workers = backend.jobs if max_workers is None else min(backend.jobs, max_workers)
        self.sends = 0
        self._pool = None            # (shared, ProcessPoolExecutor)
        self._client = None
        self._client_owned = False
        self._scattered = None       # (shared, future)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self):
        if self._pool is not None:
            self._pool[1].shutdown(wait=True, cancel_futures=True)
            self._pool = None
        if self._scattered is not None and self._client is not None and not self._client_owned:
            try:
                self._client.cancel([self._scattered[1]])
            except Exception:  # the caller's cluster may already be gone
                pass
        self._scattered = None
        if self._client is not None and self._client_owned:
            self._client.close()
        self._client = None

    def run(self, fn: Callable, tasks: list, shared, *, on_done=None) -> list:
        """``fn(shared, task)`` for every task, results in task order (see run_tasks)."""
        tasks = list(tasks)
        backend = self.backend
        _check_module_level(fn, local_processes=backend.cluster is None and backend.jobs > 1)
        if not tasks:
            return []
        if backend.cluster is not None:
            return self._run_on_cluster(fn, tasks, shared, on_done)
        if min(self.workers, len(tasks)) == 1:
            return _run_here(fn, tasks, shared, on_done)
        return self._run_on_pool(fn, tasks, shared, on_done)

    def _run_on_pool(self, fn, tasks, shared, on_done):
        if self._pool is None or self._pool[0] is not shared:
            if self._pool is not None:
                self._pool[1].shutdown(wait=True)
            pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=_start_method_context(fn),
                                       initializer=_start_worker, initargs=(shared,))
            self._pool = (shared, pool)
            self.sends += 1
        pool = self._pool[1]
        results = [None] * len(tasks)
        futures = {pool.submit(_run_in_worker, task, fn): i for i, task in enumerate(tasks)}
        try:
            for future in as_completed(futures):
                i = futures[future]
                results[i] = future.result()  # raises the task's own exception
                if on_done is not None:
                    on_done(i)
        except BrokenProcessPool:
            self._pool = None
            raise InputError(f"a worker process was stopped (often for lack of memory) while "
                             f"{self.workers} ran at once: try fewer --jobs") from None
        except BaseException:
            for future in futures:
                future.cancel()
            raise
        return results

    def _run_on_cluster(self, fn, tasks, shared, on_done):
        if self._client is None:
            self._client, self._client_owned = _connect(self.backend)
        client = self._client
        from dask.distributed import as_completed as as_completed_on_cluster
        if self._scattered is None or self._scattered[0] is not shared:
            if self._scattered is not None:
                client.cancel([self._scattered[1]])
            self._scattered = (shared, client.scatter(shared, broadcast=True, hash=False))
            self.sends += 1
        future_shared = self._scattered[1]
        futures = client.map(one_thread, [fn] * len(tasks), [future_shared] * len(tasks), tasks,
                             pure=False)
        position = {future.key: i for i, future in enumerate(futures)}
        results = [None] * len(tasks)
        try:
            for future in as_completed_on_cluster(futures, loop=client.loop):
                i = position[future.key]
                results[i] = future.result()  # raises the task's own exception
                if on_done is not None:
                    on_done(i)
        except BaseException:
            client.cancel(futures)
            raise
        return results


def run_tasks(fn: Callable, tasks: list, shared, backend: Backend, *,
              on_done: Callable[[int], Any] | None = None) -> list:
    """Call ``fn(shared, task)`` for every task; return the results in task order.

    ``on_done(i)`` is called in this process as soon as task ``i`` has
    finished (in whatever order tasks finish), for progress display. With
    local processes, no more workers are started than there are tasks, and a
    single task runs in this process. (A :class:`Session` does the same for
    several calls that share data.)
    """
    tasks = list(tasks)
    with Session(backend, max_workers=max(len(tasks), 1)) as session:
        return session.run(fn, tasks, shared, on_done=on_done)


# --------------------------------------------------------------------------
# In this process
# --------------------------------------------------------------------------


def _run_here(fn, tasks, shared, on_done) -> list:
    results = []
    with threadpool_limits(limits=1):  # as in the workers: see one_thread
        for i, task in enumerate(tasks):
            results.append(fn(shared, task))
            if on_done is not None:
                on_done(i)
    return results


def one_thread(fn, shared, task):
    """Run one task with a single linear-algebra thread.

    Every backend runs tasks this way. Matrix products summed by two threads
    round differently from one thread, so this is what makes results equal to
    the last bit wherever a task runs; and on a core that is already busy a
    second thread only slows small products down.
    """
    with threadpool_limits(limits=1):
        return fn(shared, task)


# --------------------------------------------------------------------------
# Local worker processes
# --------------------------------------------------------------------------

# Set only inside a worker process, once, by _start_worker.
_worker_shared = None


def _start_worker(shared) -> None:
    """Pool initializer: runs once in each worker process and keeps the shared data.

    Each worker's linear-algebra library gets one thread: the workers already
    fill the cores, and two threads per worker on a busy core made small
    matrix products twenty times slower (measured on a 2-core machine).
    """
    global _worker_shared
    threadpool_limits(limits=1)
    _worker_shared = shared


def _run_in_worker(task, fn):
    """Runs in a worker: ``fn`` travels with each task by reference (module and name)."""
    return fn(_worker_shared, task)


def _start_method_context(fn):
    """A multiprocessing context using forkserver (preloaded) where available, else spawn."""
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    context = multiprocessing.get_context("forkserver")
    preload = ["pathfinder"]
    if fn.__module__ not in ("__main__", "pathfinder"):
        preload.append(fn.__module__)
    context.set_forkserver_preload(preload)  # only acts before the server's first start
    return context


# --------------------------------------------------------------------------
# Dask cluster
# --------------------------------------------------------------------------


def _connect(backend: Backend):
    """The client to use and whether this call created it (and so must close it)."""
    if not isinstance(backend.cluster, str):
        return backend.cluster, False
    try:
        from dask.distributed import Client
        from distributed.comm import get_address_host_port
    except ImportError:
        raise InputError("the cluster option needs dask: pip install 'pathfinder[cluster]'") from None
    address = backend.cluster.strip()
    try:
        # Checked before connecting: a client refused for its address is left
        # half made and complains when Python exits.
        get_address_host_port(address)
    except ValueError as error:
        raise InputError(
            f"the cluster address {address} is not a Dask scheduler address ({error}); "
            f"give it as tcp://HOST:PORT, for example tcp://10.0.0.5:8786") from None
    try:
        client = Client(address, timeout=backend.connect_timeout, set_as_default=False)
    except (OSError, TimeoutError):
        raise InputError(
            f"could not reach the Dask scheduler at {address} within {backend.connect_timeout:g} s; "
            f"check that the scheduler is running, that the address has "
            f"the form tcp://HOST:PORT and that no firewall blocks it, or leave out the cluster "
            f"option to run on this machine") from None
    return client, True


# --------------------------------------------------------------------------
# Checks
# --------------------------------------------------------------------------


def _check_module_level(fn, *, local_processes: bool) -> None:
    """Refuse functions that worker processes could not find by module and name."""
    name = getattr(fn, "__qualname__", None) or repr(fn)
    module = sys.modules.get(getattr(fn, "__module__", None) or "")
    found = module
    for part in name.split("."):
        found = getattr(found, part, None)
    if found is not fn:
        raise InputError(
            f"repeated fits need a function defined at the top level of a module, got {name}; "
            f"move it out of any function or class body and give it a name (no lambda)")
    if local_processes and fn.__module__ == "__main__" and not getattr(module, "__file__", None):
        raise InputError(
            f"{name} is defined interactively, where worker processes cannot find it; "
            f"put it in a .py module and import it, or run with one process")
