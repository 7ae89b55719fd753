"""Stability measures: hand-computed values, published identities, properties and a simulation."""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from pipeline.stability import (
    compare_families, correlated_groups_sharing, held_out_matrix, lambda_range_for_error_bound, mb_error_bound,
    nogueira_stability, prediction_instability, selected, selection_probabilities, sign_consistency, stable_set,
    top_k_sets, union_sizes)


# --- Meinshausen & Bühlmann (2010, JRSS-B 72(4)), Theorem 1: E[V] <= q² / ((2π_thr − 1) p) ---

@pytest.mark.parametrize("q, threshold, p, expected", [
    (10, 0.9, 1000, 100 / (0.8 * 1000)),   # hand value 0.125
    (5, 0.6, 100, 25 / (0.2 * 100)),       # hand value 1.25
    (3, 1.0, 9, 9 / 9),                    # π_thr = 1: bound q²/p = 1
])
def test_mb_bound_hand_values(q, threshold, p, expected):
    assert mb_error_bound(q, threshold, p) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("threshold", [0.5, 0.3, 1.2])
def test_mb_bound_needs_threshold_above_one_half(threshold):
    with pytest.raises(ValueError, match="threshold"):
        mb_error_bound(2, threshold, 10)


def test_selection_probabilities_and_stable_set_by_hand():
    # 4 resamples, 2 λ values, 3 features
    paths = np.zeros((4, 2, 3))
    paths[:, 0, 0] = [1.0, -2.0, 0.5, 0.0]      # feature 0 at λ0: 3 of 4
    paths[:, 1, 0] = [1.0, -2.0, 0.5, 0.1]      # 4 of 4
    paths[:2, 1, 1] = [0.3, 0.3]                # feature 1 at λ1: 2 of 4
    probs = selection_probabilities(paths)
    np.testing.assert_array_equal(probs, [[0.75, 0.0, 0.0], [1.0, 0.5, 0.0]])
    np.testing.assert_array_equal(stable_set(probs, 0.6), [0])
    np.testing.assert_array_equal(stable_set(probs, 0.5), [0, 1])
    np.testing.assert_array_equal(stable_set(probs[0], 0.8), [])


def _paths_with_union_sizes(sizes, B=2, p=100):
    """Paths over len(sizes) decreasing λ where every resample selects features 0..sizes[l]-1."""
    paths = np.zeros((B, len(sizes), p))
    for level, size in enumerate(sizes):
        paths[:, level, :size] = 1.0
    return paths


def test_union_sizes_accumulate_over_lambda():
    paths = np.zeros((2, 3, 5))
    paths[0, 0, 0] = paths[0, 1, 1] = paths[0, 2, 2] = 1.0   # union grows 1, 2, 3
    paths[1, 0, 4] = paths[1, 1, 4] = paths[1, 2, 4] = 1.0   # union stays 1
    np.testing.assert_allclose(union_sizes(paths), [1.0, 1.5, 2.0])


def test_lambda_range_for_error_bound_by_hand():
    paths = _paths_with_union_sizes([1, 3, 10])
    lambdas = np.array([1.0, 0.5, 0.25])
    # bounds q²/((2·0.9 − 1)·100) = 0.0125, 0.1125, 1.25 (hand values)
    out = lambda_range_for_error_bound(paths, lambdas, threshold=0.9, target_ev=0.2)
    assert (out["lambda_min"], out["lambda_max"]) == (0.5, 1.0)
    np.testing.assert_array_equal(out["indices"], [0, 1])
    assert out["q"] == 3.0 and out["bound"] == pytest.approx(0.1125)
    assert out["q_allowed"] == pytest.approx(np.sqrt(0.2 * 0.8 * 100))
    np.testing.assert_array_equal(out["stable_set"], [0, 1, 2])
    # grid given in increasing order gives the same range
    flipped = lambda_range_for_error_bound(paths[:, ::-1], lambdas[::-1], 0.9, 0.2)
    assert (flipped["lambda_min"], flipped["lambda_max"]) == (0.5, 1.0)
    np.testing.assert_array_equal(flipped["indices"], [1, 2])


