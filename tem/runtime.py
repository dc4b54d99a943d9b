"""What every stage shares: per-station outcomes, a stage's result, running stations in a pool.

A stage's ``run`` processes stations with :func:`map_stations` (in a process
pool when the context holds one), so that ``tem <stage>`` and ``tem run`` do
the same work in the same way. A station that fails is reported with one line
and the others go on.
"""
from __future__ import annotations

import concurrent.futures as cf
import contextlib
import multiprocessing as mp
from collections.abc import MutableMapping
from dataclasses import dataclass, field

from .errors import TemInputError, TemOutputError, workers_error

__all__ = ["StationOutcome", "StageResult", "StageContext", "Outcomes", "map_stations",
           "return_large_blocks", "process_pool", "threads_per_worker",
           "write_products", "report_progress", "Tally"]


@dataclass
class StationOutcome:
    """What one stage did for one station.

    status is ``ok`` or ``failed``; ``info`` holds summary values (usable
    gates, chi2, DOI, verdicts) that the run record and tables show;
    ``payload`` carries data back to the parent process (table rows, results);
    ``products`` are the files of the station as ``(path, bytes)``: a worker
    (a local process or a cluster node) only computes, the parent writes them
    (atomically) and lists them in ``outputs``.
    """

    station: str
    status: str
    message: str = ""
    outputs: list = field(default_factory=list)
    inputs: list = field(default_factory=list)   # [{"file", "sha256"}]
    info: dict = field(default_factory=dict)
    payload: object = None
    products: list = field(default_factory=list)  # [(path, bytes)]: written by the parent
    bad_input: bool = False     # failed on an input the user gave (a TemInputError): exit 2


@dataclass
class StageResult:
    """What a stage did: per-station outcomes, profile outputs, notes and input checksums."""

    stations: dict = field(default_factory=dict)  # id -> StationOutcome
    outputs: list = field(default_factory=list)
    inputs: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    failed: str = ""                              # profile-level failure (one line)

    @property
    def ok(self) -> list:
        """Ids of the stations that passed."""
        return [s for s, oc in self.stations.items() if oc.status == "ok"]

    @property
    def bad_input(self) -> bool:
        """A station failed on an input the user gave (one line, exit status 2)."""
        return any(oc.bad_input for oc in self.stations.values())

    @property
    def any_failed(self) -> bool:
        return bool(self.failed) or any(oc.status != "ok" for oc in self.stations.values())

    def all_outputs(self) -> list:
        return list(self.outputs) + [o for oc in self.stations.values() for o in oc.outputs]


class Outcomes(MutableMapping):
    """A stage's station outcomes (station -> :class:`StationOutcome`), in the order of its
    stations, kept in a spool on disk (:mod:`tem.io.spool`) as they arrive: a stage over
    thousands of stations does not hold thousands of outcomes in memory. A payload that is
    text (a station's table rows, its QC measures as JSON) is kept in the spool with its
    outcome; other payloads a stage keeps (not taken by ``map_stations(..., consume=)``) stay
    in memory. Reading an outcome gives a copy: change one by assigning it again."""

    def __init__(self, ids=()):
        from .io.spool import Spool

        self._spool = Spool()
        self._d = self._spool.dict("outcomes")
        self._payloads = {}
        for sid in ids:                    # the stations' order, whatever the arrival order
            self._d[sid] = None

    def __setitem__(self, sid, oc):
        text = oc.payload if isinstance(oc.payload, str) else None
        self._d[sid] = {"status": oc.status, "message": oc.message, "outputs": list(oc.outputs),
                        "inputs": list(oc.inputs), "info": oc.info, "bad_input": oc.bad_input,
                        "text": text}
        if oc.payload is None or text is not None:
            self._payloads.pop(sid, None)
        else:
            self._payloads[sid] = oc.payload

    def __getitem__(self, sid):
        v = self._d[sid]
        if v is None:
            raise KeyError(sid)
        payload = v["text"] if v["text"] is not None else self._payloads.get(sid)
        return StationOutcome(sid, v["status"], v["message"], outputs=v["outputs"],
                              inputs=v["inputs"], info=v["info"], payload=payload,
                              bad_input=v["bad_input"])

    def __delitem__(self, sid):
        del self._d[sid]
        self._payloads.pop(sid, None)

    def __iter__(self):
        return iter(self._d.keys_where(any_status=True))

    def __len__(self):
        return len(self._d.keys_where(any_status=True))

    def __contains__(self, sid):
        return sid in self._d and self._d[sid] is not None


