"""Extra feature maps: shapes, fit-on-training-rows only, blockwise columns, registry."""
from types import SimpleNamespace

import numpy as np
import pytest
from sklearn.metrics.pairwise import rbf_kernel

from pipeline.features.extra import KernelDictionary, RandomReLU, SplineBasis, blockwise_xt_dot
from pipeline.losses import get_loss
from pipeline.models.sparse.path import fit_l1_path

rng = np.random.default_rng(0)
X = rng.normal(size=(60, 3))
X_new = rng.normal(size=(9, 3))


@pytest.mark.parametrize("make", [lambda: SplineBasis(5, 3), lambda: RandomReLU(40, seed=1),
                                  lambda: KernelDictionary(n_centres=25),
                                  lambda: KernelDictionary(n_centres=10, centres="kmeans")],
                         ids=["spline", "relu", "dict-rows", "dict-kmeans"])
def test_blocks_equal_full_matrix(make):
    t = make().fit(X)
    full = t.transform(X_new)
    assert full.shape == (9, t.n_columns()) == (9, len(t.get_feature_names_out(["a", "b", "c"])))
    blocks = np.hstack([b for _, b in t.iter_blocks(X_new, block_cols=7)])
    np.testing.assert_array_equal(blocks, full)
    u = rng.normal(size=9)
    np.testing.assert_allclose(blockwise_xt_dot(t, X_new, u, block_cols=4), full.T @ u, rtol=1e-12)


def test_kernel_dictionary_matches_rbf_kernel():
    # reference library: scikit-learn rbf_kernel with gamma = 1/(2 sigma^2)
    t = KernelDictionary(kernel="rbf", bandwidth=1.3).fit(X)
    np.testing.assert_allclose(t.transform(X_new), rbf_kernel(X_new, X, gamma=1 / (2 * 1.3**2)), rtol=1e-10)


def test_spline_basis_is_partition_of_unity_inside_range():
    # B-splines sum to one at every point inside the knot range (de Boor, A Practical
    # Guide to Splines, B-spline property; value from memory)
    t = SplineBasis(6, 3).fit(X[:, :1])
    inside = np.linspace(X[:, 0].min(), X[:, 0].max(), 50)[:, None]
    np.testing.assert_allclose(t.transform(inside).sum(1), 1.0, atol=1e-12)


def test_random_relu_is_seeded_and_nonnegative():
    a = RandomReLU(30, seed=3).fit(X).transform(X_new)
    b = RandomReLU(30, seed=3).fit(X).transform(X_new)
    np.testing.assert_array_equal(a, b)
    assert a.min() >= 0 and not np.array_equal(a, RandomReLU(30, seed=4).fit(X).transform(X_new))


def test_registered_with_feature_builder():
    from pipeline.features import MAPS, FeatureBuilder

    assert {"spline", "random_relu", "kernel_dictionary"} <= set(MAPS)
    maps = (SimpleNamespace(kind="spline", n_knots=4, degree=2),
            SimpleNamespace(kind="random_relu", n_components=20))
    Z = FeatureBuilder(maps=maps, seed=1).fit(X).transform(X_new)
    assert Z.shape[0] == 9 and Z.shape[1] == 3 * (4 + 2 - 1) + 20


def test_l1_on_kernel_dictionary_fits_nonlinear_signal():
    x = np.linspace(-3, 3, 120)[:, None]
    y = np.sin(2 * x[:, 0]) + 0.1 * np.random.default_rng(2).normal(size=120)
    Phi = KernelDictionary(bandwidth=0.5).fit(x).transform(x)
    Phi = (Phi - Phi.mean(0)) / Phi.std(0)
    path = fit_l1_path(Phi, y, get_loss("squared"), [1e-3])
    resid = y - (Phi @ path.coef[0] + path.intercept[0])
    assert path.converged[0] and np.mean(resid**2) < 0.03 and path.n_nonzero[0] < 120
