import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from pipeline.selection import (L2_CRITERIA, RULE_TABLE, RULES, choose_lambda_index, cv_summary, make_folds,
                                nested_estimate, nested_splits, random_test_rows, shuffled_folds)
from pipeline import selection

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


def test_least_error_and_one_standard_error_rules_hand_table():
    assert choose_lambda_index(HAND_TABLE, "least_error") == 3
    assert choose_lambda_index(HAND_TABLE, "one_standard_error") == 2


def test_nan_columns_are_skipped():
    table = HAND_TABLE.copy()
    table[1, 2] = np.nan  # failed fit at column 2: col1 is outside the band, so one_standard_error falls to col3
    assert choose_lambda_index(table, "one_standard_error") == 3
    table[0, 3] = np.nan  # the best column failed too: col4 (mean 2.4) is the least valid mean left
    assert choose_lambda_index(table, "least_error") == 4


def test_all_nan_and_unknown_rule_raise():
    with pytest.raises(ValueError, match="nothing to choose"):
        choose_lambda_index(np.full((3, 4), np.nan))
    with pytest.raises(ValueError, match="unknown selection rule"):
        choose_lambda_index(HAND_TABLE, "two_se")


tables = arrays(np.float64, st.tuples(st.integers(2, 6), st.integers(1, 8)),
                elements=st.floats(0, 100, allow_nan=False))


@settings(max_examples=200, deadline=None)
@given(tables)
def test_one_standard_error_is_never_more_complex_than_least_error(table):
    i_min = choose_lambda_index(table, "least_error")
    i_se = choose_lambda_index(table, "one_standard_error")
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


# Reference: scikit-learn 1.x, sklearn.model_selection.KFold(shuffle=True), RepeatedKFold and
# train_test_split (int test_size) from the same int seed. Our numpy versions must give the very same rows,
# so runs made before they replaced the library calls keep their folds and test rows bit for bit.
@settings(max_examples=60, deadline=None)
@given(n=st.integers(2, 300), k=st.integers(2, 12), seed=st.integers(0, 2**31 - 2), repeats=st.integers(1, 3))
def test_shuffled_folds_are_scikit_learns_kfold(n, k, seed, repeats):
    from sklearn.model_selection import KFold, RepeatedKFold

    k = min(k, n)
    splitter = (KFold(k, shuffle=True, random_state=seed) if repeats == 1 else
                RepeatedKFold(n_splits=k, n_repeats=repeats, random_state=seed))
    expected = list(splitter.split(np.zeros((n, 1))))
    got = shuffled_folds(n, k, seed, repeats)
    assert len(got) == len(expected)
    for (tr, va), (etr, eva) in zip(got, expected):
        assert tr.dtype == etr.dtype and va.dtype == eva.dtype
        np.testing.assert_array_equal(tr, etr)
        np.testing.assert_array_equal(va, eva)


@settings(max_examples=60, deadline=None)
@given(n=st.integers(2, 500), share=st.floats(0.01, 0.99), seed=st.integers(0, 2**31 - 2))
def test_random_test_rows_are_scikit_learns_train_test_split(n, share, seed):
    from sklearn.model_selection import train_test_split

    n_test = min(n - 1, max(1, int(round(share * n))))
    expected = train_test_split(np.arange(n), test_size=n_test, random_state=seed)
    for got, want in zip(random_test_rows(n, n_test, seed), expected):
        np.testing.assert_array_equal(got, want)
    tr, te = selection.test_split(n, n_test / n, seed)
    np.testing.assert_array_equal(te, np.sort(expected[1]))
    np.testing.assert_array_equal(tr, np.sort(expected[0]))


def test_random_test_rows_refuse_an_empty_side():
    with pytest.raises(ValueError, match="no training row"):
        random_test_rows(10, 10, 0)


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
    """The nested splits the pipeline runs (selection.nested: true): inner folds inside the outer
    training rows only, every training row in exactly one outer test fold."""
    y = np.random.default_rng(1).normal(3.0, 1.0, size=60)
    factors = np.linspace(0, 1, 6)
    path_errors = _shrunk_mean_errors(y, factors)
    train_rows = np.arange(100, 160)          # positions into a larger data set, as in the runner
    y_all = np.concatenate([np.zeros(100), y])
    splits = nested_splits(train_rows, y_all[train_rows], 4, np.random.default_rng(2), stratify=False)
    assert [name for name, _, _ in splits] == [f"outer{o}.{s}" for o in range(4)
                                                 for s in ("fold0", "fold1", "fold2", "fold3", "final")]
    by_name = {name: (tr, ev) for name, tr, ev in splits}
    outer_tests = []
    for o in range(4):
        outer_train, outer_test = by_name[f"outer{o}.final"]
        outer_tests.append(outer_test)
        assert not np.isin(outer_train, outer_test).any()
        for k in range(4):
            tr, va = by_name[f"outer{o}.fold{k}"]
            assert np.isin(tr, outer_train).all() and np.isin(va, outer_train).all()
            assert not np.isin(np.concatenate([tr, va]), outer_test).any()
    np.testing.assert_array_equal(np.sort(np.concatenate(outer_tests)), train_rows)
    losses = {name: path_errors(tr - 100, ev - 100) for name, tr, ev in splits}
    result = nested_estimate(losses, 4, "least_error")
    # mean 3, noise 1: no shrinkage wins clearly, so the full-mean column is chosen in every outer fold
    np.testing.assert_allclose(result["outer"], [losses[f"outer{o}.final"][-1] for o in range(4)])
    assert result["mean"] == pytest.approx(np.mean(result["outer"]))
    assert result["se"] == pytest.approx(np.std(result["outer"], ddof=1) / 2)


def test_rule_and_criterion_tables_name_what_config_allows():
    assert RULES == ("least_error", "one_standard_error") and set(RULE_TABLE) == set(RULES)
    assert all(rule.description for rule in RULE_TABLE.values())
    assert tuple(L2_CRITERIA) == ("cv", "loo", "gcv", "gcv_classical")
    assert all(c.description for c in L2_CRITERIA.values())


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
    for rule in ("least_error", "one_standard_error"):
        assert not failed[choose_lambda_index(table, rule)]


def test_leave_one_out_table_works_as_n_folds():
    # LOO is n-fold CV: a table of per-row squared LOO residuals (n, L) goes straight in.
    # Hand: column means 9.667, 1.167, 1.110; se of column 2 = sqrt(0.8175/3) = 0.522, so
    # the band is 1.632 and column 1 is the simplest inside it.
    residuals = np.array([[3.0, 1.0, 1.1], [2.0, 0.5, 0.4], [4.0, 1.5, 1.4]])
    assert choose_lambda_index(residuals**2, "least_error") == 2
    assert choose_lambda_index(residuals**2, "one_standard_error") == 1


def test_nested_cv_through_the_runner():
    """selection.nested: true runs the nested splits as fit tasks and reports the outer losses."""
    import pathlib

    import yaml

    from pipeline.config import parse_config
    from pipeline.runner import run_experiment

    config = yaml.safe_load((pathlib.Path(__file__).parent / "configs" / "tiny.yaml").read_text())
    config.update(selection={"cv_folds": 3, "nested": True}, stability={"enabled": False},
                  cache={"enabled": False})
    result = run_experiment(parse_config(config), None, progress=False)
    for r in result.results:
        assert len(r.nested["outer"]) == 3 and np.isfinite(r.nested["outer"]).all()
        assert r.nested["mean"] == pytest.approx(np.mean(r.nested["outer"]))
