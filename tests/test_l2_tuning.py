"""Kernel hyperparameters chosen with λ by exact LOO."""
import numpy as np
import pytest

from pipeline.kernels import gram
from pipeline.models.l2 import fit_l2_path, l2_lambda_grid
from pipeline.models.l2_tuning import choose_kernel_by_loo


def test_choice_is_the_joint_loo_minimiser_over_candidates_and_grid():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(120, 2))
    y = np.sin(3 * X[:, 0]) + 0.1 * rng.normal(size=120)
    cands = [{"bandwidth": b} for b in (0.1, 0.5, 2.0, 8.0)]
    choice = choose_kernel_by_loo(X, y, "rbf", cands, n_lambdas=12)
    brute = []
    for c in cands:
        K = gram(X, kernel="rbf", **c)
        path = fit_l2_path(K, y, "squared", l2_lambda_grid(K, 12))
        brute.append((np.nanmin(path.loo_error), c["bandwidth"]))
    assert choice.params["bandwidth"] == min(brute)[1]
    assert choice.loo_error == pytest.approx(min(brute)[0], rel=1e-10)
    assert len(choice.table) == 4
    # A wiggly target: the widest candidate must lose to a moderate one.
    assert choice.params["bandwidth"] < 8.0


def test_empty_candidate_list_is_refused():
    with pytest.raises(ValueError, match="at least one"):
        choose_kernel_by_loo(np.zeros((5, 1)), np.zeros(5), "rbf", [])
