"""The distributed back end: station work as tasks on a dask.distributed cluster.

``tem run --scheduler local`` starts a LocalCluster of ``--jobs`` single-threaded
worker processes on this machine; ``--scheduler tcp://HOST:8786`` connects to a
running scheduler (docs/scaling.md shows how to start one, with workers by hand
or through dask-jobqueue on SLURM/PBS). Workers read their inputs from the
paths they are given (a file system shared with the client) and return
products as bytes; only the client writes into the project.
"""
from __future__ import annotations

import contextlib

from ..errors import input_error, shorten

__all__ = ["dask_client", "worker_peak_rss_mb", "profiling_note"]


def _peak_rss_mb() -> float:
    import resource
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def worker_peak_rss_mb(client) -> float:
    """Largest peak resident memory (MB) of the cluster's worker processes so far."""
    try:
        return float(max(client.run(_peak_rss_mb).values()))
    except (ValueError, OSError):  # pragma: no cover - no workers left
        return float("nan")


def _profiling() -> bool:
    import dask
    return bool(dask.config.get("distributed.worker.profile.enabled", True))


def profiling_note(client) -> str:
    """A one-line note when workers of the cluster run dask's statistical profiler, else "".

    The profiler keeps a tree of call sites per second for an hour (about 0.1 MB
    per station task measured here), so a worker's memory grows with the survey.
    """
    try:
        n = sum(client.run(_profiling).values())
    except (OSError, TimeoutError, ValueError):  # pragma: no cover - workers went away
        return ""
    if not n:
        return ""
    return (f"{n} dask worker(s) run the statistical profiler: their memory grows by about "
            "0.1 MB per station; start workers with DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED="
            "False (docs/scaling.md)")


#: dask settings of a ``--scheduler local`` cluster that cut its periodic work (above).
LOCAL_QUIET = {"distributed.admin.tick.interval": "500ms",
               "distributed.worker.memory.monitor-interval": "1s",
               "distributed.admin.system-monitor.interval": "2s"}


@contextlib.contextmanager
def dask_client(scheduler: str, jobs: int):
    """A dask.distributed Client for ``scheduler`` (``"local"`` or an address)."""
    try:
        import dask
        from distributed import Client, LocalCluster
    except ImportError:  # pragma: no cover - a run-time dependency
        raise input_error("--scheduler", "dask.distributed is not installed") from None
    # dask keeps its most recent low-level messages for debugging (1000 by default, per
    # stream): each holds a serialised station task (2-7 kB), so the client's memory grew
    # with the first few hundred stations of a run (measured: 1.1 MB per 400 stations in
    # the client's send log alone); 50 is plenty for a traceback
    # Each process's system monitor (the scheduler's runs in this process with a LocalCluster)
    # keeps a sample of CPU, memory and I/O every 0.5 s for an hour, for the dashboard, which
    # tem does not start: about 180 B per sample here (tracemalloc), so the client grew with
    # the run's length (1.3 MB after an hour). Two minutes of history are kept.
    logs = {"distributed.admin.low-level-log-length": 50,
            "distributed.admin.system-monitor.log-length": 240}
    if scheduler == "local":
        # A LocalCluster shares this machine's cores with the client, which runs its
        # scheduler and the workers' nannies: their event loops' periodic work (a tick every
        # 20 ms per server to detect a blocked loop, the nannies' memory checks every 100 ms,
        # the system monitor every 0.5 s) cost the idle client 0.05 CPU-s per second,
        # measured per thread; at a tick every 0.5 s, memory checks every second and samples
        # every 2 s it is 0.01 (docs/scaling.md); the same settings reach the workers
        logs.update(LOCAL_QUIET)
        # the workers' statistical profiler keeps a tree of call sites per second for an hour
        # (about 115 kB per station task here): off, so worker memory does not grow with the
        # survey; workers of a cluster started by hand: docs/scaling.md
        with dask.config.set({"distributed.worker.profile.enabled": False, **logs}), \
                LocalCluster(n_workers=max(1, int(jobs)), threads_per_worker=1, processes=True,
                             dashboard_address=None, silence_logs=50,
                             # no dashboard, and its small HTTP server on any free port (the
                             # default 8787 clashes with a second run or another cluster)
                             scheduler_kwargs={"dashboard_address": ":0"}) as cluster, \
                Client(cluster) as client:
            # numba's threads per worker: this machine's cores shared between the workers
            # (dask sets BLAS's to 1 already); numba counts them per thread, so each task
            # sets them where it runs (tem.runtime). A cluster started by hand: its workers'
            # NUMBA_NUM_THREADS (docs/scaling.md)
            from ..runtime import threads_per_worker
            client.worker_threads = threads_per_worker(jobs)
            yield client
        return
    try:
        with dask.config.set(logs):
            client = Client(scheduler, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise input_error("--scheduler", f"cannot reach {scheduler} "
                          f"({type(exc).__name__}: {shorten(str(exc).splitlines()[0], 80)})") from None
    with client:
        yield client
