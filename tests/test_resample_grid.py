"""Resample fits of the ridge-type family are fitted at its chosen λ only (the stability stage reads them
there): a fit at one λ must be the path fit at that λ, to solver tolerance, and the stored stability numbers
must be those of the whole-path resample fits."""
from __future__ import annotations

import re

import numpy as np
import pytest
import yaml

from pipeline.losses import get_loss
from pipeline.models.ridge.family import RIDGE
from pipeline.stability import resample_grid, stage
from tests.conftest import CONFIGS, penduel, scratch_dir, stored_payload

LOSSES = ("squared", "huber", "absolute")


def _problem(n=40, p=60, seed=0):
    rng = np.random.default_rng(seed)
    Z = rng.standard_normal((n, p))
    t = Z[:, :3] @ np.array([1.0, -1.0, 0.5]) + 0.5 * rng.standard_normal(n)
    return Z, (t - t.mean()) / t.std()


@pytest.mark.parametrize("low_rank", [False, True], ids=["exact", "nystrom"])
@pytest.mark.parametrize("loss_name", LOSSES)
def test_ridge_fit_at_one_lambda_is_the_path_fit_there(loss_name, low_rank):
    Z, t = _problem()
    loss = get_loss(loss_name)
    options = {"kernel": "linear", "kernel_params": (), "n_lambdas": 8, "landmark_seed": 3,
               "low_rank": low_rank, "n_landmarks": 25, "gap_rows": 30, "max_exact_rows": 20}
    grid = RIDGE.grid(Z, t, loss, options)
    path = RIDGE.fit_path(Z, t, loss, grid, options)
    assert np.all(path.converged)
    for i in (0, 3, len(grid) - 1):
        lambdas, at = resample_grid("l2", grid, i)
        assert lambdas.tolist() == [grid[i]] and at == 0
        one = RIDGE.fit_path(Z, t, loss, lambdas, options)
        scale = np.abs(path.coef[i]).max()
        # Newton (tolerance 1e-12 on the decrement) warm-started along the path against a cold start;
        # CLARABEL at gap tolerance 1e-11 for the absolute loss; the closed form for the squared loss
        np.testing.assert_allclose(one.coef[0], path.coef[i], rtol=0, atol=1e-6 * scale)
        np.testing.assert_allclose(one.intercept[0], path.intercept[i], rtol=0, atol=1e-6)
        np.testing.assert_allclose(RIDGE.predict(one, Z[:5])[0], RIDGE.predict(path, Z[:5])[i], rtol=0, atol=1e-6)
        np.testing.assert_allclose(one.effective_df[0], path.effective_df[i], rtol=1e-6, atol=1e-6)


def test_only_the_family_read_along_the_path_keeps_its_whole_grid():
    grid = np.array([4.0, 2.0, 1.0, 0.5])
    assert stage.READ_ALONG_PATH == {"l1"}
    lambdas, at = resample_grid("l1", grid, 2)
    assert lambdas.tolist() == grid.tolist() and at == 2
    lambdas, at = resample_grid("l2", grid, 2)
    assert lambdas.tolist() == [1.0] and at == 0


def _stored_stability(name: str, config: dict) -> tuple[dict, str]:
    from mlflow.tracking import MlflowClient

    cwd = scratch_dir(f"penduel-resample-grid-{name}-")
    (cwd / "run.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "run.yaml", "--quiet"], cwd)
    assert code == 0, err
    run_id = re.search(r"run id: ([0-9a-f]{32})", out).group(1)
    client = MlflowClient(tracking_uri=f"sqlite:///{cwd / 'mlflow.db'}")
    return stored_payload(client, run_id, cwd)["stability"], out


def _close(a, b, path=""):
    """Equal structure; numbers equal to 1e-9 relative (the ridge fits differ at solver tolerance only)."""
    if isinstance(a, dict):
        assert a.keys() == b.keys(), path
        for k in a:
            _close(a[k], b[k], f"{path}/{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, f"{path}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert a == pytest.approx(b, rel=1e-9, abs=1e-12, nan_ok=True), path
    else:
        assert a == b, path


@pytest.mark.slow
def test_stored_stability_is_that_of_whole_path_resample_fits(monkeypatch):
    """`penduel run` with three losses resampled: the stored stability summaries (selection frequencies,
    top-k stability, sign agreement, prediction instability, stability paths) are those of the plan that
    fitted every family's resamples along the whole λ grid."""
    config = yaml.safe_load((CONFIGS / "tiny.yaml").read_text())
    config.update(losses=["squared", "huber", "absolute"],
                  stability={"n_resamples": 4, "losses": ["squared", "huber_delta1", "absolute"]},
                  cache={"enabled": False})
    now, out = _stored_stability("now", config)
    monkeypatch.setattr(stage, "READ_ALONG_PATH", frozenset({"l1", "l2"}))   # the former plan
    before, _ = _stored_stability("before", config)
    assert set(now) == {"squared", "huber_delta1", "absolute"}
    for label in now:
        assert now[label]["families"]["l2"]["applicable"], label
        _close(now[label], before[label], label)
