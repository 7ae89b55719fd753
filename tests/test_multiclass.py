"""More than two classes: the loss property, the one-versus-rest packing, the K-class metrics (checked
against scikit-learn's functions, named beside each check), the data loader and the starter's folds."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.special import softmax
from sklearn import metrics as skm

from pipeline.config.sections import L2Spec
from pipeline.data.loaders import frame_to_dataset
from pipeline.evaluate import METRICS
from pipeline.evaluate.bounded import bounded_interval
from pipeline.evaluate.classes import confusion
from pipeline.evaluate.metrics import classes_form, classes_loss_metric
from pipeline.losses import CLASSIFICATION, LOSSES, get_loss
from pipeline.models.interface import PathFit
from pipeline.models.multiclass import (MULTINOMIAL, ONE_VERSUS_REST, SeveralClasses, class_targets, for_classes,
                                        pack, path_losses, row_losses, selection_weights)
from pipeline.models.ridge import RIDGE
from pipeline.models.sparse import SPARSE
from pipeline.starter import cv_folds


def _blobs(n=90, K=3, p=5, seed=0):
    rng = np.random.default_rng(seed)
    codes = np.resize(np.arange(K), n)
    Z = rng.normal(size=(n, p))
    Z[:, 0] += 2.0 * (codes == 0)
    Z[:, 1] += 2.0 * (codes == 1)
    return (Z - Z.mean(0)) / Z.std(0), codes.astype(float)


def _scores(n=60, K=4, seed=1):
    rng = np.random.default_rng(seed)
    y = np.resize(np.arange(K), n)
    F = rng.normal(size=(n, K)) + 1.5 * np.eye(K)[y]
    return y, F


# ---------------------------------------------------------------- the loss property
def test_every_classification_loss_declares_how_it_goes_beyond_two_classes():
    declared = {name: get_loss(name).multiclass for name, kind in LOSSES.items() if kind.task == CLASSIFICATION}
    assert declared == {"logistic": MULTINOMIAL, "hinge": ONE_VERSUS_REST, "squared_hinge": ONE_VERSUS_REST}
    assert all(get_loss(name).multiclass == "" for name, kind in LOSSES.items() if kind.task != CLASSIFICATION)


# ---------------------------------------------------------------- packing
def _fake(L, p, seed, cert, converged, status):
    rng = np.random.default_rng(seed)
    coef = rng.normal(size=(L, p)) * (rng.random((L, p)) < 0.4)
    return PathFit(lambdas=np.geomspace(1, 0.1, L), intercept=rng.normal(size=L), coef=coef,
                   n_nonzero=np.count_nonzero(coef, axis=1), effective_df=np.count_nonzero(coef, axis=1).astype(float),
                   df_kind="nonzeros", certificate=np.asarray(cert, float), certificate_kind="duality_gap",
                   converged=np.asarray(converged), status=tuple(status), solver="s", fit_seconds=1.0)


def test_pack_stacks_classes_last_counts_any_class_and_keeps_the_worst_certificate():
    fits = [_fake(3, 6, 0, [1e-9, 2e-9, 3e-9], [True, True, True], ["optimal"] * 3),
            _fake(3, 6, 1, [5e-9, 1e-9, 1e-9], [True, False, True], ["optimal", "max rounds", "optimal"]),
            _fake(3, 6, 2, [1e-9, 1e-9, 7e-9], [True, True, True], ["optimal"] * 3)]
    fit = pack(fits)
    assert fit.coef.shape == (3, 6, 3) and fit.intercept.shape == (3, 3)
    for k, f in enumerate(fits):
        assert np.array_equal(fit.coef[..., k], f.coef) and np.array_equal(fit.intercept[:, k], f.intercept)
    any_class = np.zeros((3, 6), bool)
    for f in fits:
        any_class |= f.coef != 0
    assert np.array_equal(fit.n_nonzero, any_class.sum(axis=1))
    assert np.array_equal(fit.certificate, [5e-9, 2e-9, 7e-9])
    assert fit.converged.tolist() == [True, False, True]
    assert fit.status[0] == "optimal" and "class 1: max rounds" in fit.status[1]
    assert np.array_equal(fit.effective_df, sum(f.effective_df for f in fits))
    assert fit.fit_seconds == 3.0 and fit.multiclass == ONE_VERSUS_REST
    assert np.array_equal(selection_weights(fit.coef) != 0, any_class)


def test_two_classes_keep_the_family_itself():
    assert for_classes(SPARSE, 2) is SPARSE and for_classes(RIDGE, 0) is RIDGE
    assert isinstance(for_classes(SPARSE, 3), SeveralClasses) and for_classes(SPARSE, 3).title == SPARSE.title


@pytest.mark.parametrize("loss_name", ["hinge", "squared_hinge"])
def test_one_versus_rest_is_the_binary_fit_of_every_class_on_one_shared_grid(loss_name):
    Z, codes = _blobs()
    loss = get_loss(loss_name)
    opts = {"tol": 1e-8, "solver": "auto", "alpha": 1.0, "n_lambdas": 5, "lambda_ratio": 0.1}
    several = for_classes(SPARSE, 3)
    grid = several.grid(Z, codes, loss, opts)
    per_class = [SPARSE.grid(Z, class_targets(codes, k), loss, opts) for k in range(3)]
    assert grid[0] == max(g[0] for g in per_class)      # the top is the largest per-class λ_max
    fit = several.fit_path(Z, codes, loss, grid, opts)
    assert fit.n_nonzero[0] == 0                          # every class is all-zero at the shared top
    F = several.predict(fit, Z)
    assert F.shape == (5, len(codes), 3)
    for k in range(3):
        alone = SPARSE.fit_path(Z, class_targets(codes, k), loss, grid, opts)
        assert np.array_equal(fit.coef[..., k], alone.coef) and np.array_equal(fit.intercept[:, k], alone.intercept)
        assert np.array_equal(F[..., k], SPARSE.predict(alone, Z))
    assert "one versus the rest" in fit.note


def test_logistic_is_fitted_multinomially_by_both_families_with_a_certificate_for_the_sparse_one():
    Z, codes = _blobs()
    logistic = get_loss("logistic")
    opts = {"tol": 1e-8, "solver": "auto", "alpha": 1.0, "n_lambdas": 5, "lambda_ratio": 0.1}
    sparse = for_classes(SPARSE, 3)
    fit = sparse.fit_path(Z, codes, logistic, sparse.grid(Z, codes, logistic, opts), opts)
    assert fit.multiclass == MULTINOMIAL and "fitted multinomial (softmax)" in fit.note
    assert fit.coef.shape == (5, Z.shape[1], 3) and fit.n_nonzero[0] == 0 and fit.n_nonzero[-1] > 0
    assert fit.converged.all() and np.all(fit.certificate <= 1e-8)
    assert sparse.predict(fit, Z).shape == (5, len(codes), 3)
    ridge_opts = RIDGE.options(L2Spec(path={"points": 4}))
    ridge = for_classes(RIDGE, 3)
    fit = ridge.fit_path(Z, codes, logistic, ridge.grid(Z, codes, logistic, ridge_opts), ridge_opts)
    assert fit.multiclass == MULTINOMIAL and fit.coef.shape == (4, Z.shape[1], 3) and fit.converged.all()
    # the linear kernel's weights reproduce the representer scores
    F = ridge.predict(fit, Z)
    assert np.allclose(F, np.einsum("mp,lpk->lmk", Z, fit.coef) + fit.intercept[:, None, :])
    # the low-rank route has no multinomial fitter: one versus the rest, and the note says so
    low = {**ridge_opts, "low_rank": True, "n_landmarks": 10}
    fit = ridge.fit_path(Z, codes, logistic, ridge.grid(Z, codes, logistic, low), low)
    assert fit.multiclass == ONE_VERSUS_REST and "has no multinomial fitter" in fit.note


def test_ridge_family_grid_does_not_read_the_classes():
    Z, codes = _blobs()
    opts = RIDGE.options(L2Spec(path={"points": 4}))     # the linear kernel by default
    loss = get_loss("squared_hinge")
    assert np.array_equal(for_classes(RIDGE, 3).grid(Z, codes, loss, opts), RIDGE.grid(Z, codes, loss, opts))
    fit = for_classes(RIDGE, 3).fit_path(Z, codes, loss, RIDGE.grid(Z, codes, loss, opts), opts)
    assert fit.coef.shape == (4, Z.shape[1], 3) and fit.certificate is None and fit.n_nonzero is None


# ---------------------------------------------------------------- losses of several classes
def test_row_losses_one_versus_rest_and_multinomial():
    y, F = _scores()
    hinge = get_loss("hinge")
    expected = sum(hinge.value(class_targets(y, k), F[:, k]) for k in range(F.shape[1]))
    assert np.allclose(row_losses(hinge, y, F, ONE_VERSUS_REST), expected)
    # the softmax cross-entropy summed over rows is scikit-learn's log_loss(normalize=False) of softmax(F)
    ce = row_losses(get_loss("logistic"), y, F, MULTINOMIAL)
    assert np.isclose(ce.sum(), skm.log_loss(y, softmax(F, axis=1), normalize=False))
    assert np.allclose(path_losses(hinge, y, np.stack([F, 2 * F]), ONE_VERSUS_REST),
                       [expected.mean(), row_losses(hinge, y, 2 * F, ONE_VERSUS_REST).mean()])
    metric = classes_loss_metric(hinge, ONE_VERSUS_REST)
    assert np.isclose(metric(y, F), expected.mean())


# ---------------------------------------------------------------- metrics against scikit-learn
def test_k_class_metrics_match_scikit_learn():
    y, F = _scores()
    P = softmax(F, axis=1)
    labels = np.argmax(F, axis=1)
    form = {name: classes_form(m, F) for name, m in METRICS.items() if m.task == "classification"}
    # reference: scikit-learn's metric functions on the argmax labels / the softmax probabilities
    assert np.isclose(form["accuracy"](y, F), skm.accuracy_score(y, labels))
    assert np.isclose(form["balanced_accuracy"](y, F), skm.balanced_accuracy_score(y, labels))
    assert np.isclose(form["roc_auc"](y, F), skm.roc_auc_score(y, P, multi_class="ovr", average="macro"))
    assert np.isclose(form["log_loss"](y, F), skm.log_loss(y, P))
    assert np.isclose(form["brier"](y, F), skm.brier_score_loss(y, P))
    assert np.array_equal(confusion(y, F, 4), skm.confusion_matrix(y, labels))


def test_k_class_resampled_forms_agree_with_the_single_forms():
    y, F = _scores(n=40)
    idx = np.random.default_rng(3).integers(0, len(y), size=(25, len(y)))
    for name in ("accuracy", "balanced_accuracy", "roc_auc", "log_loss", "brier"):
        m = classes_form(METRICS[name], F)
        fast = m.on_resamples(y, F, idx)
        slow = np.array([m(y[i], F[i]) for i in idx])
        assert np.allclose(fast, slow, equal_nan=True), name


def test_k_class_balanced_accuracy_interval_is_honest_at_one():
    y, F = _scores()
    F_perfect = 5.0 * np.eye(4)[y]
    m = classes_form(METRICS["balanced_accuracy"], F_perfect)
    est = m(y, F_perfect)
    low, high = bounded_interval(m.interval, y, F_perfect, 0.9, estimate=est, hits=m.hits(y, F_perfect))
    assert est == 1.0 and low < 1.0 and high == 1.0
    est = m(y, F)
    low, high = bounded_interval(m.interval, y, F, 0.9, estimate=est, hits=m.hits(y, F))
    assert 0 <= low < est < high <= 1


# ---------------------------------------------------------------- data and the starter
def test_three_text_classes_become_codes_in_label_order():
    frame = pd.DataFrame({"x": np.arange(12.0), "y": ["pear", "apple", "fig"] * 4})
    ds = frame_to_dataset(frame, "y", "classification", "t")
    assert ds.class_labels == ("apple", "fig", "pear") and ds.n_classes == 3
    assert ds.y[:3].tolist() == [2.0, 0.0, 1.0]
    assert ds.summary()["class_counts"] == {"apple": 4, "fig": 4, "pear": 4}


def test_numeric_codes_keep_numeric_order():
    frame = pd.DataFrame({"x": np.arange(12.0), "y": [10, 2, 1] * 4})
    ds = frame_to_dataset(frame, "y", "classification", "t")
    assert ds.class_labels == ("1", "2", "10") and ds.y[:3].tolist() == [2.0, 1.0, 0.0]


def test_starter_folds_follow_the_smallest_class():
    y = np.array([0] * 30 + [1] * 30 + [2] * 6, float)
    assert cv_folds(y, "classification", 50) == 2
    assert cv_folds(np.array([-1.0] * 40 + [1.0] * 40), "classification", 60) == 5


# ---------------------------------------------------------------- the multinomial hook
class _TogetherFamily(type(SPARSE)):
    """A family that declares a multinomial fitter (here the one-versus-rest fits handed back through the
    hook, enough to see which route each loss takes and what the callers read)."""
    fits_multinomial = True

    def multinomial_grid(self, Z, codes, n_classes, loss, options, widen=(0, 0)):
        return SeveralClasses(SPARSE, n_classes).grid(Z, codes, get_loss("hinge"), options, widen=widen)

    def fit_multinomial(self, Z, codes, n_classes, loss, lambdas, options):
        from pipeline.models.multiclass import multinomial_pathfit
        inner = SeveralClasses(SPARSE, n_classes).fit_path(Z, codes, get_loss("hinge"), lambdas, options)
        return multinomial_pathfit(lambdas, inner, effective_df=inner.effective_df, df_kind="test", model=inner)

    def predict_multinomial(self, fit, Z):
        return SeveralClasses(SPARSE, 3).predict(fit.model, Z)


def test_a_family_with_a_multinomial_fitter_takes_it_for_losses_declared_multinomial():
    Z, codes = _blobs()
    opts = {"tol": 1e-8, "solver": "auto", "alpha": 1.0, "n_lambdas": 4, "lambda_ratio": 0.1}
    several = for_classes(_TogetherFamily(), 3)
    logistic, hinge = get_loss("logistic"), get_loss("hinge")
    assert several.strategy(logistic) == MULTINOMIAL and several.strategy(hinge) == ONE_VERSUS_REST
    fit = several.fit_path(Z, codes, logistic, several.grid(Z, codes, logistic, opts), opts)
    assert fit.multiclass == MULTINOMIAL and "fitted multinomial (softmax)" in fit.note
    F = several.predict(fit, Z)
    assert F.shape == (4, len(codes), 3)
    # the held-out loss of a multinomial fit is the softmax cross-entropy
    assert np.allclose(path_losses(logistic, codes, F, fit.multiclass),
                       [skm.log_loss(codes, softmax(f, axis=1), labels=[0, 1, 2]) for f in F])
    assert several.fit_path(Z, codes, hinge, several.grid(Z, codes, hinge, opts), opts).multiclass == ONE_VERSUS_REST


def test_weighted_logistic_goes_one_versus_rest_because_the_multinomial_fitters_take_no_weights():
    from pipeline.losses_weighted import weighted
    Z, codes = _blobs()
    w = np.linspace(1.0, 3.0, len(codes))
    loss = weighted(get_loss("logistic"), w)
    opts = {"tol": 1e-8, "solver": "auto", "alpha": 1.0, "n_lambdas": 3, "lambda_ratio": 0.2}
    several = for_classes(SPARSE, 3)
    assert several.strategy(loss) == ONE_VERSUS_REST and several.strategy(get_loss("logistic")) == MULTINOMIAL
    fit = several.fit_path(Z, codes, loss, several.grid(Z, codes, loss, opts), opts)
    assert fit.multiclass == ONE_VERSUS_REST and "or with row weights" in fit.note


@pytest.mark.parametrize("loss_name", ["logistic", "hinge"])
def test_several_classes_from_sparse_rows_match_the_dense_fit_in_both_families(loss_name):
    import scipy.sparse as sp
    rng = np.random.default_rng(3)
    Z = rng.normal(size=(60, 8))
    Z[np.abs(Z) < 1] = 0.0
    codes = rng.integers(0, 3, 60)
    loss = get_loss(loss_name)
    l1_opts = {"tol": 1e-8, "solver": "auto", "alpha": 1.0, "n_lambdas": 4, "lambda_ratio": 0.1}
    for family, opts in ((SPARSE, l1_opts), (RIDGE, RIDGE.options(L2Spec(path={"points": 4})))):
        several = for_classes(family, 3)
        grid = several.grid(Z, codes, loss, opts)
        on_sparse = several.fit_path(sp.csc_matrix(Z), codes, loss, grid, opts)
        on_dense = several.fit_path(Z, codes, loss, grid, opts)
        assert np.allclose(on_sparse.coef, on_dense.coef, atol=1e-8)
        assert np.allclose(several.predict(on_sparse, sp.csc_matrix(Z)), several.predict(on_dense, Z), atol=1e-7)
