"""Row weights: a fit with integer weights is the unweighted fit on the rows repeated by those integers.

The reference for every check here is the definition of the weighted objective,
(1/Σw) Σ wᵢ lossᵢ + λ·penalty, which for integer weights is the plain objective on the repeated rows;
the unweighted fits are themselves checked against outside references elsewhere (test_l1_reference.py,
test_l2_losses.py, test_gcv_reference.py).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.config.sections import L1Spec, L2Spec
from pipeline.losses import get_loss, loss_names
from pipeline.losses_weighted import WeightedLoss, class_balance, weighted
from pipeline.models.ridge import RIDGE
from pipeline.models.sparse import SPARSE, SOLVER_TABLE

N, P = 26, 6


def _problem(task: str, seed: int = 3):
    rng = np.random.default_rng(seed)
    Z = rng.standard_normal((N, P))
    Z_new = rng.standard_normal((9, P))
    f = Z[:, 0] - 0.8 * Z[:, 1] + 0.5 * Z[:, 2]
    if task == "regression":
        t = f + 0.5 * rng.standard_t(3, N)
        t = (t - t.mean()) / t.std()
    else:
        t = np.where(f + 0.7 * rng.standard_normal(N) > 0, 1.0, -1.0)
    w = rng.integers(1, 4, N)
    return Z, t, w, Z_new


def _repeat(Z, t, w):
    idx = np.repeat(np.arange(len(t)), w)
    return Z[idx], t[idx]


LOSSES = [(name, get_loss(name).task) for name in loss_names()]


def _sparse_options(solver: str) -> dict:
    # the cvxpy back-ends (interior point) reach about 1e-7 on these problems, weighted or not
    tol = 1e-7 if solver == "cvxpy" else 1e-8
    return {**SPARSE.options(L1Spec(solver=solver)), "tol": tol, "n_lambdas": 8, "lambda_ratio": 0.05}


def _routes(loss) -> list[str]:
    """Every solver the table can pick for this loss (pure L1), and the automatic choice (active set first)."""
    return ["auto"] + [row.name for row in SOLVER_TABLE if row.accepts(loss, 1.0)]


def _close(a, b, scale=1.0, tol=1e-6):
    np.testing.assert_allclose(a, b, rtol=0, atol=tol * max(1.0, scale))


@pytest.mark.parametrize("name,task", LOSSES)
def test_sparse_integer_weights_equal_repeated_rows_on_every_route(name, task):
    Z, t, w, Z_new = _problem(task)
    Zr, tr = _repeat(Z, t, w)
    loss = get_loss(name)
    for solver in _routes(loss):
        options = _sparse_options(solver)
        grid_w = SPARSE.grid(Z, t, weighted(loss, w), options)
        grid_r = SPARSE.grid(Zr, tr, loss, options)
        np.testing.assert_allclose(grid_w, grid_r, rtol=1e-10, err_msg=f"{name} grid")
        fw = SPARSE.fit_path(Z, t, weighted(loss, w), grid_r, options)
        fr = SPARSE.fit_path(Zr, tr, loss, grid_r, options)
        # the weighted fit is certified (its own duality gap); the repeated-rows fit is the reference
        assert fw.converged.all(), (name, solver, fw.status, fw.certificate)
        assert fw.certificate_kind == "duality_gap" and np.all(fw.certificate <= options["tol"]), (name, solver)
        scale = float(np.abs(fr.coef).max())
        _close(fw.coef, fr.coef, scale, tol=1e-5)
        _close(fw.intercept, fr.intercept, scale, tol=1e-5)
        _close(SPARSE.predict(fw, Z_new), SPARSE.predict(fr, Z_new), scale, tol=1e-5)
        # exact zeros agree away from ties
        assert np.array_equal(fw.coef != 0, fr.coef != 0), (name, solver)


def test_sparse_elastic_net_weighted_squared_and_logistic():
    """Elastic net (l1_share 0.5) on the Gram (OSQP) and cvxpy routes, and its weighted df."""
    for name, task in (("squared", "regression"), ("logistic", "classification")):
        Z, t, w, Z_new = _problem(task, seed=5)
        Zr, tr = _repeat(Z, t, w)
        loss = get_loss(name)
        for solver in ["auto"] + [row.name for row in SOLVER_TABLE if row.accepts(loss, 0.5)]:
            options = {**_sparse_options(solver), "alpha": 0.5}
            grid = SPARSE.grid(Zr, tr, loss, options)
            np.testing.assert_allclose(SPARSE.grid(Z, t, weighted(loss, w), options), grid, rtol=1e-10)
            fw = SPARSE.fit_path(Z, t, weighted(loss, w), grid, options)
            fr = SPARSE.fit_path(Zr, tr, loss, grid, options)
            assert fw.converged.all() and np.all(fw.certificate <= options["tol"])
            _close(fw.coef, fr.coef, float(np.abs(fr.coef).max()), tol=1e-5)
            _close(fw.effective_df, fr.effective_df, tol=1e-6)


def test_cold_split_lp_weighted_equals_repeated_rows():
    """The one-shot split LP (restricted.solve_piecewise_lp), beside the warm one the path uses."""
    from pipeline.models.sparse import restricted as rs

    for name in ("quantile", "absolute", "hinge"):
        loss = get_loss(name)
        Z, t, w, _ = _problem(loss.task, seed=6)
        Zr, tr = _repeat(Z, t, w)
        a = rs.solve_piecewise_lp(Z, t, 0.02, weighted(loss, w))
        b = rs.solve_piecewise_lp(Zr, tr, 0.02, loss)
        assert a.status == b.status == "optimal"
        _close(a.coef, b.coef, tol=1e-8)
        _close(a.intercept, b.intercept, tol=1e-8)


def test_selection_only_fits_are_certified_with_weights():
    """Stability resamples: the KKT certificate of the weighted problem, same support as the full fit."""
    for name in ("squared", "logistic", "hinge"):
        loss = get_loss(name)
        Z, t, w, _ = _problem(loss.task, seed=9)
        options = _sparse_options("auto")
        grid = SPARSE.grid(Z, t, weighted(loss, w), options)
        full = SPARSE.fit_path(Z, t, weighted(loss, w), grid, options)
        sel = SPARSE.fit_path(Z, t, weighted(loss, w), grid, {**options, "selection_only": True})
        assert sel.certificate_kind == "kkt_violation" and np.all(sel.certificate <= options["tol"]), name
        assert np.array_equal(np.sign(sel.coef), np.sign(full.coef)), name


def _ridge_options(kernel="linear", **extra) -> dict:
    return {**RIDGE.options(L2Spec(kernel=kernel, **extra)), "n_lambdas": 8}


@pytest.mark.parametrize("name,task", LOSSES)
def test_ridge_integer_weights_equal_repeated_rows(name, task):
    Z, t, w, Z_new = _problem(task)
    Zr, tr = _repeat(Z, t, w)
    loss = get_loss(name)
    options = _ridge_options()
    grid_w = RIDGE.grid(Z, t, weighted(loss, w), options)
    grid_r = RIDGE.grid(Zr, tr, loss, options)
    np.testing.assert_allclose(grid_w, grid_r, rtol=1e-7, err_msg="λ grid")
    fw = RIDGE.fit_path(Z, t, weighted(loss, w), grid_r, options)
    fr = RIDGE.fit_path(Zr, tr, loss, grid_r, options)
    assert fw.converged.all() and fr.converged.all(), (fw.status, fr.status)
    scale = float(np.abs(fr.coef).max())
    tol = 1e-7 if loss.smooth else 2e-5     # non-smooth losses: interior-point (CLARABEL) accuracy
    _close(fw.coef, fr.coef, scale, tol)
    _close(fw.intercept, fr.intercept, scale, tol)
    _close(RIDGE.predict(fw, Z_new), RIDGE.predict(fr, Z_new), scale, tol)
    if loss.smooth:
        _close(fw.effective_df, fr.effective_df, tol=1e-6)


def test_ridge_rbf_kernel_weighted_squared_closed_form():
    """A kernel with no weight per feature (rbf, fixed bandwidth): decision values and grid agree."""
    Z, t, w, Z_new = _problem("regression", seed=8)
    Zr, tr = _repeat(Z, t, w)
    loss = get_loss("squared")
    options = _ridge_options("rbf", bandwidth=2.0)
    grid = RIDGE.grid(Zr, tr, loss, options)
    np.testing.assert_allclose(RIDGE.grid(Z, t, weighted(loss, w), options), grid, rtol=1e-7)
    fw = RIDGE.fit_path(Z, t, weighted(loss, w), grid, options)
    fr = RIDGE.fit_path(Zr, tr, loss, grid, options)
    _close(RIDGE.predict(fw, Z_new), RIDGE.predict(fr, Z_new), tol=1e-7)
    _close(fw.effective_df, fr.effective_df, tol=1e-7)


def test_weighted_leave_one_out_equals_refits_without_each_row():
    """The weighted closed form's LOO error: Σ wᵢ (yᵢ − f₋ᵢ(xᵢ))² / Σw, f₋ᵢ refitted without row i at the same
    absolute penalty (Σw·λ/2 · penalty, so λ₋ᵢ = λ Σw / (Σw − wᵢ)); brute force as the reference."""
    Z, t, _, _ = _problem("regression", seed=4)
    w = np.random.default_rng(0).uniform(0.3, 3.0, N)
    loss, options = get_loss("squared"), _ridge_options()
    grid = RIDGE.grid(Z, t, weighted(loss, w), options)
    fit = RIDGE.fit_path(Z, t, weighted(loss, w), grid, options)
    total, brute = w.sum(), np.zeros(len(grid))
    for i in range(N):
        keep = np.arange(N) != i
        refit = RIDGE.fit_path(Z[keep], t[keep], weighted(loss, w[keep]), grid * total / (total - w[i]), options)
        brute += w[i] * (t[i] - RIDGE.predict(refit, Z[i:i + 1])[:, 0]) ** 2
    np.testing.assert_allclose(fit.loo_error, brute / total, rtol=1e-9)
    assert np.all(np.isfinite(fit.gcv)) and np.all(fit.converged)


def test_weighted_loss_pieces_scale_by_the_row_factors():
    rng = np.random.default_rng(0)
    y, f = rng.standard_normal(7), rng.standard_normal(7)
    w = rng.uniform(0.2, 3.0, 7)
    c = w * 7 / w.sum()
    for name in ("squared", "huber", "quantile"):
        base = get_loss(name)
        lw = WeightedLoss(base=base, weights=w)
        np.testing.assert_allclose(lw.value(y, f), c * base.value(y, f))
        np.testing.assert_allclose(lw.derivative(y, f), c * base.derivative(y, f))
        lo, hi = base.dual_bounds(y)
        wlo, whi = lw.dual_bounds(y)
        np.testing.assert_allclose(wlo, c * lo)
        np.testing.assert_allclose(whi, c * hi)
        # Fenchel–Young at the derivative: (c·l)(f) + (c·l)*(u) = u·f with u the derivative (smooth losses)
        if base.smooth:
            u = lw.derivative(y, f)
            np.testing.assert_allclose(lw.value(y, f) + lw.conjugate(y, u), u * f, atol=1e-12)
    with pytest.raises(ValueError):
        WeightedLoss(base=get_loss("squared"), weights=np.array([1.0, 0.0]))


def test_class_weight_balanced_equals_explicit_weights():
    Z, t, _, Z_new = _problem("classification", seed=11)
    t[:7] = 1.0     # unbalanced classes
    n_pos, n_neg = int((t > 0).sum()), int((t < 0).sum())
    explicit = np.where(t > 0, N / (2 * n_pos), N / (2 * n_neg))
    np.testing.assert_allclose(class_balance(t), explicit)
    # with row weights: the classes' total weights take the place of the counts
    w = np.arange(1.0, N + 1)
    W_pos, W_neg = w[t > 0].sum(), w[t < 0].sum()
    np.testing.assert_allclose(class_balance(t, w), w * np.where(t > 0, w.sum() / (2 * W_pos), w.sum() / (2 * W_neg)))
    from pipeline.fitting import Shared, training_weights
    from pipeline.config import IdentityMap
    shared = Shared(X=Z, y=t, task="classification", feature_maps=(IdentityMap(kind="identity"),), feature_seed=0,
                    input_names=tuple(f"x{j}" for j in range(P)),
                    family_options={"l1": {"class_weight": "balanced"}, "l2": {"class_weight": "none"}})
    rows = np.arange(3, N)
    sub = t[rows]
    np.testing.assert_allclose(training_weights(shared, "l1", rows),
                               np.where(sub > 0, len(rows) / (2 * (sub > 0).sum()), len(rows) / (2 * (sub < 0).sum())))
    assert training_weights(shared, "l2", rows) is None
    loss = get_loss("logistic")
    options = _sparse_options("auto")
    grid = SPARSE.grid(Z, t, weighted(loss, explicit), options)
    a = SPARSE.fit_path(Z, t, weighted(loss, class_balance(t)), grid, options)
    b = SPARSE.fit_path(Z, t, weighted(loss, explicit), grid, options)
    np.testing.assert_allclose(a.coef, b.coef, atol=1e-12)


@settings(max_examples=12, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(scale=st.floats(1e-3, 1e3), name=st.sampled_from(["squared", "huber", "logistic", "hinge", "quantile"]),
       seed=st.integers(0, 50))
def test_scaling_every_weight_changes_nothing(scale, name, seed):
    loss = get_loss(name)
    Z, t, _, Z_new = _problem(loss.task, seed)
    w = np.random.default_rng(seed).uniform(0.3, 3.0, N)
    for family, options in ((SPARSE, _sparse_options("auto")), (RIDGE, _ridge_options())):
        grid = family.grid(Z, t, weighted(loss, w), options)
        np.testing.assert_allclose(family.grid(Z, t, weighted(loss, w * scale), options), grid, rtol=1e-8)
        a = family.fit_path(Z, t, weighted(loss, w), grid, options)
        b = family.fit_path(Z, t, weighted(loss, w * scale), grid, options)
        s = float(np.abs(a.coef).max())
        _close(family.predict(a, Z_new), family.predict(b, Z_new), s, tol=1e-5)


# ------------------------------------------------------------------ weighted held-out metrics
def _metric_inputs(task, seed=0, n=40):
    rng = np.random.default_rng(seed)
    if task == "regression":
        y = rng.standard_normal(n)
        return y, y + 0.7 * rng.standard_normal(n)
    y = np.where(rng.random(n) < 0.4, 1.0, -1.0)
    return y, y * 0.8 + rng.standard_normal(n)


def test_weighted_metrics_match_scikit_learn_sample_weight():
    """Reference: scikit-learn's metric functions with `sample_weight` (sklearn.metrics, 1.x)."""
    from scipy.special import expit
    from sklearn import metrics as skm

    from pipeline.evaluate.metrics import METRICS
    from pipeline.evaluate.weighted import weighted_metric

    lab = lambda f: np.where(f > 0, 1.0, -1.0)  # noqa: E731
    reference = {
        "mse": lambda y, f, w: skm.mean_squared_error(y, f, sample_weight=w),
        "rmse": lambda y, f, w: skm.root_mean_squared_error(y, f, sample_weight=w),
        "mae": lambda y, f, w: skm.mean_absolute_error(y, f, sample_weight=w),
        "pinball": lambda y, f, w: skm.mean_pinball_loss(y, f, alpha=0.5, sample_weight=w),
        "r2": lambda y, f, w: skm.r2_score(y, f, sample_weight=w),
        "accuracy": lambda y, f, w: skm.accuracy_score(y, lab(f), sample_weight=w),
        "misclassification": lambda y, f, w: 1 - skm.accuracy_score(y, lab(f), sample_weight=w),
        "balanced_accuracy": lambda y, f, w: skm.balanced_accuracy_score(y, lab(f), sample_weight=w),
        "roc_auc": lambda y, f, w: skm.roc_auc_score(y, f, sample_weight=w),
        "log_loss": lambda y, f, w: skm.log_loss(y, expit(f), sample_weight=w, labels=[-1, 1]),
        "brier": lambda y, f, w: skm.brier_score_loss(y, expit(f), sample_weight=w, pos_label=1),
    }
    rng = np.random.default_rng(4)
    for name, m in METRICS.items():
        y, f = _metric_inputs(m.task)
        w = rng.uniform(0.2, 4.0, y.size)
        ours = weighted_metric(m, w)(y, f)
        if name in reference:
            assert ours == pytest.approx(reference[name](y, f, w), rel=1e-10), name
        # integer weights: the plain metric on the rows repeated (every metric, Huber included)
        k = rng.integers(1, 4, y.size)
        idx = np.repeat(np.arange(y.size), k)
        assert weighted_metric(m, k)(y, f) == pytest.approx(m(y[idx], f[idx]), rel=1e-10), name


