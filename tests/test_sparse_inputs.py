"""Sparse inputs: a scipy.sparse.save_npz matrix with its names and target, and a mostly-zero CSV, are kept
sparse through the row selection, the features, both families and the memory estimate; the same data given
dense and sparse gives the same paths."""
from __future__ import annotations

import json
import os
import pathlib
import subprocess
import sys

import numpy as np
import pytest
import scipy.sparse as sp
import yaml

from pipeline.config import ExperimentSpec
from pipeline.data.sparse_files import SPARSE_ZERO_SHARE
from pipeline.fitting import FitTask, Shared, run_fit
from pipeline.models.families import FAMILIES
from pipeline.preflight import feature_mib

from .conftest import penduel

SMALL = {"stability": {"enabled": False}, "selection": {"cv_folds": 3},
         "families": {"l1": {"path": {"points": 4}}, "l2": {"kernel": "linear", "path": {"points": 4}}}}


def sparse_problem(n=60, p=40, density=0.25, seed=0, classes=False):
    """A sparse design whose columns are distinct (continuous stored values), with a linear signal."""
    rng = np.random.default_rng(seed)
    X = sp.random(n, p, density=density, format="csc", random_state=seed,
                  data_rvs=lambda m: rng.uniform(0.5, 3.0, m))
    w = np.zeros(p)
    w[:4] = [1.5, -2.0, 1.0, 0.8]
    f = X @ w
    y = np.where(f + 0.3 * rng.standard_normal(n) > np.median(f), 1.0, -1.0) if classes else \
        f + 0.3 * rng.standard_normal(n)
    return X, y


def write_npz(folder: pathlib.Path, X, y, names=None) -> None:
    sp.save_npz(folder / "counts.npz", X)
    names = names if names is not None else [f"gene{j}" for j in range(X.shape[1])]
    (folder / "names.txt").write_text("\n".join(names) + "\n")
    (folder / "target.txt").write_text("\n".join(repr(float(v)) for v in y) + "\n")


# ------------------------------------------------------------------ same data, dense and sparse
@pytest.mark.parametrize("family,loss,task", [("l1", "squared", "regression"), ("l1", "absolute", "regression"),
                                              ("l1", "logistic", "classification"),
                                              ("l2", "squared", "regression"), ("l2", "logistic", "classification")])
def test_sparse_and_dense_inputs_give_the_same_path(family, loss, task):
    """The sparse matrix is scaled without centring; the intercept is fitted explicitly, so on the original
    scale the coefficients, intercepts, predictions and certificates are those of the dense fit."""
    X, y = sparse_problem(classes=task == "classification")
    spec = ExperimentSpec.model_validate({"name": "eq", "data": {"kind": "bundled", "name": "diabetes"},
                                          "losses": [loss], "families": SMALL["families"]})
    options = {f.key: f.for_training_rows(f.options(getattr(spec.families, f.key)), 45) for f in FAMILIES}
    rows = np.random.default_rng(3).permutation(X.shape[0])
    train, held = np.sort(rows[:45]), np.sort(rows[45:])
    lambdas = {"l1": np.geomspace(0.3, 0.01, 6), "l2": np.geomspace(1.0, 1e-3, 6)}[family]
    task_ = FitTask("final", family, loss, (), loss, train, held, lambdas)
    outcomes = []
    for matrix in (X, X.toarray()):
        shared = Shared(X=matrix, y=y, task=task, feature_maps=spec.features.maps, feature_seed=0,
                        input_names=tuple(f"x{j}" for j in range(X.shape[1])), family_options=options)
        outcomes.append(run_fit(task_, shared))
    sparse_fit, dense_fit = outcomes
    scale = np.abs(dense_fit.coef).max()
    np.testing.assert_allclose(sparse_fit.coef, dense_fit.coef, rtol=0, atol=1e-7 * scale)
    np.testing.assert_allclose(sparse_fit.intercept, dense_fit.intercept, rtol=0, atol=1e-7 * max(1.0, scale))
    np.testing.assert_allclose(sparse_fit.eval_pred, dense_fit.eval_pred, rtol=0, atol=1e-6)
    assert scale > 0.1                                  # the path is not all zeros
    if dense_fit.certificate is not None:
        assert sparse_fit.converged.all() and dense_fit.converged.all()
        np.testing.assert_allclose(sparse_fit.certificate, dense_fit.certificate, rtol=0, atol=1e-9)
        np.testing.assert_array_equal(sparse_fit.n_nonzero, dense_fit.n_nonzero)