def test_lambda_range_empty_when_the_sparsest_fit_already_fails():
    out = lambda_range_for_error_bound(_paths_with_union_sizes([3, 5]), np.array([1.0, 0.5]), 0.9, 0.01)
    assert out["lambda_min"] is None and out["indices"].size == 0
    assert out["bound"] == pytest.approx(9 / 80)


# --- Nogueira, Sechidis & Brown (2018, JMLR 18) ---

def test_nogueira_two_sets_by_hand():
    # p̂ = (1, ½, ½), s² = 2·p̂(1−p̂) = (0, ½, ½), k̄ = 2: Φ̂ = 1 − (1/3)/((2/3)(1/3)) = −½ (hand value)
    Z = np.array([[1, 1, 0], [1, 0, 1]])
    assert nogueira_stability(Z)["stability"] == pytest.approx(-0.5, abs=1e-12)


def test_nogueira_three_sets_by_hand():
    # p̂ = (1, ⅔, ⅓, 0), mean s² = (3/2)(4/9)/4 = 1/6, k̄/p = ½: Φ̂ = 1 − (1/6)/(1/4) = ⅓ (hand value)
    Z = np.array([[1, 1, 0, 0], [1, 0, 1, 0], [1, 1, 0, 0]])
    assert nogueira_stability(Z)["stability"] == pytest.approx(1 / 3, abs=1e-12)


@given(st.integers(2, 30), st.integers(1, 29), st.integers(0, 10_000))
@settings(max_examples=40, deadline=None)
def test_nogueira_reduces_to_kuncheva_for_two_sets_of_equal_size(p, k, seed):
    # Kuncheva (2007, "A stability index for feature selection", AIA) index (r − k²/p)/(k − k²/p)
    # for two sets of size k sharing r features; Φ̂ equals it for M = 2 (identity derived by hand).
    k = min(k, p - 1)
    rng = np.random.default_rng(seed)
    Z = np.zeros((2, p))
    Z[0, rng.choice(p, k, replace=False)] = 1
    Z[1, rng.choice(p, k, replace=False)] = 1
    r = float(Z[0] @ Z[1])
    kuncheva = (r - k * k / p) / (k - k * k / p)
    assert nogueira_stability(Z)["stability"] == pytest.approx(kuncheva, abs=1e-12)


@given(arrays(np.int8, st.tuples(st.integers(1, 6), st.integers(2, 12)), elements=st.integers(0, 1)),
       st.integers(2, 8))
@settings(max_examples=60, deadline=None)
def test_nogueira_is_one_for_identical_sets(row, M):
    Z = np.repeat(row[:1], M, axis=0)
    out = nogueira_stability(Z)
    if 0 < Z[0].sum() < Z.shape[1]:
        assert out["stability"] == pytest.approx(1.0, abs=1e-12)
        assert out["variance"] == pytest.approx(0.0, abs=1e-12)
    else:
        assert np.isnan(out["stability"])


@given(arrays(np.int8, st.tuples(st.integers(2, 8), st.integers(2, 10)), elements=st.integers(0, 1)),
       st.integers(0, 1000))
@settings(max_examples=60, deadline=None)
def test_nogueira_ignores_order_of_rows_and_features(Z, seed):
    rng = np.random.default_rng(seed)
    shuffled = Z[rng.permutation(Z.shape[0])][:, rng.permutation(Z.shape[1])]
    a, b = nogueira_stability(Z), nogueira_stability(shuffled)
    np.testing.assert_allclose([a["stability"], a["variance"]], [b["stability"], b["variance"]],
                               rtol=1e-10, atol=1e-12)
    if not np.isnan(a["stability"]):
        assert a["stability"] <= 1.0 + 1e-12


