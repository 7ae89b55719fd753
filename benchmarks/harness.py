"""Side-by-side timing and memory measurements for `make bench`.

Each benchmark module `benchmarks/bench_*.py` defines functions named `bench_*`
that take no argument and return a list of records (dicts) built with `timed_pair`
or `memory_record`. `python -m benchmarks.run` runs them all, prints a table and
writes `reports/bench/results.json`.
"""
from __future__ import annotations

import gc
import json
import os
import pathlib
import statistics
import subprocess
import sys
import time
from typing import Any, Callable


def seconds(fn: Callable[[], Any]) -> float:
    """Wall-clock seconds of one call of fn, after a garbage collection."""
    gc.collect()
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


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
    """Time ours and the reference alternately in this process (ours, reference, ours, ...), so a change in the
    machine's load during the measurement falls on both; ratio = median reference / median ours, with the
    ratio of each pair beside it to show the spread."""
    pairs = [(seconds(ours), seconds(reference)) for _ in range(repeats)]
    ours_s, ref_s = statistics.median(o for o, _ in pairs), statistics.median(r for _, r in pairs)
    ratio = ref_s / ours_s if ours_s > 0 else float("inf")
    record = {
        "name": name,
        "ours_seconds": ours_s,
        "reference": reference_name,
        "reference_seconds": ref_s,
        "ratio": ratio,
        "pair_ratios": [r / o if o > 0 else float("inf") for o, r in pairs],
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


# ------------------------------------------------------------------ fresh processes and their own peaks
def load_average() -> dict:
    """The machine's load when a record was taken: a loaded machine distorts timings and speed-ups."""
    one, five, fifteen = os.getloadavg()
    return {"load_average_1_5_15min": [round(one, 2), round(five, 2), round(fifteen, 2)], "cores": os.cpu_count()}


def own_peak_mib() -> float:
    """Peak resident set of this process's own address space (VmHWM).

    Not ru_maxrss: Linux carries ru_maxrss over fork and exec, so a child started by a process that
    once held 854 MiB reports at least 854 MiB whatever it does itself (that is why two unrelated
    workloads once showed the same figure: the peak of the benchmark runner that started them).
    VmHWM belongs to the address space, which exec replaces, so it counts only this program.
    """
    for line in pathlib.Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024.0
    import resource   # not Linux: the best available, with the caveat above

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run_fresh(module: str, workload: str, timeout: float = 3600) -> dict:
    """Run one workload of benchmarks/<module>.py in a new interpreter; its JSON result, with
    `peak_mib` (that process's own peak) and `rss_after_imports_mib` (before the workload)."""
    root = pathlib.Path(__file__).resolve().parent.parent
    done = subprocess.run([sys.executable, "-m", f"benchmarks.{module}", workload], cwd=root,
                          capture_output=True, text=True, timeout=timeout)
    if done.returncode != 0:
        raise RuntimeError(f"{module} {workload} failed:\n{done.stderr[-3000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def child_main(workloads: dict[str, Callable[[], dict]]) -> None:
    """Entry point of a fresh process: run the named workload, print its result and this process's peak."""
    rss = float(pathlib.Path("/proc/self/statm").read_text().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2**20
    result = workloads[sys.argv[1]]()
    result.update(peak_mib=own_peak_mib(), rss_before_workload_mib=rss)
    print(json.dumps(result))
