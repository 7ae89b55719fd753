"""Full scale: an expression-like problem, 200 rows × 20 000 features, both families, three losses,
50 resamples for each loss, two worker processes — one `penduel run` as a user starts it.

The data imitate gene expression: log-scale values, genes in co-expressed modules of 50 (one latent
factor per module, correlation about 0.6 inside a module), 10 genes with an effect on the outcome,
Gaussian noise. Wall time is the whole process (imports, CSV load, all fits, store, report); the peak
memory is the largest sum of resident sets over penduel and its workers, sampled every 0.2 s (pages the
processes share are counted in each), with the main process's own peak (VmHWM) beside it.
"""
from __future__ import annotations

import pathlib
import shutil
import subprocess
import sys
import tempfile
import threading
import time

import numpy as np
import psutil
import yaml

from benchmarks.harness import load_average

N, P, MODULE, N_EFFECTS = 200, 20_000, 50, 10
GOAL_S = 180.0


def _write_data(folder: pathlib.Path) -> pathlib.Path:
    rng = np.random.default_rng(7)
    factors = rng.standard_normal((N, P // MODULE))
    X = 6.0 + 1.2 * np.repeat(factors, MODULE, axis=1) + rng.standard_normal((N, P))
    effects = rng.choice(P, N_EFFECTS, replace=False)
    y = X[:, effects] @ rng.choice([-1.0, 1.0], N_EFFECTS) + rng.standard_normal(N)
    path = folder / "expression.csv"
    header = ",".join([f"gene_{j}" for j in range(P)] + ["outcome"])
    np.savetxt(path, np.column_stack([X, y]), delimiter=",", header=header, comments="", fmt="%.6g")
    return path


def _write_config(folder: pathlib.Path) -> pathlib.Path:
    config = {"name": "expression-full-scale", "seed": 5,
              "data": {"kind": "csv", "path": "expression.csv", "target": "outcome"},
              "losses": ["squared", "huber", "absolute"],
              "families": {"l1": {"path": {"points": 30, "smallest_share": 0.05}},
                           "l2": {"kernel": "linear", "path": {"points": 30}}},
              "selection": {"cv_folds": 5},
              "stability": {"n_resamples": 50, "losses": ["squared", "huber_delta1", "absolute"]},
              "execution": {"backend": "processes", "n_jobs": 2},
              "cache": {"enabled": False}}
    path = folder / "expression.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


def _tree_rss_mib(proc: psutil.Process) -> float:
    total = 0
    for p in [proc, *proc.children(recursive=True)]:
        try:
            total += p.memory_info().rss
        except psutil.Error:
            pass
    return total / 2**20


def bench_full_scale_expression():
    penduel = str(pathlib.Path(sys.executable).parent / "penduel")
    tmp = pathlib.Path(tempfile.mkdtemp(prefix="penduel-fullscale-"))
    try:
        _write_data(tmp)
        config = _write_config(tmp)
        start = time.perf_counter()
        proc = subprocess.Popen([penduel, "run", str(config), "--quiet"], cwd=tmp, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
        watched, peak, main_hwm = psutil.Process(proc.pid), [0.0], [0.0]

        def sample():
            while proc.poll() is None:
                try:
                    peak[0] = max(peak[0], _tree_rss_mib(watched))
                    status = pathlib.Path(f"/proc/{proc.pid}/status").read_text()
                    main_hwm[0] = max(main_hwm[0], int(status.split("VmHWM:")[1].split()[0]) / 1024)
                except (psutil.Error, OSError, IndexError):
                    pass
                time.sleep(0.2)

        sampler = threading.Thread(target=sample, daemon=True)
        sampler.start()
        out, err = proc.communicate()
        wall = time.perf_counter() - start
        sampler.join()
        if proc.returncode != 0:
            raise RuntimeError(f"penduel run failed:\n{err[-3000:]}")
        summary = [line for line in out.splitlines() if line[:1].isalpha() and "  " in line][:8]
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return [{"name": "full_scale_expression_200x20000", "ours_seconds": wall, "goal": f"< {GOAL_S:.0f} s",
             "met": wall < GOAL_S, "ours_peak_mib": peak[0], "main_process_peak_mib": main_hwm[0],
             "fits": "2 families x 3 losses x (5 folds + final + 50 resamples), 30 λ each "
                     "(ridge-type resamples at the chosen λ only)",
             "summary_table": summary, **load_average()}]