def test_weighted_bootstrap_interval_uses_the_weights():
    """The resampled weighted metric is the metric with weights w times the resample's row counts."""
    from sklearn import metrics as skm

    from pipeline.evaluate.metrics import METRICS
    from pipeline.evaluate.weighted import weighted_metric

    y, f = _metric_inputs("regression", seed=2)
    w = np.random.default_rng(1).uniform(0.5, 2.0, y.size)
    idx = np.random.default_rng(0).integers(0, y.size, (5, y.size))
    values = weighted_metric(METRICS["rmse"], w).on_resamples(y, f, idx)
    for b in range(5):
        counts = np.bincount(idx[b], minlength=y.size)
        assert values[b] == pytest.approx(skm.root_mean_squared_error(y, f, sample_weight=w * counts), rel=1e-10)
    assert weighted_metric(METRICS["accuracy"], w).interval == "bootstrap"


# ------------------------------------------------------------------ through `penduel run`
def _cli_files(folder, seed=1, n=48):
    import pandas as pd

    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, 4))
    y = X[:, 0] - X[:, 1] + 0.5 * rng.standard_normal(n)
    frame = pd.DataFrame(X, columns=list("abcd"))
    frame.assign(w=rng.integers(1, 4, n), y=y).to_csv(folder / "data.csv", index=False)
    labels = np.where(X[:, 0] + 0.5 * rng.standard_normal(n) > 0.6, "yes", "no")
    frame.assign(label=labels).to_csv(folder / "cls.csv", index=False)