@dataclass
class StageContext:
    """How a stage runs, apart from its settings and inputs.

    executor : a process pool or None (in this process). progress : called as
    ``progress(station, status)`` after each station (or None). partial :
    called as ``partial(station, fraction)`` while a station is worked on
    (stages that can tell, e.g. stacking by chunks; local processes only) or
    None. figures :
    write the per-station and profile figures. run_state : the run record of
    ``tem run`` (None for a stage command). reused : station -> outcome carried
    over from an earlier run (its products are on disk and up to date): those
    stations are not computed again.
    """

    executor: object = None
    progress: object = None
    partial: object = None
    figures: bool = True
    run_state: dict | None = None
    reused: dict = field(default_factory=dict)


_REPORT = None
_QUEUE = None          # in a pool worker: the pool's progress queue


def report_progress(fraction: float):
    """Tell the parent how far the current station's work is (0..1); a no-op when nobody listens.

    Station tasks call it (e.g. the stacker after every chunk); it reaches
    :attr:`StageContext.partial` in the parent, throttled.
    """
    if _REPORT is not None:
        _REPORT(float(fraction))


class _QueueReporter:
    """Sends ``(station, fraction)`` to the parent through the pool's queue, at most 5 per second."""

    def __init__(self, queue, station):
        self.queue, self.station, self.last = queue, station, 0.0

    def __call__(self, fraction):
        import time
        now = time.monotonic()
        if fraction >= 1.0 or now - self.last >= 0.2:
            self.last = now
            self.queue.put((self.station, fraction))


class Tally:
    """Stations done plus the fractions of those in progress, for a progress bar.

    ``update(completed, text)`` is called with the number of stations done
    (fractional while stations are worked on) and a short description.
    """

    def __init__(self, update):
        self.update = update
        self.done = 0
        self.partial = {}

    def station(self, sid, status):
        self.partial.pop(sid, None)
        self.done += 1
        mark = "ok" if status == "ok" else "[red]FAILED[/]"
        self.update(self.done + sum(self.partial.values()), f"{sid} {mark}")

    def fraction(self, sid, fraction):
        self.partial[sid] = min(max(float(fraction), 0.0), 0.999)
        self.update(self.done + sum(self.partial.values()), f"{sid} {fraction:.0%}")


def _guarded(task, station, args, reporter=None):
    """Run a station task; any failure becomes a one-line failed outcome.

    A failed write (:class:`TemOutputError`: disk full, file-size limit) is
    not a station's fault: it stops the stage.
    """
    global _REPORT
    _REPORT = _QueueReporter(_QUEUE, station) if reporter == "queue" and _QUEUE is not None \
        else reporter if callable(reporter) else None
    try:
        return task(*args)
    except TemOutputError:
        raise
    except TemInputError as exc:
        return StationOutcome(station, "failed", str(exc).splitlines()[0], bad_input=True)
    except Exception as exc:  # noqa: BLE001 - one station must not stop the batch
        text = f"{type(exc).__name__}: {exc}".splitlines()[0]
        return StationOutcome(station, "failed", text)
    finally:
        _REPORT = None


def write_products(oc: StationOutcome):
    """Write a station's products (in this, the parent, process) and list them in outputs."""
    from .io.atomic import write_bytes_atomic

    for path, data in oc.products:
        oc.outputs.append(str(write_bytes_atomic(path, data)))
    oc.products = []


def map_stations(task, jobs, ctx: StageContext, consume=None) -> Outcomes:
    """Run ``task(*args)`` for each ``(station, args)`` in ``jobs``; returns id -> outcome.

    Uses ``ctx.executor`` when given (a process pool or a dask.distributed
    client; a crashed worker fails only its station), else runs in this
    process. Each outcome's products are written here as it arrives, then
    passed to ``consume`` (when given: it may take the payload, so the stage
    never holds every station's payload at once) and reported through
    ``ctx.progress``; the result keeps the order of ``jobs``. A failed write
    (:class:`TemOutputError`) stops the stage. ``args`` may be a function of no
    arguments that makes them, called when the station is submitted (so a stage
    need not build every station's arguments at once). The outcomes come back as
    :class:`Outcomes` (kept on disk).
    """
    out = Outcomes(sid for sid, _ in jobs)

    def done(oc):
        write_products(oc)
        if consume is not None:
            consume(oc)
        out[oc.station] = oc
        if ctx.progress:
            ctx.progress(oc.station, oc.status)

    for sid, _ in jobs:
        if sid in ctx.reused:
            done(ctx.reused[sid])
    todo = [(sid, args) for sid, args in jobs if sid not in ctx.reused]
    if ctx.executor is None or len(todo) <= 1:
        for sid, args in todo:
            rep = (lambda f, sid=sid: ctx.partial(sid, f)) if ctx.partial else None
            done(_guarded(task, sid, _args(args), rep))
        return out
    with _partial_listener(ctx) as listening:
        _run_windowed(ctx.executor, task, todo, "queue" if listening else None, done)
    return out


def _args(args):
    return args() if callable(args) else args


