"""Shared helpers for the benchmarks (timing, JSON lines)."""
import json
import time


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


def emit(record):
    print(json.dumps(record), flush=True)
