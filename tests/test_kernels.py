"""Kernels, blockwise Gram, median bandwidth, PSD check, random Fourier features."""
import warnings

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy.spatial.distance import cdist
from sklearn.gaussian_process.kernels import Matern
from sklearn.metrics.pairwise import laplacian_kernel, linear_kernel, polynomial_kernel, rbf_kernel

from pipeline.features import FeatureBuilder
from pipeline.features.basic import RandomFourier, RandomFourierMap, random_fourier_blocks
from pipeline.kernels import (KERNEL_NAMES, KERNELS, KernelNotPSDError, feature_gram, gram, median_bandwidth,
                              psd_check, resolve_params)

RNG = np.random.default_rng(0)
X = RNG.normal(size=(37, 4))
Z = RNG.normal(size=(23, 4))


# Reference: scikit-learn pairwise kernels. Conversions: rbf γ = 1/(2ℓ²), laplacian γ = 1/ℓ,
# polynomial γ = scale; Matérn from sklearn.gaussian_process.kernels.Matern(length_scale=ℓ, nu).
@pytest.mark.parametrize("kernel,params,reference", [
    ("linear", {}, lambda A, B: linear_kernel(A, B)),
    ("polynomial", {"degree": 2, "coef0": 0.5, "scale": 0.3},
     lambda A, B: polynomial_kernel(A, B, degree=2, gamma=0.3, coef0=0.5)),
    ("rbf", {"bandwidth": 1.3}, lambda A, B: rbf_kernel(A, B, gamma=1 / (2 * 1.3**2))),
    ("laplacian", {"bandwidth": 2.5}, lambda A, B: laplacian_kernel(A, B, gamma=1 / 2.5)),
    ("matern12", {"bandwidth": 0.9}, lambda A, B: Matern(length_scale=0.9, nu=0.5)(A, B)),
    ("matern32", {"bandwidth": 0.9}, lambda A, B: Matern(length_scale=0.9, nu=1.5)(A, B)),
    ("matern52", {"bandwidth": 0.9}, lambda A, B: Matern(length_scale=0.9, nu=2.5)(A, B)),
])
def test_kernels_match_reference_library(kernel, params, reference):
    np.testing.assert_allclose(gram(X, Z, kernel, block_rows=5, **params), reference(X, Z),
                               rtol=1e-10, atol=1e-12)
    K = gram(X, kernel=kernel, block_rows=8, **params)
    np.testing.assert_allclose(K, reference(X, X), rtol=1e-10, atol=1e-12)
    assert np.array_equal(K, K.T)


def test_every_named_kernel_gives_a_psd_gram():
    for kernel in KERNEL_NAMES:
        report = psd_check(gram(X, kernel=kernel))
        assert report.passed and report.max_eigenvalue > 0, kernel


def test_median_bandwidth_is_the_median_distance_and_used_by_default():
    # Definition: median of the nonzero pairwise Euclidean distances (common practice).
    d = cdist(X, X)[np.triu_indices(len(X), 1)]
    assert median_bandwidth(X) == pytest.approx(np.median(d), rel=1e-12)
    assert resolve_params(X, "rbf")["bandwidth"] == pytest.approx(np.median(d), rel=1e-12)
    d1 = cdist(X, X, "cityblock")[np.triu_indices(len(X), 1)]
    assert resolve_params(X, "laplacian")["bandwidth"] == pytest.approx(np.median(d1), rel=1e-12)
    # Cross Gram takes its default from the training side Z, matching gram(Z).
    np.testing.assert_allclose(gram(X, Z, "rbf"), gram(X, Z, "rbf", bandwidth=median_bandwidth(Z)))


def test_median_bandwidth_subsample_is_seeded():
    big = np.random.default_rng(1).normal(size=(3000, 2))
    assert median_bandwidth(big, max_rows=500) == median_bandwidth(big, max_rows=500)
    # x − z ~ N(0, 2I) in 2-d, so |x − z| is Rayleigh(σ = √2) with median σ√(2 ln 2) = √(4 ln 2)
    # (Rayleigh distribution, standard handbook formula).
    assert median_bandwidth(big, max_rows=500) == pytest.approx(np.sqrt(4 * np.log(2)), rel=0.05)