def in_flight(executor) -> int:
    """How many station tasks :func:`map_stations` keeps submitted at once: four per worker
    thread (at least 8), so every worker has the next station queued while the client holds
    the task state and results of a bounded number of stations, whatever the survey's size."""
    try:
        if hasattr(executor, "nthreads"):                  # dask.distributed.Client
            n = sum(executor.nthreads().values())
        else:
            n = int(getattr(executor, "_max_workers", 2))
    except Exception:  # noqa: BLE001 - a cluster that does not answer: the floor
        n = 2
    return max(8, 4 * n)


@contextlib.contextmanager
def _partial_listener(ctx):
    """Pass the pool's ``(station, fraction)`` messages to ``ctx.partial`` while stations run."""
    import threading

    queue = getattr(ctx.executor, "progress_queue", None)
    if ctx.partial is None or queue is None:
        yield False
        return
    stop = threading.Event()

    def listen():
        import queue as q
        while not stop.is_set():
            try:
                item = queue.get(timeout=0.2)
            except (q.Empty, OSError, EOFError, ValueError):
                continue
            ctx.partial(*item)

    t = threading.Thread(target=listen, name="tem-progress", daemon=True)
    t.start()
    try:
        yield True
    finally:
        stop.set()
        t.join(timeout=2)


def batch_size(executor, n_todo) -> int:
    """Stations per task on a dask.distributed cluster: up to 4, while every worker thread
    still gets 8 tasks or more (so the last task of a stage leaves a worker idle for at most a
    few stations' time); 1 with a local process pool.

    Every task costs the client (with a LocalCluster, the scheduler runs in it) about 10 ms
    of CPU for scheduling, messages and its future (measured with py-spy on a 250-station
    run, docs/scaling.md); on 2 cores shared with 2 workers that time is taken from them, so
    a task carries several stations."""
    if not hasattr(executor, "scheduler_info"):
        return 1
    try:
        threads = max(1, sum(executor.nthreads().values()))
    except Exception:  # noqa: BLE001 - a cluster that does not answer: one per task
        return 1
    return max(1, min(4, n_todo // (8 * threads)))


def _guarded_batch(task, items, reporter=None, threads=None):
    """:func:`_guarded` for each ``(station, args)`` of ``items``, in order (one cluster task);
    with ``threads``, numba's threads in the thread running it are capped at that number
    (the number is per thread in numba)."""
    if threads is not None:
        _cap_numba_threads(threads)
    return [_guarded(task, sid, args, reporter) for sid, args in items]


def _cap_numba_threads(threads: int):
    import numba

    numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))


def _run_windowed(executor, task, todo, reporter, done, batch=None):
    """Submit ``todo`` to ``executor`` with at most :func:`in_flight` tasks pending; pass
    each outcome to ``done`` as it finishes (a failed task fails its stations only).

    On a dask cluster a task carries ``batch`` stations (default :func:`batch_size`); their
    outcomes are passed on one by one in the order of ``todo``."""
    import itertools

    pending = {}
    queue = iter(todo)
    window = in_flight(executor)
    dask = hasattr(executor, "scheduler_info")
    batch = max(1, int(batch or batch_size(executor, len(todo))))
    submitted = [0]

    def submit_next():
        items = [(sid, _args(args)) for sid, args in itertools.islice(queue, batch)]
        if not items:
            return None
        if dask:
            # pure=False: a random key, so dask does not hash the arguments (a station's
            # survey text and arrays) to name the task
            fut = executor.submit(_guarded_batch, task, items, reporter,
                                  getattr(executor, "worker_threads", None), pure=False)
        else:
            # workers start on submission (the forkserver's socket, a process limit): a pool
            # that cannot start them stops the stage in one line
            try:
                fut = executor.submit(_guarded_batch, task, items, reporter)
            except (OSError, cf.BrokenExecutor) as exc:
                raise workers_error(exc, started=len(pending) < submitted[0]) from None
            submitted[0] += 1
        pending[fut] = [sid for sid, _ in items]
        return fut

    for _ in range(window):
        if submit_next() is None:
            break
    try:
        if dask:
            from distributed import as_completed
            finished = as_completed(list(pending))
            for fut in finished:
                _take(fut, pending.pop(fut), done)
                new = submit_next()
                if new is not None:
                    finished.add(new)
        else:
            while pending:
                ready, _ = cf.wait(list(pending), return_when=cf.FIRST_COMPLETED)
                for fut in ready:
                    _take(fut, pending.pop(fut), done)
                    submit_next()
    finally:
        for fut in pending:                               # a failed write stopped the stage
            fut.cancel()


