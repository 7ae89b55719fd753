"""Same config and seed give bit-identical numbers across reruns and execution backends."""
from __future__ import annotations

import numpy as np
import pytest

from pipeline.config import load_config
from pipeline.runner import run_experiment

from .conftest import CONFIGS


def result_numbers(result) -> dict[str, bytes]:
    """Every number a run reports (not timings), as raw bytes so equality is bit for bit."""
    out = {"test_rows": result.test_rows.tobytes()}
    for r in result.results:
        key = f"{r.loss_label}/{r.family}"
        arrays = {"lambdas": r.lambdas, "cv_errors": r.cv_errors, "test_pred": r.test_pred,
                  "lambda_chosen": np.float64(r.lambda_chosen), "intercept": np.float64(r.intercept),
                  "effective_df": np.float64(r.effective_df),
                  "path_eval_pred": r.path.eval_pred, "path_df": r.path.effective_df}
        if r.coefficients is not None:
            arrays["coefficients"] = r.coefficients
        arrays.update({f"metric.{k}": np.float64(v) for k, v in r.metrics.items()})
        arrays.update({f"interval.{k}": np.asarray(v, float) for k, v in r.intervals.items()})
        for name, a in arrays.items():
            out[f"{key}/{name}"] = np.ascontiguousarray(a).tobytes()
    return out


def differing(a: dict, b: dict) -> list[str]:
    return sorted(k for k in a.keys() | b.keys() if a.get(k) != b.get(k))


def spec_with(path, tmp_path, **sections):
    spec, base = load_config(path)
    update = {"cache": spec.cache.model_copy(update={"enabled": False, "directory": str(tmp_path / "cache")})}
    for name, values in sections.items():
        update[name] = getattr(spec, name).model_copy(update=values)
    return spec.model_copy(update=update), base


@pytest.fixture(scope="module")
def tiny_reference(tmp_path_factory):
    """One uncached run of tiny.yaml, the reference of both tests below."""
    spec, base = spec_with(CONFIGS / "tiny.yaml", tmp_path_factory.mktemp("determinism"))
    return spec, base, result_numbers(run_experiment(spec, base, progress=False))


def test_rerun_gives_identical_numbers(tiny_reference):
    spec, base, first = tiny_reference
    second = result_numbers(run_experiment(spec, base, progress=False))
    assert len(first) > 20
    assert differing(first, second) == []


def test_a_different_seed_changes_the_numbers(tiny_reference):
    # Guards the comparison itself: it must be able to see a difference.
    spec, base, first = tiny_reference
    other = result_numbers(run_experiment(spec.model_copy(update={"seed": spec.seed + 1}), base, progress=False))
    assert len(differing(first, other)) > 10


@pytest.mark.slow
@pytest.mark.parametrize("config", ["tiny.yaml", "tiny-classification.yaml"])
def test_backends_give_identical_numbers(tmp_path, config):
    numbers = {}
    for backend in ("local", "processes", "dask"):
        spec, base = spec_with(CONFIGS / config, tmp_path, execution={"backend": backend, "n_jobs": 2})
        numbers[backend] = result_numbers(run_experiment(spec, base, progress=False))
    assert differing(numbers["local"], numbers["processes"]) == []
    assert differing(numbers["local"], numbers["dask"]) == []
