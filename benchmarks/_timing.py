"""Shared timing helper of the benchmark scripts (run them from the project root)."""

from __future__ import annotations

import math
import time


def per_call(fn, repeats: int, min_time: float) -> float:
    """Fastest seconds per call of ``fn()`` over ``repeats`` batches of >= ``min_time`` s.

    The minimum over batches, not the median: on a shared machine other work only ever
    adds time, so the fastest batch is the best estimate of the call's own cost (the advice
    of the standard library's ``timeit`` documentation).
    """
    fn()  # warm up
    n = 1
    while True:  # size the batch so one batch lasts at least min_time
        t0 = time.perf_counter()
        for _ in range(n):
            fn()
        dt = time.perf_counter() - t0
        if dt >= min_time:
            break
        n *= 2
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(n):
            fn()
        times.append((time.perf_counter() - t0) / n)
    return min(times)


def interleaved(fns, repeats, min_time):
    """Fastest seconds per call of each of ``fns`` (name -> callable), batches taking turns.

    Each batch is sized to last at least ``min_time``; in each of ``repeats`` rounds every
    candidate runs one batch, and the fastest batch of each counts.
    """
    sizes = {}
    for name, fn in fns.items():
        fn()  # warm up
        n = 1
        while True:
            t0 = time.perf_counter()
            for _ in range(n):
                fn()
            if time.perf_counter() - t0 >= min_time:
                break
            n *= 2
        sizes[name] = n
    best = dict.fromkeys(fns, math.inf)
    for _ in range(repeats):
        for name, fn in fns.items():
            n = sizes[name]
            t0 = time.perf_counter()
            for _ in range(n):
                fn()
            best[name] = min(best[name], (time.perf_counter() - t0) / n)
    return best
