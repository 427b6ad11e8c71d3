"""Running retol's work on a dask.distributed cluster (optional: ``pip install ".[cluster]"``).

retol does not schedule work itself: a Monte Carlo's samples are cut into tasks of whole blocks
of draws (:data:`TASK_BLOCKS` blocks of :data:`tolerance.sampler.BLOCK` samples) and the points
of a sweep into one task each, and dask runs them.  Partial results are combined in block (or
point) order, never in completion order, so a cluster gives the same bits as a local run with the
same seed.  Each task caps numba's threads to the cores its worker was given.
"""

from __future__ import annotations

from contextlib import contextmanager

from .errors import RetolError

#: Blocks of draws per task (64 × 512 = 32,768 samples): a task takes about a second of kernel
#: time on the benchmark's 401 wavelengths, so dask's per-task overhead (about a millisecond) is
#: negligible.
TASK_BLOCKS = 64
#: Seconds to wait for a scheduler before giving up.
CONNECT_TIMEOUT_S = 10.0
INSTALL_HINT = 'install the optional extra: pip install ".[cluster]" (dask.distributed)'


def _distributed():
    try:
        import distributed
    except ImportError:
        return None
    return distributed


def check_options(workers, scheduler) -> None:
    """Refuse bad ``--workers`` / ``--scheduler`` combinations before any work."""
    if workers is not None and scheduler is not None:
        raise RetolError("--workers", "cannot be combined with --scheduler", "give one of them")
    if workers is not None and (isinstance(workers, bool) or workers < 1):
        raise RetolError("--workers", f"must be at least 1, got {workers}", "e.g. --workers 2")
    if (workers is not None or scheduler is not None) and _distributed() is None:
        field = "--workers" if workers is not None else "--scheduler"
        raise RetolError(field, "needs dask.distributed, which is not installed", INSTALL_HINT)


@contextmanager
def client(workers=None, scheduler=None, timeout_s: float = CONNECT_TIMEOUT_S):
    """A dask client for ``--workers N`` (a local cluster on loopback) or ``--scheduler
    ADDRESS`` (an existing cluster); None when neither is given (run locally).

    Raises
    ------
    RetolError
        dask.distributed missing, both options given, or the scheduler unreachable within
        ``timeout_s`` seconds.
    """
    check_options(workers, scheduler)
    if workers is None and scheduler is None:
        yield None
        return
    distributed = _distributed()
    cluster = None
    if workers is not None:
        cluster = distributed.LocalCluster(
            n_workers=int(workers),
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=":0",
        )
        c = distributed.Client(cluster)
    else:
        try:
            c = distributed.Client(str(scheduler), timeout=f"{timeout_s}s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise RetolError(
                "--scheduler",
                f"cannot reach {scheduler!r} within {timeout_s:g} s ({type(exc).__name__})",
                "check the address (e.g. tcp://host:8786) and that the scheduler runs",
            ) from None
    try:
        yield c
    finally:
        c.close()
        if cluster is not None:
            cluster.close()


def cap_threads() -> None:
    """Inside a dask task: numba uses no more threads than the worker's cores."""
    distributed = _distributed()
    if distributed is None:
        return
    try:
        n = distributed.get_worker().state.nthreads
    except (ValueError, AttributeError):
        return  # not on a worker
    import numba

    numba.set_num_threads(max(1, min(int(n), numba.config.NUMBA_NUM_THREADS)))


def task_ranges(n: int, block: int, blocks_per_task: int | None = None):
    """[start, stop) sample ranges of whole blocks (:data:`TASK_BLOCKS` each), in order."""
    size = block * (blocks_per_task or TASK_BLOCKS)
    return [(s, min(n, s + size)) for s in range(0, n, size)]


def map_ordered(c, func, items, *args, progress=None):
    """``func(item, *args)`` for every item on the cluster; results yielded in item order.

    ``args`` are scattered once (broadcast) rather than sent with every task.
    """
    shared = [c.scatter(a, broadcast=True, hash=False) for a in args]
    futures = [c.submit(func, item, *shared, pure=False) for item in items]
    try:
        for f in futures:
            yield f.result()
            f.release()
            if progress:
                progress()
    finally:
        for f in futures:
            f.cancel()