def test_nogueira_is_about_zero_for_random_sets_of_fixed_size():
    # Property stated by Nogueira et al. (2018): E[Φ̂] = 0 under random selection of fixed size.
    rng = np.random.default_rng(3)
    M, p, k, reps = 10, 50, 5, 2000
    values = np.empty(reps)
    for i in range(reps):
        Z = np.zeros((M, p))
        for m in range(M):
            Z[m, rng.choice(p, k, replace=False)] = 1
        values[i] = nogueira_stability(Z)["stability"]
    standard_error = values.std(ddof=1) / np.sqrt(reps)
    assert abs(values.mean()) < 4 * standard_error


def test_nogueira_interval_covers_the_population_value():
    # Independent Bernoulli(π_f) selections: population Φ = 1 − mean π(1−π) / ((k/p)(1 − k/p)), k = Σ π.
    # The 95 % interval should cover it in about 95 % of repetitions (simulation check of the variance).
    rng = np.random.default_rng(11)
    pi = np.concatenate([np.full(5, 0.9), np.full(5, 0.4), np.full(30, 0.05)])
    p = pi.size
    k = pi.sum()
    truth = 1 - np.mean(pi * (1 - pi)) / ((k / p) * (1 - k / p))
    reps, M = 1000, 100
    covered = 0
    for _ in range(reps):
        out = nogueira_stability((rng.uniform(size=(M, p)) < pi).astype(float))
        covered += out["lower"] <= truth <= out["upper"]
    coverage = covered / reps
    assert 0.92 <= coverage <= 0.98, coverage     # ±3.5 binomial standard errors around 0.95


def test_nogueira_refuses_bad_input():
    with pytest.raises(ValueError):
        nogueira_stability(np.array([[1, 0, 1]]))
    with pytest.raises(ValueError):
        nogueira_stability(np.array([[1, 2], [0, 1]]))


# --- top-k sets, signs, predictions ---

def test_top_k_sets_by_hand_with_ties_to_lower_index():
    W = np.array([[0.1, -3.0, 2.0, 0.5], [1.0, 1.0, 1.0, 0.0]])
    np.testing.assert_array_equal(top_k_sets(W, 2), [[0, 1, 1, 0], [1, 1, 0, 0]])
    np.testing.assert_array_equal(top_k_sets(W, [1, 3]), [[0, 1, 0, 0], [1, 1, 1, 0]])


@given(arrays(np.float64, st.tuples(st.integers(1, 5), st.integers(1, 9)),
              elements=st.floats(-5, 5, allow_nan=False)), st.integers(0, 9))
@settings(max_examples=60, deadline=None)
def test_top_k_sets_pick_k_of_the_largest(W, k):
    k = min(k, W.shape[1])
    sets = top_k_sets(W, k)
    assert (sets.sum(axis=1) == k).all()
    for row, chosen in zip(np.abs(W), sets.astype(bool)):
        if 0 < k < row.size:
            assert row[chosen].min() >= row[~chosen].max()


def test_sign_consistency_by_hand():
    coefs = np.array([[1.0, -1.0, 0.0, 2.0], [2.0, 1.0, 0.0, 0.0], [0.5, -1.0, 0.0, 0.0], [0.0, 1.0, 0.0, 0.0]])
    out = sign_consistency(coefs)
    np.testing.assert_allclose(out[[0, 1, 3]], [1.0, 0.5, 1.0])
    assert np.isnan(out[2])


def test_prediction_instability_by_hand():
    nan = np.nan
    preds = np.array([[1.0, nan, 5.0], [3.0, 2.0, nan], [nan, nan, 7.0]])
    # column 0: var(1, 3) = 2; column 2: var(5, 7) = 2; column 1 has one prediction only
    assert prediction_instability(preds) == pytest.approx(2.0)
    assert np.isnan(prediction_instability(np.array([[1.0, nan], [nan, 2.0]])))


