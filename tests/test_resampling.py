"""Resampling schemes and the resampling stage."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.linear_model import Lasso

from pipeline.stability import held_out_rows, in_fit_mask, resample_indices


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


def _resample_tasks(X, y, resamples, lambdas, selection_only=True):
    """The pipeline's resample fit tasks (as runner.plan_tasks makes them) on an identity feature map."""
    from pipeline.features.basic import IdentityMap
    from pipeline.fitting import FitTask, Shared

    options = {"tol": 1e-7, "solver": "auto", "alpha": 1.0, "n_lambdas": len(lambdas), "lambda_ratio": 0.1}
    shared = Shared(X=X, y=y, task="regression", feature_maps=(IdentityMap(kind="identity"),), feature_seed=0,
                    input_names=tuple(f"x{j}" for j in range(X.shape[1])), family_options={"l1": options})
    tasks = [FitTask(split=f"resample{m}", family="l1", loss_name="squared", loss_params=(), loss_label="squared",
                     train_idx=rows, eval_idx=np.setdiff1d(np.arange(len(y)), rows), lambdas=np.asarray(lambdas),
                     selection_only=selection_only) for m, rows in enumerate(resamples)]
    return shared, tasks


def _problem():
    rng = np.random.default_rng(1)
    X = rng.standard_normal((40, 6))
    y = 2 * X[:, 0] - X[:, 1] + 0.3 * rng.standard_normal(40)
    return X, y


def test_resample_fit_tasks_match_direct_fits():
    from pipeline.execution import run_tasks
    from pipeline.fitting import run_fit

    X, y = _problem()
    resamples = resample_indices(40, "subsample", 4, rng=3)
    shared, tasks = _resample_tasks(X, y, resamples, [0.5, 0.05])
    out = run_tasks(run_fit, tasks, shared=shared)
    for o, rows in zip(out, resamples):
        assert o.coef.shape == (2, 6) and o.certificate_kind == "kkt_violation" and o.converged.all()
        assert o.feature_names == ()    # only the final fit carries them (the runner reads them there)
        # reference: scikit-learn Lasso(alpha=λ) on the task's scale (columns standardised on the resample's
        # rows, target centred and divided by its sd; both minimise (1/2n)|t − Zw|² + λ|w|₁), mapped back
        mean, sd = X[rows].mean(axis=0), X[rows].std(axis=0)
        ybar, ysd = y[rows].mean(), y[rows].std()
        ref = Lasso(alpha=0.05, tol=1e-12, max_iter=100_000).fit((X[rows] - mean) / sd, (y[rows] - ybar) / ysd)
        np.testing.assert_allclose(o.coef[1], ref.coef_ * ysd / sd, atol=1e-6)
        held_out = np.setdiff1d(np.arange(40), rows)
        np.testing.assert_allclose(o.eval_pred[1], ybar + ysd * ref.predict((X[held_out] - mean) / sd), atol=1e-5)


def test_resample_fit_tasks_identical_across_backends():
    from pipeline.execution import run_tasks
    from pipeline.fitting import run_fit

    X, y = _problem()
    shared, tasks = _resample_tasks(X, y, resample_indices(40, "complementary_pairs", 4, rng=4), [0.5, 0.1, 0.05])
    local = run_tasks(run_fit, tasks, shared=shared)
    processes = run_tasks(run_fit, tasks, backend="processes", n_jobs=2, shared=shared)
    for a, b in zip(local, processes):
        for name in ("coef", "intercept", "eval_pred", "certificate"):
            assert getattr(a, name).tobytes() == getattr(b, name).tobytes(), name


def test_selection_only_probabilities_equal_exact_fits_on_the_benchmark_problem():
    # the problem of benchmarks/bench_stability.py (n = 400, p = 4000, 30 λ down to 5 % of λ_max), 12 subsamples
    from benchmarks.bench_stability import problem, stage_tasks
    from pipeline.execution import run_tasks
    from pipeline.fitting import run_fit
    from pipeline.stability import selection_probabilities

    X, y = problem()
    shared, fast, _, _ = stage_tasks(X, y, seed=2, m=12)
    _, exact, _, _ = stage_tasks(X, y, seed=2, m=12, selection_only=False)
    a, b = run_tasks(run_fit, fast, shared=shared), run_tasks(run_fit, exact, shared=shared)
    assert all(o.certificate_kind == "kkt_violation" and o.converged.all() for o in a)
    assert all(o.certificate_kind == "duality_gap" and o.converged.all() for o in b)
    for o, e in zip(a, b):
        np.testing.assert_array_equal(np.sign(o.coef), np.sign(e.coef))     # supports and signs
    pa = selection_probabilities(np.stack([o.coef for o in a]))
    pb = selection_probabilities(np.stack([o.coef for o in b]))
    np.testing.assert_array_equal(pa, pb)


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


def test_a_run_fits_its_sparse_resamples_for_selection_only(store):
    # the session's `penduel run` of tests/configs/tiny.yaml with 10 resamples: the runner gives resample fit
    # tasks the sparse family's selection-only mode (certificate: the KKT violation on every column); the CV
    # and final fits keep the duality gap. Read back from the run's cache of finished fit tasks.
    from pipeline.cache import TaskCache
    from pipeline.fitting import FitOutcome

    cache_dir = store["cwd"] / ".penduel-cache"
    cache = TaskCache(cache_dir, FitOutcome)
    sparse = [o for o in (cache.get(p.stem) for p in cache_dir.rglob("*.npz")) if o.family == "l1"]
    resampled = [o for o in sparse if o.split.startswith("resample")]
    assert len(resampled) >= 10 and len(sparse) > len(resampled)
    for o in sparse:
        expected = "kkt_violation" if o.split.startswith("resample") else "duality_gap"
        assert o.certificate_kind == expected and o.converged.all(), (o.split, o.certificate_kind)
