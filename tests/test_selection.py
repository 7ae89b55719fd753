import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from pipeline.selection import choose_lambda_index, cv_summary, make_folds, nested_cv

# Hand-worked CV table, 4 splits x 5 λ (column 0 = largest λ = simplest model).
# One-standard-error rule as in ESL 2nd ed. (Hastie, Tibshirani, Friedman) §7.10:
# column 3 has the least mean, 2.3; its errors deviate by -0.3, 0.1, -0.1, 0.3, so
# s = sqrt(0.2/3) = 0.2581989 and se = s/2 = 0.1290994; threshold 2.4290994.
# Means: col0 6.0, col1 2.45 (> threshold), col2 2.4 (<= threshold), col4 2.4.
HAND_TABLE = np.array([
    [5.0, 2.3, 2.2, 2.0, 2.3],
    [6.0, 2.7, 2.6, 2.4, 2.5],
    [7.0, 2.4, 2.4, 2.2, 2.4],
    [6.0, 2.4, 2.4, 2.6, 2.4],
])


def test_cv_summary_hand_values():
    mean, se = cv_summary(HAND_TABLE)
    np.testing.assert_allclose(mean, [6.0, 2.45, 2.4, 2.3, 2.4])
    assert se[3] == pytest.approx(0.1290994, abs=1e-7)


def test_min_and_one_se_rules_hand_table():
    assert choose_lambda_index(HAND_TABLE, "min") == 3
    assert choose_lambda_index(HAND_TABLE, "one_se") == 2


def test_nan_columns_are_skipped():
    table = HAND_TABLE.copy()
    table[1, 2] = np.nan  # failed fit at column 2: col1 is outside the band, so one_se falls to col3
    assert choose_lambda_index(table, "one_se") == 3
    table[0, 3] = np.nan  # the best column failed too: col4 (mean 2.4) is the least valid mean left
    assert choose_lambda_index(table, "min") == 4


def test_all_nan_and_unknown_rule_raise():
    with pytest.raises(ValueError, match="nothing to choose"):
        choose_lambda_index(np.full((3, 4), np.nan))
    with pytest.raises(ValueError, match="unknown selection rule"):
        choose_lambda_index(HAND_TABLE, "two_se")


tables = arrays(np.float64, st.tuples(st.integers(2, 6), st.integers(1, 8)),
                elements=st.floats(0, 100, allow_nan=False))


@settings(max_examples=200, deadline=None)
@given(tables)
def test_one_se_is_never_more_complex_than_min(table):
    i_min = choose_lambda_index(table, "min")
    i_se = choose_lambda_index(table, "one_se")
    mean, se = cv_summary(table)
    assert i_se <= i_min
    assert mean[i_se] <= mean[i_min] + se[i_min]
    assert np.all(mean[:i_se] > mean[i_min] + se[i_min])


@pytest.mark.parametrize("repeats", [1, 3])
@pytest.mark.parametrize("stratify", [False, True])
def test_folds_partition_rows_each_repeat(repeats, stratify):
    n, k = 53, 5
    y = np.where(np.arange(n) % 3 == 0, 1, -1)
    folds = make_folds(n, k, np.random.default_rng(0), y=y, stratify=stratify, repeats=repeats)
    assert len(folds) == k * repeats
    for r in range(repeats):
        block = folds[r * k:(r + 1) * k]
        vals = np.concatenate([va for _, va in block])
        np.testing.assert_array_equal(np.sort(vals), np.arange(n))
        for tr, va in block:
            assert np.intersect1d(tr, va).size == 0
            assert tr.size + va.size == n
            if stratify:  # 18 positives over 5 folds: 3 or 4 per fold
                assert 3 <= np.sum(y[va] == 1) <= 4


def test_folds_follow_the_generator():
    a = make_folds(40, 4, np.random.default_rng(7))
    b = make_folds(40, 4, np.random.default_rng(7))
    c = make_folds(40, 4, np.random.default_rng(8))
    assert all(np.array_equal(x[1], z[1]) for x, z in zip(a, b))
    assert not all(np.array_equal(x[1], z[1]) for x, z in zip(a, c))


def test_make_folds_rejects_bad_arguments():
    rng = np.random.default_rng(0)
    with pytest.raises(ValueError):
        make_folds(10, 1, rng)
    with pytest.raises(ValueError):
        make_folds(10, 11, rng)
    with pytest.raises(ValueError, match="stratify"):
        make_folds(10, 2, rng, stratify=True)


def _shrunk_mean_errors(y, factors):
    # Toy λ path: predict c·mean(y_train); c=0 is the simplest model.
    def path_errors(train, evaluate):
        pred = np.outer(factors, [y[train].mean()])
        return ((y[evaluate][None, :] - pred) ** 2).mean(axis=1)
    return path_errors


def test_nested_cv_keeps_outer_test_rows_out_of_selection():
    y = np.random.default_rng(1).normal(3.0, 1.0, size=60)
    factors = np.linspace(0, 1, 6)
    inner_calls, inner_fn = [], _shrunk_mean_errors(y, factors)

    def recording(train, evaluate):
        inner_calls.append((train, evaluate))
        return inner_fn(train, evaluate)

    result = nested_cv(60, recording, np.random.default_rng(2), n_outer=4, n_inner=3)
    assert result.outer_errors.shape == (4,)
    # calls come in groups: 3 inner splits then the outer evaluation
    for g in range(4):
        outer_train, outer_test = inner_calls[g * 4 + 3]
        for tr, va in inner_calls[g * 4:g * 4 + 3]:
            assert np.isin(tr, outer_train).all() and np.isin(va, outer_train).all()
            assert not np.isin(np.concatenate([tr, va]), outer_test).any()
    # mean 3, noise 1: no shrinkage wins clearly, so the full-mean column is chosen
    assert np.all(result.chosen_index == len(factors) - 1)
    assert result.mean == pytest.approx(result.outer_errors.mean())


@settings(max_examples=150, deadline=None)
@given(tables, st.data())
def test_failed_columns_are_never_chosen(table, data):
    failed = data.draw(st.lists(st.booleans(), min_size=table.shape[1], max_size=table.shape[1]))
    if all(failed):
        failed[-1] = False
    table = table.copy()
    for j, bad in enumerate(failed):
        if bad:
            table[data.draw(st.integers(0, table.shape[0] - 1)), j] = np.nan
    for rule in ("min", "one_se"):
        assert not failed[choose_lambda_index(table, rule)]


def test_leave_one_out_table_works_as_n_folds():
    # LOO is n-fold CV: a table of per-row squared LOO residuals (n, L) goes straight in.
    # Hand: column means 9.667, 1.167, 1.110; se of column 2 = sqrt(0.8175/3) = 0.522, so
    # the band is 1.632 and column 1 is the simplest inside it.
    residuals = np.array([[3.0, 1.0, 1.1], [2.0, 0.5, 0.4], [4.0, 1.5, 1.4]])
    assert choose_lambda_index(residuals**2, "min") == 2
    assert choose_lambda_index(residuals**2, "one_se") == 1