def test_psd_check_raises_with_the_value_and_warns_on_request():
    A = np.array([[1.0, 2.0], [2.0, 1.0]])  # eigenvalues −1 and 3
    with pytest.raises(KernelNotPSDError, match=r"-3\.333e-01"):
        psd_check(A)
    with pytest.warns(RuntimeWarning, match="not positive semidefinite"):
        report = psd_check(A, on_fail="warn")
    assert report.min_eigenvalue == pytest.approx(-1.0) and report.ratio == pytest.approx(-1 / 3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert not psd_check(A, on_fail="ignore").passed
    assert psd_check(A, tol=0.5).passed  # a user tolerance


def test_bad_kernel_names_and_parameters_are_refused():
    with pytest.raises(ValueError, match="unknown kernel"):
        gram(X, kernel="gaussian-ish")
    with pytest.raises(ValueError, match="takes no parameter"):
        gram(X, kernel="rbf", degree=2)
    with pytest.raises(ValueError, match="positive"):
        gram(X, kernel="matern32", bandwidth=0.0)


def test_feature_gram_in_blocks_equals_full_product():
    Phi_cols = RNG.normal(size=(4, 50))
    blocks = [lambda A, s=s: np.tanh(A @ Phi_cols[:, s:s + 10]) for s in range(0, 50, 10)]
    full_x, full_z = np.tanh(X @ Phi_cols), np.tanh(Z @ Phi_cols)
    K, K_cross = feature_gram(blocks, X, Z)
    np.testing.assert_allclose(K, full_x @ full_x.T, rtol=1e-12)
    np.testing.assert_allclose(K_cross, full_z @ full_x.T, rtol=1e-12)


def test_random_fourier_error_shrinks_like_one_over_sqrt_d():
    # Rahimi & Recht 2007 (NIPS), random features for the Gaussian kernel: each entry of
    # K̂ is a mean of D i.i.d. bounded terms, so ‖K̂ − K‖_F falls as D^(−1/2).
    Xs = np.random.default_rng(2).normal(size=(60, 3))
    K = gram(Xs, kernel="rbf", bandwidth=1.5)
    sizes = np.array([500, 1000, 2000, 5000, 10000, 20000])
    errors = []
    for D in sizes:
        errs = [np.linalg.norm(feature_gram(random_fourier_blocks(3, D, 1.5, seed=s, block_size=4000),
                                            Xs) - K) for s in range(4)]
        errors.append(np.mean(errs))
    slope = np.polyfit(np.log(sizes), np.log(errors), 1)[0]
    assert -0.6 < slope < -0.4, slope


def test_random_fourier_blocks_do_not_depend_on_evaluation_order():
    blocks = random_fourier_blocks(4, 25, 1.0, seed=7, block_size=10)
    assert [b(X).shape[1] for b in blocks] == [10, 10, 5]
    first = blocks[1](X)
    blocks[0](X)
    np.testing.assert_array_equal(blocks[1](X), first)


def test_random_fourier_map_is_the_blockwise_features():
    # one implementation: the feature map's columns are exactly the seeded blocks, and its
    # default bandwidth is the same median distance the distance kernels use
    Xs = np.random.default_rng(5).normal(size=(30, 4))
    t = RandomFourier(n_components=12, seed=3).fit(Xs)
    assert t.bandwidth_ == median_bandwidth(Xs)
    blocks = random_fourier_blocks(4, 12, median_bandwidth(Xs), seed=3)
    np.testing.assert_array_equal(t.transform(Xs), np.hstack([b(Xs) for b in blocks]))
    builder = FeatureBuilder((RandomFourierMap(kind="random_fourier", n_components=12),), seed=3).fit(Xs)
    assert builder.transform(Xs).shape == (30, 12)


def test_only_the_linear_kernel_has_feature_weights():
    assert [name for name, k in KERNELS.items() if k.has_feature_weights] == ["linear"]
    assert KERNELS["polynomial"].params == ("degree", "coef0", "scale") and KERNELS["linear"].params == ()


@settings(max_examples=30, deadline=None)
@given(kernel=st.sampled_from(KERNEL_NAMES), rows=st.integers(1, 40), seed=st.integers(0, 10_000))
def test_block_size_never_changes_the_gram(kernel, rows, seed):
    A = np.random.default_rng(seed).normal(size=(rows, 3))
    params = {"bandwidth": 1.0} if kernel not in ("linear", "polynomial") else {}
    blocked, whole = gram(A, Z[:, :3], kernel, block_rows=3, **params), gram(A, Z[:, :3], kernel, block_rows=1000,
                                                                               **params)
    # BLAS may round xᵀz differently for blocks of different shapes: an entry where scale·xᵀz + coef0 nearly
    # cancels keeps an error of the size of the operands, not of the entry, hence the absolute floor
    np.testing.assert_allclose(blocked, whole, rtol=1e-13, atol=1e-13 * np.abs(whole).max())
