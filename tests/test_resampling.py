"""Resampling schemes and the resampling stage."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.linear_model import Lasso, lasso_path

from pipeline.stability import held_out_rows, in_fit_mask, resample_indices
from pipeline.stability.engine import resample_fits


@given(st.integers(4, 200), st.sampled_from([0.3, 0.5, 0.8]), st.integers(0, 1000))
@settings(max_examples=40, deadline=None)
def test_subsamples_have_the_right_size_and_no_repeats(n, fraction, seed):
    for rows in resample_indices(n, "subsample", 5, fraction=fraction, rng=seed):
        assert rows.size == int(np.floor(fraction * n))
        assert np.unique(rows).size == rows.size
        assert rows.min() >= 0 and rows.max() < n
        assert (np.diff(rows) > 0).all()


@given(st.integers(2, 101), st.integers(0, 1000))
@settings(max_examples=40, deadline=None)
def test_complementary_pairs_are_disjoint_halves(n, seed):
    # Shah & Samworth (2013, JRSS-B 75(1)): pairs of disjoint subsets of size floor(n/2)
    halves = resample_indices(n, "complementary_pairs", 6, rng=seed)
    assert len(halves) == 6
    for a, b in zip(halves[::2], halves[1::2]):
        assert a.size == b.size == n // 2
        assert np.intersect1d(a, b).size == 0


def test_bootstrap_draws_n_rows_with_replacement():
    draws = resample_indices(50, "bootstrap", 20, rng=0)
    assert all(rows.size == 50 for rows in draws)
    assert any(np.unique(rows).size < 50 for rows in draws)
    # about 1 − 1/e ≈ 63.2 % distinct rows per bootstrap sample (common practice figure)
    distinct = np.mean([np.unique(rows).size / 50 for rows in draws])
    assert 0.55 < distinct < 0.72


@pytest.mark.parametrize("scheme", ["subsample", "bootstrap", "complementary_pairs"])
def test_stratified_draws_keep_class_counts(scheme):
    y = np.array([1] * 30 + [-1] * 10)
    for rows in resample_indices(40, scheme, 4, rng=2, y=y):
        expected = {"bootstrap": (30, 10)}.get(scheme, (15, 5))
        assert (np.sum(y[rows] == 1), np.sum(y[rows] == -1)) == expected


def test_same_seed_same_resamples_and_different_seeds_differ():
    a = resample_indices(30, "subsample", 3, rng=np.random.SeedSequence(9))
    b = resample_indices(30, "subsample", 3, rng=np.random.SeedSequence(9))
    c = resample_indices(30, "subsample", 3, rng=np.random.SeedSequence(10))
    assert all(np.array_equal(x, y) for x, y in zip(a, b))
    assert not all(np.array_equal(x, y) for x, y in zip(a, c))


@pytest.mark.parametrize("kwargs, match", [
    ({"scheme": "jackknife"}, "scheme"),
    ({"scheme": "complementary_pairs", "n_resamples": 3}, "even"),
    ({"scheme": "complementary_pairs", "fraction": 0.4}, "fraction"),
    ({"fraction": 0.0}, "fraction"),
    ({"n_resamples": 0}, "n_resamples"),
])
def test_bad_arguments_are_refused(kwargs, match):
    with pytest.raises(ValueError, match=match):
        resample_indices(10, **kwargs)


def test_in_fit_mask_and_held_out_rows():
    mask = in_fit_mask(4, [np.array([0, 2]), np.array([1, 1, 3])])
    np.testing.assert_array_equal(mask, [[True, False, True, False], [False, True, False, True]])
    np.testing.assert_array_equal(held_out_rows(4, np.array([1, 1, 3])), [0, 2])


def _lasso_fit(X, y):
    """Lasso path at two λ values; scikit-learn's alpha equals the project's λ (both (1/2n)‖·‖²)."""
    Xc, yc = X - X.mean(axis=0), y - y.mean()
    alphas, coefs, _ = lasso_path(Xc, yc, alphas=np.array([0.5, 0.05]))
    coef = coefs.T
    return coef, y.mean() - coef @ X.mean(axis=0)


def _problem():
    rng = np.random.default_rng(1)
    X = rng.standard_normal((40, 6))
    y = 2 * X[:, 0] - X[:, 1] + 0.3 * rng.standard_normal(40)
    return X, y


def test_resample_fits_match_direct_fits_and_hide_in_fit_rows():
    X, y = _problem()
    resamples = resample_indices(40, "subsample", 4, rng=3)
    out = resample_fits(_lasso_fit, X, y, resamples)
    assert out.coefs.shape == (4, 2, 6) and out.predictions.shape == (4, 2, 40)
    for m, rows in enumerate(resamples):
        # reference: scikit-learn Lasso(alpha=λ) with an unpenalised intercept, the project's objective
        ref = Lasso(alpha=0.05, tol=1e-10, max_iter=100_000).fit(X[rows], y[rows])
        np.testing.assert_allclose(out.coefs[m, 1], ref.coef_, atol=1e-4)
        held_out = np.setdiff1d(np.arange(40), rows)
        np.testing.assert_allclose(out.predictions[m, 1, held_out], ref.predict(X[held_out]), atol=1e-3)
        assert np.isnan(out.predictions[m, :, rows]).all()


def test_resample_fits_identical_across_backends():
    X, y = _problem()
    resamples = resample_indices(40, "complementary_pairs", 4, rng=4)
    local = resample_fits(_lasso_fit, X, y, resamples)
    processes = resample_fits(_lasso_fit, X, y, resamples, backend="processes", n_jobs=2)
    for name in ("coefs", "intercepts", "predictions"):
        assert getattr(local, name).tobytes() == getattr(processes, name).tobytes(), name


def test_scheme_table_properties_hold_for_the_draws():
    from pipeline.stability import SCHEME_TABLE, SCHEMES

    assert SCHEMES == ("subsample", "bootstrap", "complementary_pairs")
    for name, scheme in SCHEME_TABLE.items():
        assert scheme.name == name and scheme.description
        draws = resample_indices(40, name, 6, fraction=0.5, rng=7)
        if scheme.half_size:
            assert all(len(rows) == 20 for rows in draws)
        repeats = any(len(np.unique(rows)) < len(rows) for rows in draws)
        assert repeats == scheme.with_replacement
        if scheme.paired:
            for first, second in zip(draws[::2], draws[1::2]):
                assert not np.isin(first, second).any()