def test_memory_estimate_counts_stored_entries():
    """200 × 200 000 at 0.5 % nonzero: the dense count is n·p·8 per copy; the sparse one its stored entries."""
    X = sp.random(200, 200_000, density=0.005, format="csc", random_state=0)
    stored = (X.data.nbytes + X.indices.nbytes + X.indptr.nbytes) / 2**20
    assert feature_mib(X, 200, 200_000) == pytest.approx(3 * stored)
    assert feature_mib(np.zeros((1, 1)), 200, 200_000) == pytest.approx(3 * 200 * 200_000 * 8 / 2**20)
    assert 3 * stored < 20 < 3 * 200 * 200_000 * 8 / 2**20


# ------------------------------------------------------------------ through the command line
@pytest.fixture(scope="module")
def npz_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("npz")
    X, y = sparse_problem(n=80, p=3000, density=0.02, seed=1)
    X = sp.hstack([sparse_problem(n=80, p=4, density=0.6, seed=2)[0], X[:, 4:]], format="csc")
    y = X[:, :4] @ np.array([1.5, -2.0, 1.0, 0.8]) + 0.2 * np.random.default_rng(5).standard_normal(80)
    write_npz(folder, X, y)
    config = {"name": "npz_run", "data": {"kind": "npz", "path": "counts.npz", "feature_names": "names.txt",
                                          "target_file": "target.txt"},
              "losses": ["squared"], "features": {"memory_budget_mib": 16},
              **dict(SMALL, families={"l1": {"path": {"points": 6, "smallest_share": 0.1}},
                                      "l2": {"kernel": "linear", "path": {"points": 6}}})}
    (folder / "exp.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "exp.yaml"], folder)
    return folder, code, out, err


def test_npz_input_runs_sparse_through_penduel_run(npz_run):
    folder, code, out, err = npz_run
    assert code == 0, err
    text = out + err
    assert "read as a sparse matrix of 80 rows × 3000 columns" in text and "kept sparse" in text
    assert "densified" not in text
    table = [line for line in out.splitlines() if line.startswith("squared")]
    assert len(table) == 2
    report = pathlib.Path(next(line.split(": ", 1)[1] for line in out.splitlines() if line.startswith("report:")))
    html = report.read_text(encoding="utf-8")
    assert "gene0" in html and "gene1" in html    # the strong columns are named in the report


def test_validate_counts_a_sparse_matrix_by_its_stored_entries(tmp_path):
    """100 × 60 000 at 0.5 % (about 19 000 columns not constant): counted dense, the training rows' features
    would need 3 · 75 · 19 000 · 8 B ≈ 33 MiB against a 16 MiB budget; counted by stored entries, far below."""
    X = sp.random(100, 60_000, density=0.005, format="csc", random_state=0, data_rvs=lambda m: np.ones(m))
    X = sp.hstack([sparse_problem(n=100, p=4, density=0.5)[0], X], format="csc")
    write_npz(tmp_path, X, np.random.default_rng(0).standard_normal(100))
    config = {"name": "budget", "data": {"kind": "npz", "path": "counts.npz", "feature_names": "names.txt",
                                         "target_file": "target.txt"}, "losses": ["squared"],
              "features": {"memory_budget_mib": 16}, **SMALL}
    (tmp_path / "exp.yaml").write_text(yaml.safe_dump(config))
    done = penduel(["validate", "exp.yaml"], tmp_path)
    assert done[0] == 0, done[2]
    config["families"] = {"l2": {"kernel": "rbf"}}
    (tmp_path / "exp.yaml").write_text(yaml.safe_dump(config))
    code, _, err = penduel(["validate", "exp.yaml"], tmp_path)
    err = " ".join(err.split())
    assert code == 2 and "families.l2 (the rbf kernel reads dense rows" in err and "memory_budget_mib = 16" in err


def test_mostly_zero_csv_is_kept_sparse_through_penduel_run(tmp_path):
    rng = np.random.default_rng(4)
    n, p = 60, 50
    X = np.where(rng.random((n, p)) < 0.05, rng.uniform(1, 3, (n, p)), 0.0)
    X[:, :2] = np.where(rng.random((n, 2)) < 0.5, rng.uniform(1, 3, (n, 2)), 0.0)
    y = 2 * X[:, 0] - X[:, 1] + 0.2 * rng.standard_normal(n)
    header = ",".join([f"c{j}" for j in range(p)] + ["y"])
    rows = "\n".join(",".join(f"{v:g}" for v in row) for row in np.column_stack([X, y]))
    (tmp_path / "data.csv").write_text(header + "\n" + rows + "\n")
    assert 1 - np.count_nonzero(X) / X.size >= SPARSE_ZERO_SHARE
    config = {"name": "zeros", "data": {"kind": "csv", "path": "data.csv", "target": "y"},
              "losses": ["squared"], **SMALL}
    (tmp_path / "exp.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "exp.yaml"], tmp_path)
    assert code == 0, err
    assert "the table is kept as a sparse matrix from here on" in out + err


# ------------------------------------------------------------------ 200 × 200 000 in a fresh process
PROBE = """
import json, pathlib, sys, time
start = time.perf_counter()
from pipeline.cli import main
code = main(sys.argv[1:])
hwm = next(int(line.split()[1]) for line in pathlib.Path("/proc/self/status").read_text().splitlines()
           if line.startswith("VmHWM:"))
print(json.dumps({"code": code, "peak_mib": hwm / 1024, "seconds": time.perf_counter() - start}), file=sys.stderr)
"""


def _fresh_run(folder: pathlib.Path, n: int, p: int) -> dict:
    """`penduel run` on an n × p matrix at about 0.5 % nonzero (5 informative columns at 30 %), in a new
    interpreter that reports its own peak resident memory (VmHWM, as benchmarks/harness.own_peak_mib)."""
    rng = np.random.default_rng(0)
    signal = sp.random(n, 5, density=0.3, format="csc", random_state=2, data_rvs=lambda m: rng.poisson(4, m) + 1.0)
    noise = sp.random(n, p - 5, density=0.005, format="csc", random_state=1,
                      data_rvs=lambda m: rng.poisson(2, m) + 1.0)
    X = sp.hstack([signal, noise], format="csc")
    y = signal @ np.array([3.0, -2.5, 2.0, 2.2, -1.8]) + rng.standard_normal(n)
    write_npz(folder, X, y)
    config = {"name": "wide", "data": {"kind": "npz", "path": "counts.npz", "feature_names": "names.txt",
                                       "target_file": "target.txt"}, "losses": ["squared"],
              "features": {"memory_budget_mib": 256}, "stability": {"enabled": False},
              "selection": {"cv_folds": 3, "rule": "one_standard_error"},
              "families": {"l1": {"path": {"points": 8, "smallest_share": 0.2}},
                           "l2": {"kernel": "linear", "path": {"points": 8}}}}
    (folder / "exp.yaml").write_text(yaml.safe_dump(config))
    done = subprocess.run([sys.executable, "-c", PROBE, "run", "exp.yaml", "--quiet", "--tracking-uri",
                           f"sqlite:///{folder / 'mlflow.db'}"], cwd=folder, capture_output=True, text=True,
                          timeout=3600, env=dict(os.environ, PYTHONWARNINGS="ignore"))
    lines = [line for line in done.stderr.splitlines() if line.startswith('{"code"')]   # other lines may follow
    assert lines, done.stderr[-3000:]
    found = json.loads(lines[-1])
    assert found["code"] == 0, done.stderr[-3000:]
    return {**found, "stdout": done.stdout}


@pytest.mark.slow
def test_200_by_200000_sparse_matrix_runs_below_its_dense_size(tmp_path):
    """Both families (sparse: squared loss; ridge: linear kernel) on 200 × 200 000 at 0.5 % nonzero. The
    peak of the run minus the peak of the same run on 200 × 2 000 (imports, store, report) must stay below
    the dense matrix (305 MiB): one densified copy of X already takes that much, and a dense run holds several."""
    dense_mib = 200 * 200_000 * 8 / 2**20
    (tmp_path / "small").mkdir()
    (tmp_path / "wide").mkdir()
    small = _fresh_run(tmp_path / "small", 200, 2_000)
    wide = _fresh_run(tmp_path / "wide", 200, 200_000)
    print(f"peak {wide['peak_mib']:.0f} MiB (200 × 2 000: {small['peak_mib']:.0f} MiB), "
          f"wall {wide['seconds']:.1f} s")
    assert "kept sparse" in wide["stdout"] and "densified" not in wide["stdout"]
    assert wide["peak_mib"] - small["peak_mib"] < dense_mib
