"""Shared helpers for the benchmarks (timing, JSON lines)."""
import json
import time

import numpy as np


def best_time(fn, repeat=5, min_total=0.5):
    """Best CPU time of ``fn()`` over at least ``repeat`` calls [s].

    CPU (process) time, not wall time, so that other work on the machine does
    not distort the ratio; numba kernels run single-threaded.
    """
    fn()  # warm-up (JIT, caches)
    best = float("inf")
    n = 0
    t_start = time.process_time()
    while n < repeat or (time.process_time() - t_start) < min_total:
        t0 = time.process_time()
        fn()
        best = min(best, time.process_time() - t0)
        n += 1
        if n > 200:
            break
    return best


def cpu_per_call(fn, min_block=0.02):
    """CPU time of one call of ``fn`` [s], from a block of calls lasting ``min_block`` s or more."""
    n = 0
    t0 = time.process_time()
    while True:
        fn()
        n += 1
        dt = time.process_time() - t0
        if dt >= min_block:
            return dt / n


def alternate(fns, rounds=7, min_block=0.02):
    """Median CPU time per call [s] of each function, the functions run in turn.

    Each round times every function once (a block of calls for fast ones), so
    that a change of load on the shared machine affects all of them alike.
    """
    for fn in fns.values():
        fn()  # warm-up (JIT, caches)
    times = {k: [] for k in fns}
    for _ in range(rounds):
        for k, fn in fns.items():
            times[k].append(cpu_per_call(fn, min_block))
    return {k: float(np.median(v)) for k, v in times.items()}


def emit(record):
    print(json.dumps(record), flush=True)