def test_held_out_matrix_places_predictions():
    out = held_out_matrix(4, [np.array([0, 2]), np.array([3])], [np.array([1.0, 2.0]), np.array([5.0])])
    np.testing.assert_array_equal(np.isnan(out), [[False, True, False, True], [True, True, True, False]])
    assert out[0, 2] == 2.0 and out[1, 3] == 5.0


# --- correlated groups ---

def test_correlated_groups_sharing_on_constructed_selections():
    rng = np.random.default_rng(5)
    base = rng.standard_normal((200, 3))
    X = np.column_stack([base[:, 0], base[:, 0] + 0.1 * rng.standard_normal(200),   # pair A
                         base[:, 1], base[:, 1] + 0.1 * rng.standard_normal(200),   # pair B
                         base[:, 2]])
    Z = np.zeros((10, 5), dtype=int)
    Z[:5, 0] = 1
    Z[5:, 1] = 1          # pair A: each member in half of the resamples, never together
    Z[:, 2] = Z[:, 3] = 1  # pair B: both members always
    Z[:, 4] = 1            # uncorrelated feature: no group
    groups = correlated_groups_sharing(Z, X, min_abs_corr=0.8, min_frequency=0.1)
    assert [g["features"] for g in groups] == [[0, 1], [2, 3]]
    first, second = groups
    assert first["any_member_frequency"] == 1.0 and first["mean_members_selected"] == 1.0
    assert first["substitution"] == pytest.approx(0.5)
    assert second["substitution"] == 0.0 and second["mean_members_selected"] == 2.0


def test_lasso_splits_selection_across_neighbouring_bands():
    """Spectral-bands scenario (neighbouring columns correlated 0.95): the lasso picks one band of a
    correlated neighbourhood or another from resample to resample, and the grouping shows it."""
    from sklearn.linear_model import Lasso

    from pipeline.data.scenarios import make_scenario
    from pipeline.stability import resample_indices

    src = SimpleNamespace(name="spectral_bands", seed=3, n_samples=120, n_features=40, n_informative=2,
                          correlation=0.95, noise=0.5)
    data = make_scenario(src)
    X = (data.X - data.X.mean(axis=0)) / data.X.std(axis=0)
    Z = []
    for rows in resample_indices(X.shape[0], "subsample", 50, rng=1):
        # scikit-learn Lasso(alpha=λ) minimises (1/2n)‖y − Xw − b‖² + λ‖w‖₁, the project's form
        model = Lasso(alpha=0.1).fit(X[rows], data.y[rows])
        Z.append(model.coef_ != 0)
    groups = correlated_groups_sharing(np.array(Z), X, min_abs_corr=0.8, min_frequency=0.1)
    truth = set(data.truth.support)
    near_truth = [g for g in groups if any(abs(f - t) <= 2 for f in g["features"] for t in truth)]
    assert near_truth, groups
    # frequency is spread over several neighbouring bands, not concentrated on the true one
    assert all(len(g["features"]) >= 2 and sum(g["frequencies"]) > g["any_member_frequency"]
               for g in near_truth)


def test_compare_families_by_hand():
    l1 = np.array([[1.0, 0, -2, 0], [1, 0, 2, 0], [0.5, 0.1, 0, 0]])
    l2 = np.array([[3.0, 1, 2, 0.5], [3, 2, 1, 0], [-3, 0.1, 2, 1]])
    # both families' sets: {0,2}, {0,2}|{0,1}, {0,1}|{0,2}: Φ̂ = 1/3 as in the three-set hand example
    nan = np.nan
    preds = np.array([[1.0, nan], [3.0, 4.0], [nan, 6.0]])
    out = compare_families(l1, l2, preds, preds)
    for family in ("support", "top_k"):
        assert out[family]["index"]["stability"] == pytest.approx(1 / 3)
        assert out[family]["mean_set_size"] == 2.0
        assert out[family]["prediction_instability"] == pytest.approx(2.0)   # var(1,3) = var(4,6) = 2
    # L1 signs: feature 0 +++ , feature 1 +, feature 2 +− : (3 + 1 + 1) / 6 agree with the majority
    assert out["support"]["sign_agreement"] == pytest.approx(5 / 6)
    # L2 top-2 signs: feature 0 ++−, feature 1 +, feature 2 ++ : (2 + 1 + 2) / 6
    assert out["top_k"]["sign_agreement"] == pytest.approx(5 / 6)
    np.testing.assert_allclose(out["top_k"]["selection_frequency"], [1, 1 / 3, 2 / 3, 0])


