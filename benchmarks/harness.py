"""Side-by-side timing and memory measurements for `make bench`.

Each benchmark module `benchmarks/bench_*.py` defines functions named `bench_*`
that take no argument and return a list of records (dicts) built with `timed_pair`
or `memory_record`. `python -m benchmarks.run` runs them all, prints a table and
writes `reports/bench/results.json`.
"""
from __future__ import annotations

import gc
import statistics
import time
from typing import Any, Callable


def median_seconds(fn: Callable[[], Any], repeats: int = 3) -> tuple[float, Any]:
    """Median wall-clock seconds of `repeats` calls of fn, and the last result."""
    times = []
    result = None
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def timed_pair(
    name: str,
    ours: Callable[[], Any],
    reference_name: str,
    reference: Callable[[], Any],
    goal: str,
    repeats: int = 3,
    min_ratio: float | None = None,
    extra: dict | None = None,
) -> dict:
    """Time ours and the reference alternately in this process; ratio = reference / ours."""
    ours_s, _ = median_seconds(ours, repeats)
    ref_s, _ = median_seconds(reference, repeats)
    ratio = ref_s / ours_s if ours_s > 0 else float("inf")
    record = {
        "name": name,
        "ours_seconds": ours_s,
        "reference": reference_name,
        "reference_seconds": ref_s,
        "ratio": ratio,
        "goal": goal,
    }
    if min_ratio is not None:
        record["met"] = bool(ratio >= min_ratio)
    if extra:
        record.update(extra)
    return record


def memory_record(name: str, ours_peak_mib: float, goal: str, limit_mib: float | None = None,
                  extra: dict | None = None) -> dict:
    record = {"name": name, "ours_peak_mib": ours_peak_mib, "goal": goal}
    if limit_mib is not None:
        record["met"] = bool(ours_peak_mib <= limit_mib)
    if extra:
        record.update(extra)
    return record
