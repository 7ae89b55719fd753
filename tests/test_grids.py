"""Grids that contain the answer: the ridge-type grid spaced in effective degrees of freedom whatever the
feature scale, widening of an end that cross-validation chose, and a choice still at an end reported as
not comparable (through the command line, on data generated here)."""
import json
import pathlib

import numpy as np
import pandas as pd
import pytest

from pipeline.kernels import gram
from pipeline.losses import get_loss
from pipeline.models.interface import widen_points
from pipeline.models.ridge.eigen import effective_df, kernel_eigen
from pipeline.models.ridge.path import l2_lambda_grid
from pipeline.models.sparse import SPARSE
from tests.conftest import penduel


def _df(K, lambdas):
    eig = kernel_eigen(K, True, on_psd_fail="ignore")
    return effective_df(eig.eigenvalues, lambdas, K.shape[0])


def test_ridge_grid_runs_from_df_one_to_rank_minus_one_whatever_the_scale():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((60, 500))                 # p ≫ n: the centred Gram has rank n − 1 = 59
    for scale in (1e-3, 1.0, 1e4):                     # a feature map's scale must not move the grid
        K = gram(scale * X)
        lambdas = l2_lambda_grid(K, 20)
        df = _df(K, lambdas)
        assert np.all(np.diff(lambdas) < 0) and np.all(np.diff(df) > 0)
        np.testing.assert_allclose([df[0], df[-1]], [1.0, 58.0], rtol=1e-6)
        # even in log(df / (rank − df)): equal steps of that logit between neighbours
        u = np.log(df / (59 - df))
        np.testing.assert_allclose(np.diff(u), np.diff(u)[0], rtol=1e-5)


def test_widening_adds_points_beyond_the_chosen_end_and_keeps_the_grid():
    rng = np.random.default_rng(1)
    K = gram(rng.standard_normal((50, 200)))
    base = l2_lambda_grid(K, 12)
    w = widen_points(12)
    wider = l2_lambda_grid(K, 12, widen=(1, 2))
    assert len(wider) == 12 + 3 * w
    np.testing.assert_allclose(wider[w:w + 12], base, rtol=1e-9)     # the first grid is kept point for point
    df = _df(K, wider)
    assert df[0] < 0.2 and df[-1] > 48.9                                 # towards 0 and towards rank 49


def test_sparse_grid_widens_only_downwards_at_its_own_ratio():
    rng = np.random.default_rng(2)
    Z, t = rng.standard_normal((40, 15)), rng.standard_normal(40)
    options = {"n_lambdas": 10, "lambda_ratio": 0.01, "alpha": 1.0}
    base = SPARSE.grid(Z, t, get_loss("squared"), options)
    wider = SPARSE.grid(Z, t, get_loss("squared"), options, widen=(3, 1))   # λ_max is a closed end
    assert len(wider) == 10 + widen_points(10)
    np.testing.assert_allclose(wider[:10], base)
    np.testing.assert_allclose(np.diff(np.log(wider)), np.log(0.01) / 9, rtol=1e-9)
    assert SPARSE.closed_ends == ("largest",)
    assert SPARSE.saturated(39, 40, 15) is True and SPARSE.saturated(5, 40, 15) is False


# ------------------------------------------------------------------ through the command line
def _poly_data(seed: int, factor_share: float, noise: float) -> pd.DataFrame:
    """150 rows of 62 inputs: a linear signal on six of them and one product; the degree-2 map makes
    62 + 1 953 = 2 015 features. factor_share > 0 correlates the inputs through three shared factors."""
    rng = np.random.default_rng(seed)
    n, p = 150, 62
    F = rng.standard_normal((n, 3))
    X = np.sqrt(factor_share) * F[:, rng.integers(0, 3, p)] + np.sqrt(1 - factor_share) * rng.standard_normal((n, p))
    y = X[:, :6].sum(1) + 0.8 * X[:, 0] * X[:, 1] + noise * rng.standard_normal(n)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(p)])
    frame["y"] = y
    return frame


def _run_poly(tmp_path: pathlib.Path, frame: pd.DataFrame) -> tuple[dict, str]:
    frame.to_csv(tmp_path / "poly.csv", index=False)
    (tmp_path / "poly.yaml").write_text(
        "name: poly\nseed: 3\ndata: {kind: csv, path: poly.csv, target: y}\n"
        "features:\n  maps: [{kind: identity}, {kind: polynomial, degree: 2}]\n"
        "losses: [squared]\nstability: {enabled: false}\ncache: {enabled: false}\n")
    code, out, err = penduel(["run", "poly.yaml"], tmp_path)
    assert code == 0, err
    report = pathlib.Path(next(line.split(" ", 1)[1] for line in out.splitlines() if line.startswith("report: ")))
    if not report.is_absolute():
        report = tmp_path / report
    payload = json.loads((report.parent / "report_data.json").read_text())
    assert payload["n_features_built"] == 2015
    return payload, report.read_text()


@pytest.mark.slow   # about 20–30 s: 2 015 features, 5-fold CV, a tracking store of its own
def test_polynomial_map_ridge_type_family_does_not_collapse(tmp_path):
    payload, html = _run_poly(tmp_path, _poly_data(2, 0.3, 1.0))
    ridge = next(f for f in payload["families"] if f["family"] == "l2")
    assert ridge["grid_end"] is None
    assert ridge["effective_df"] > 1.5 and ridge["metrics"]["r2"] > 0
    assert 0 < ridge["chosen_index"] < len(ridge["lambdas"]) - 1
    assert "not comparable" not in html.lower()


@pytest.mark.slow   # about 20 s, as above
def test_polynomial_map_choice_at_an_end_is_reported_as_not_comparable(tmp_path):
    """Independent inputs: the ~2 000 columns are nearly all products that carry no signal, and the ridge
    penalty shrinks the six signal columns with them. Its CV curve is flat from df 2 down to the intercept
    (this is the curve, not the grid: widened twice to df ≈ 0.003 it still falls towards the intercept).
    The report must say so and declare no winner."""
    payload, html = _run_poly(tmp_path, _poly_data(3, 0.0, 0.5))
    ridge = next(f for f in payload["families"] if f["family"] == "l2")
    assert ridge["grid_end"] == "largest" and ridge["grid_widened"] == [2, 0]
    assert ridge["chosen_index"] == 0 and ridge["path_df"][0] < 0.01
    verdict = payload["verdicts"][0]["sentence"]
    assert verdict.startswith("Not comparable at this setting") and "better than" not in verdict
    assert any("not comparable at this setting" in n for n in payload["notes"])
    assert "Not comparable at this setting" in html