def _take(fut, sids, done):
    """The outcomes of one finished task (the stations ``sids``)."""
    try:
        outcomes = fut.result()
    except TemOutputError:
        raise
    except Exception as exc:  # noqa: BLE001 - e.g. a killed worker process
        text = f"worker failed: {type(exc).__name__}: {exc}".splitlines()[0]
        outcomes = [StationOutcome(sid, "failed", text) for sid in sids]
    if hasattr(fut, "release"):     # a cluster keeps a result until its future is let go
        fut.release()
    del fut
    for oc in outcomes:
        done(oc)


def _worker_init(pid: int, queue=None, threads: int | None = None):
    """Pool worker initializer: watch the parent; keep the progress queue; cap numba's
    threads at ``threads`` (:func:`threads_per_worker`)."""
    global _QUEUE
    _QUEUE = queue
    _watch_parent(pid)
    if threads is not None:
        _cap_numba_threads(threads)


def threads_per_worker(jobs: int) -> int:
    """numba threads for each of ``jobs`` worker processes: this machine's usable cores
    shared between them (at least 1).

    numba starts one thread per core in every process by default, so ``jobs`` workers
    on as many cores ran ``jobs`` times as many threads as cores wherever the forward
    modelling runs many models at once (the few-layer population search): on a 32-core
    node with 32 workers, 1024 threads. On the 2-core test machine the effect on the
    demo's invert stage was within the run-to-run spread (docs/scaling.md).
    """
    import os

    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - platforms without affinity
        cores = os.cpu_count() or 1
    return max(1, cores // max(1, int(jobs)))


def _watch_parent(pid: int, period: float = 0.5):
    """End this worker soon after the process ``pid`` ends (even kill -9)."""
    import os
    import threading
    import time

    def watch():
        while True:
            time.sleep(period)
            try:
                os.kill(pid, 0)
            except ProcessLookupError:
                os._exit(1)
            except PermissionError:  # pragma: no cover - another user's process took the pid
                os._exit(1)

    threading.Thread(target=watch, name="tem-parent-watch", daemon=True).start()


def process_pool(jobs: int):
    """A process pool of ``jobs`` workers (forkserver start: safe beside progress threads).

    Each worker ends within a second when this process ends, however it ends.
    The pool's ``progress_queue`` carries :func:`report_progress` messages of
    its workers to the parent.
    """
    import os

    if jobs <= 1:
        return None
    try:
        ctx = mp.get_context("forkserver")
    except ValueError:  # pragma: no cover - platforms without forkserver
        ctx = mp.get_context("spawn")
    # the workers, the forkserver and the resource tracker run this interpreter afresh: one
    # this user cannot run (a venv linking into another user's home) would kill them at start
    # and leave their pipes broken
    from multiprocessing import spawn

    exe = os.fsdecode(spawn.get_executable())
    if not os.access(exe, os.X_OK):
        raise workers_error(f"{os.path.realpath(exe)} cannot be run by this user")
    try:
        queue = ctx.Queue()          # a semaphore: fails where /dev/shm cannot be used
        pool = cf.ProcessPoolExecutor(max_workers=int(jobs), mp_context=ctx,
                                      initializer=_worker_init,
                                      initargs=(os.getpid(), queue, threads_per_worker(jobs)))
    except OSError as exc:
        raise workers_error(exc) from None
    pool.progress_queue = queue
    return pool


#: Allocations of this many bytes or more are served by mmap and returned on free
#: (:func:`return_large_blocks`).
LARGE_BLOCK = 128 * 1024


def return_large_blocks(threshold: int = LARGE_BLOCK) -> bool:
    """Have glibc serve blocks of ``threshold`` bytes or more by ``mmap``, at a fixed threshold.

    glibc starts at 128 kB but raises its threshold to the size of each such block freed
    (up to 32 MB), after which large transient buffers (a netCDF image, a decoded table)
    come from the heap, and the heap's high-water mark, never given back, grows with the
    survey. Measured (client of ``tem run`` through the invert stage, 100 and 400 stations,
    local pool of 2): the peak grew by 3.0 MB without the fixed threshold (251.2 -> 254.2 MB)
    and by 2.4 MB with it (248.8 -> 251.2 MB), the heap's free space at the end 7.7 -> 9.3 MB
    without, 2.7 MB with. Linux/glibc only; a threshold the user set
    (``MALLOC_MMAP_THRESHOLD_``) is kept. Returns whether it was set.
    """
    import ctypes
    import os
    import sys

    if not sys.platform.startswith("linux") or "MALLOC_MMAP_THRESHOLD_" in os.environ:
        return False
    try:
        mallopt = ctypes.CDLL("libc.so.6").mallopt
    except (OSError, AttributeError):  # pragma: no cover - not glibc (e.g. musl)
        return False
    M_MMAP_THRESHOLD = -3                  # glibc's malloc.h
    return bool(mallopt(M_MMAP_THRESHOLD, int(threshold)))