def _lasso_and_ridge(X, y):
    """Lasso path (scikit-learn alpha = λ) and one ridge fit (scikit-learn Ridge alpha = nλ) per resample."""
    from sklearn.linear_model import Ridge, lasso_path

    Xc, yc = X - X.mean(axis=0), y - y.mean()
    lambdas = np.geomspace(1.0, 0.02, 12)
    _, lasso_coefs, _ = lasso_path(Xc, yc, alphas=lambdas)
    ridge = Ridge(alpha=X.shape[0] * 0.05).fit(X, y)
    coef = np.vstack([lasso_coefs.T, ridge.coef_])
    return coef, y.mean() - coef @ X.mean(axis=0)


def test_stability_summary_on_a_sparse_problem():
    from pipeline.stability import in_fit_mask, resample_indices

    rng = np.random.default_rng(8)
    X = rng.standard_normal((100, 30))
    y = X[:, :3] @ np.array([2.0, -2.0, 1.5]) + 0.5 * rng.standard_normal(100)
    resamples = resample_indices(100, "complementary_pairs", 40, rng=0)
    coefs, preds = [], []
    for rows in resamples:
        coef, intercept = _lasso_and_ridge(X[rows], y[rows])
        coefs.append(coef)
        preds.append(intercept[:, None] + coef @ X.T)
    coefs = np.stack(coefs)
    predictions = np.where(in_fit_mask(100, resamples)[:, None, :], np.nan, np.stack(preds))
    lambdas = np.geomspace(1.0, 0.02, 12)
    l1_index = 6
    paths = coefs[:, :12]
    assert selection_probabilities(paths).shape == (12, 30)
    control = lambda_range_for_error_bound(paths, lambdas, 0.9, 1.0)
    assert control["bound"] <= 1.0 and {0, 1, 2} <= set(control["stable_set"].tolist())
    both = compare_families(paths[:, l1_index], coefs[:, 12], predictions[:, l1_index], predictions[:, 12])
    l1, l2 = both["support"], both["top_k"]
    assert l2["mean_set_size"] == l1["mean_set_size"]          # ridge top-k uses the lasso's k
    for family in (l1, l2):
        assert -1.0 <= family["index"]["lower"] <= family["index"]["stability"] <= family["index"]["upper"]
        assert family["prediction_instability"] > 0


def test_selection_indicators_give_the_same_measures_as_the_weights():
    """The stage stacks a sparse family's resample paths as indicators: every measure along the path must be
    the one of the weights, bit for bit (NaN weights and the tolerance included)."""
    rng = np.random.default_rng(4)
    paths = np.where(rng.random((7, 9, 30)) < 0.3, rng.standard_normal((7, 9, 30)), 0.0)
    paths[0, 0, 0] = np.nan
    lambdas = np.geomspace(1.0, 0.01, 9)
    indicators = selected(paths)
    assert indicators.dtype == bool
    np.testing.assert_array_equal(selection_probabilities(indicators), selection_probabilities(paths))
    np.testing.assert_array_equal(union_sizes(indicators), union_sizes(paths))
    for target in (0.5, 2.0, 50.0):
        a, b = (lambda_range_for_error_bound(x, lambdas, 0.7, target) for x in (indicators, paths))
        assert a.keys() == b.keys()
        for key in a:
            np.testing.assert_array_equal(a[key], b[key])
    assert not selected(indicators, tol=1.0).any()
