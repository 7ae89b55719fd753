"""Feature maps: fitted on training rows only; coefficients map back to the output scale."""
import numpy as np

from pipeline.config import parse_config
from pipeline.features import FeatureBuilder, output_width


def _maps(*maps):
    return parse_config({"name": "t", "data": {"kind": "scenario", "name": "spectral_bands"},
                         "features": {"maps": list(maps)}}).features.maps


def test_widths_and_names():
    maps = _maps({"kind": "identity"}, {"kind": "polynomial", "degree": 2}, {"kind": "random_fourier", "n_components": 7})
    X = np.random.default_rng(0).normal(size=(20, 3))
    fb = FeatureBuilder(maps, seed=1, input_names=("a", "b", "c")).fit(X)
    Z = fb.transform(X)
    assert Z.shape == (20, 3 + 6 + 7) == (20, sum(output_width(m, 3) for m in maps))
    names = list(fb.get_feature_names_out())
    assert names[:3] == ["a", "b", "c"] and "a×b" in names and "a^2" in names
    np.testing.assert_allclose(Z.mean(0), 0, atol=1e-10)


def test_fitted_on_training_rows_only():
    maps = _maps({"kind": "identity"})
    rng = np.random.default_rng(1)
    train, test = rng.normal(size=(30, 2)), rng.normal(loc=5.0, size=(10, 2))
    fb = FeatureBuilder(maps).fit(train)
    np.testing.assert_allclose(fb.output_scaler_.mean_, train.mean(0))
    assert fb.transform(test).mean() > 3  # test rows are not re-centred on themselves


def test_coefficients_back_to_original_columns():
    maps = _maps({"kind": "identity"})
    rng = np.random.default_rng(2)
    X = rng.normal(loc=3.0, scale=[1.0, 10.0], size=(50, 2))
    fb = FeatureBuilder(maps).fit(X)
    Z = fb.transform(X)
    w_z, b_z = np.array([0.5, -2.0]), 1.5
    w, b = fb.to_output_scale(w_z, b_z)
    np.testing.assert_allclose(Z @ w_z + b_z, X @ w + b)


def test_random_fourier_is_seeded():
    maps = _maps({"kind": "random_fourier", "n_components": 5})
    X = np.random.default_rng(3).normal(size=(15, 4))
    a = FeatureBuilder(maps, seed=9).fit(X).transform(X)
    b = FeatureBuilder(maps, seed=9).fit(X).transform(X)
    c = FeatureBuilder(maps, seed=10).fit(X).transform(X)
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)


def test_extra_maps_are_configurable_and_their_width_is_known_beforehand():
    maps = _maps({"kind": "spline", "n_knots": 4}, {"kind": "random_relu", "n_components": 9},
                 {"kind": "kernel_dictionary", "n_centres": 5, "centres": "kmeans"})
    X = np.random.default_rng(4).normal(size=(40, 3))
    Z = FeatureBuilder(maps, seed=2).fit(X).transform(X)
    assert Z.shape == (40, sum(output_width(m, 3, 40) for m in maps)) == (40, 3 * 6 + 9 + 5)


def test_standardiser_fit_transform_is_fit_then_transform_bit_for_bit():
    # the one-pass fit_transform (used by every fit) must give the bits of fit then transform, and the
    # plain formula (X − mean) / sd with numpy's population variance; a constant column maps to zeros
    from pipeline.features.builder import Standardiser

    rng = np.random.default_rng(5)
    X = rng.standard_normal((57, 40)) * rng.uniform(0.1, 50, 40) + rng.uniform(-1e3, 1e3, 40)
    X[:, 3] = 7.0
    one_pass = Standardiser().fit_transform(X)
    two_pass = Standardiser().fit(X).transform(X)
    assert one_pass.tobytes() == two_pass.tobytes()
    scale = X.std(axis=0)
    scale[3] = 1.0
    assert one_pass.tobytes() == ((X - X.mean(axis=0)) / scale).tobytes()
    assert np.all(one_pass[:, 3] == 0.0)