def _stored(folder, run_id):
    from mlflow.tracking import MlflowClient

    from .conftest import children_of
    client = MlflowClient(f"sqlite:///{folder / 'store.db'}")
    return client.get_run(run_id), children_of(client, run_id)


def _run(folder, config: str):
    """`penduel run` in this process (the command line's own entry point; imports paid once per session)."""
    from .conftest import penduel

    (folder / "experiment.yaml").write_text(config, encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--tracking-uri", f"sqlite:///{folder / 'store.db'}"], folder)
    assert code == 0, err[-3000:]
    run_id = out.strip().splitlines()[-1].split()[-1]
    html = next(folder.glob(f"reports/*/{run_id}/index.html")).read_text(encoding="utf-8")
    return run_id, " ".join(html.replace("&#39;", "'").split())


COMMON = ("families: {l1: {path: {points: 5}%s}, l2: {path: {points: 5}%s}}\nselection: {cv_folds: 3}\n"
          "tracking: {uri: 'sqlite:///store.db'}\n")


def test_data_weights_through_penduel_run(tmp_path):
    """data.weights with weighted metrics: every fit (folds, refit, 4 stability resamples) weighted; the
    report and the tracking store say so."""
    _cli_files(tmp_path)
    config = ("name: weighted\ndata: {kind: csv, path: data.csv, target: y, weights: w}\nlosses: [absolute]\n"
              "stability: {n_resamples: 4}\nverdict: {weighted_metrics: true}\n" + COMMON % ("", ""))
    run_id, html = _run(tmp_path, config)
    assert "Row weights used in fitting" in html and "sparse (L1): column 'w'; ridge-type (L2): column 'w'" in html
    assert "Held-out metrics, their intervals and the paired comparison are weighted" in html
    parent, children = _stored(tmp_path, run_id)
    assert parent.data.params["weighted_metrics"] == "True"
    assert {c.data.params["row_weights"] for c in children} == {"column 'w'"}
    assert parent.data.params["n_columns"] == "4"      # the weight column is not a feature
    assert "column 'w': from 1 to 3" in html      # the data table of the report


@pytest.mark.slow
def test_class_weight_balanced_through_penduel_run(tmp_path):
    _cli_files(tmp_path)
    config = ("name: balanced\ndata: {kind: csv, path: cls.csv, target: label}\nlosses: [hinge]\n"
              "stability: {enabled: false}\n" + COMMON % (", class_weight: balanced", ""))
    run_id, html = _run(tmp_path, config)
    assert "sparse (L1): balanced; ridge-type (L2): none" in html
    assert "Held-out metrics are unweighted" in html
    _, children = _stored(tmp_path, run_id)
    assert {c.data.params["family"]: c.data.params["row_weights"] for c in children} == {"l1": "balanced",
                                                                                         "l2": "none"}


def test_cv_errors_are_weighted_as_the_fit():
    """A fit task's held-out loss is the weighted mean over its evaluation rows (np.average as reference)."""
    from pipeline.config import IdentityMap
    from pipeline.fitting import FitTask, Shared, run_fit

    rng = np.random.default_rng(2)
    X = rng.standard_normal((40, 3))
    y = X[:, 0] + 0.3 * rng.standard_normal(40)
    w = rng.uniform(0.5, 3.0, 40)
    options = {"l1": _sparse_options("auto"), "l2": {**_ridge_options(), "class_weight": "none"}}
    tr, ev = np.arange(30), np.arange(30, 40)
    grid = np.array([0.3, 0.1, 0.03])
    plain = dict(X=X, y=y, task="regression", feature_maps=(IdentityMap(kind="identity"),), feature_seed=0,
                 input_names=("a", "b", "c"), family_options=options)
    task = FitTask("fold0", "l1", "absolute", (), "absolute", tr, ev, grid)
    weighted_out = run_fit(task, Shared(**plain, weights=w))
    unweighted_out = run_fit(task, Shared(**plain))
    centre, scale = y[tr].mean(), y[tr].std()
    for out, weights in ((weighted_out, w[ev]), (unweighted_out, None)):
        t_ev, f = (y[ev] - centre) / scale, (out.eval_pred - centre) / scale
        expected = [np.average(np.abs(t_ev - fl), weights=weights) for fl in f]
        np.testing.assert_allclose(out.eval_loss, expected, rtol=1e-10)
    assert not np.allclose(weighted_out.eval_loss, unweighted_out.eval_loss)

