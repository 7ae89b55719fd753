"""Loaders and scenarios."""
import numpy as np
import pandas as pd
import pytest

from pipeline.config import parse_config
from pipeline.data import DataError, load_dataset
from pipeline.data.loaders import frame_to_dataset


def _spec(data, losses=("squared",)):
    return parse_config({"name": "t", "data": data, "losses": list(losses)})


def test_csv_and_parquet_give_the_same_dataset(tmp_path):
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(30, 4)), columns=list("abcd"))
    frame["y"] = frame["a"] * 2 + rng.normal(size=30)
    frame.to_csv(tmp_path / "d.csv", index=False)
    frame.to_parquet(tmp_path / "d.parquet")
    a = load_dataset(_spec({"kind": "csv", "path": "d.csv", "target": "y"}).data, tmp_path, "regression")
    b = load_dataset(_spec({"kind": "parquet", "path": "d.parquet", "target": "y"}).data, tmp_path, "regression")
    assert a.feature_names == ("a", "b", "c", "d")
    np.testing.assert_allclose(a.X, b.X)
    assert a.content_hash() == b.content_hash()


def test_bundled_sets():
    # Sizes of the open datasets as published (diabetes: Efron et al. 2004; breast cancer: UCI WDBC).
    d = load_dataset(_spec({"kind": "bundled", "name": "diabetes"}).data, None, "regression")
    assert d.X.shape == (442, 10)
    b = load_dataset(_spec({"kind": "bundled", "name": "breast_cancer"}, ["logistic"]).data, None,
                     "classification")
    assert b.X.shape == (569, 30) and set(np.unique(b.y)) == {-1.0, 1.0}
    assert (b.y < 0).sum() == 212  # 212 malignant, 357 benign (UCI WDBC description)


def test_spectral_bands_truth_and_correlation():
    spec = _spec({"kind": "scenario", "name": "spectral_bands", "n_samples": 400, "n_features": 50,
                  "n_informative": 4, "correlation": 0.9})
    d = load_dataset(spec.data, None, "regression")
    assert len(d.truth.support) == 4
    r = np.corrcoef(d.X[:, 10], d.X[:, 11])[0, 1]
    assert 0.85 < r < 0.95
    # The recorded truth reproduces the noiseless signal: residual variance ≈ noise variance (1.0).
    resid = d.y - d.X @ d.truth.coefficients - d.truth.intercept
    assert 0.8 < resid.var() < 1.25


def test_scenario_is_reproducible_and_seeded():
    src = _spec({"kind": "scenario", "name": "binary_blobs", "seed": 4}, ["logistic"]).data
    a, b = load_dataset(src, None, "classification"), load_dataset(src, None, "classification")
    assert a.content_hash() == b.content_hash()


def test_categorical_columns_are_one_hot_encoded_with_a_note():
    frame = pd.DataFrame({"site": ["n", "s", "e", "n"] * 5, "x": np.arange(20.0), "y": np.arange(20.0) % 7})
    d = frame_to_dataset(frame, "y", "regression", "test.csv")
    assert d.feature_names == ("site=n", "site=s", "x")
    assert any("one-hot" in n for n in d.notes)


def test_interleaved_numeric_text_and_boolean_columns_keep_their_order_and_values():
    # numeric columns are converted as one block: order and values must be those of the table, column by column
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"a": rng.normal(size=12), "site": ["n", "s", "e"] * 4, "flag": [True, False] * 6,
                          "y": rng.normal(size=12), "b": np.arange(12), "kind": ["u", "v"] * 6,
                          "c": rng.normal(size=12)})
    d = frame_to_dataset(frame, "y", "regression", "t.csv")
    assert d.feature_names == ("a", "site=n", "site=s", "flag", "b", "kind=v", "c")
    expected = np.column_stack([frame.a, frame.site == "n", frame.site == "s", frame.flag, frame.b,
                                frame.kind == "v", frame.c]).astype(float)
    assert np.array_equal(d.X, expected) and np.array_equal(d.y, frame.y.to_numpy())
    assert [c.boolean for c in d.inputs] == [False, False, True, False, False, False]


def test_constant_columns_dropped_with_note():
    frame = pd.DataFrame({"c": [1.0] * 10, "x": np.arange(10.0), "y": np.arange(10.0) % 4})
    d = frame_to_dataset(frame, "y", "regression", "t.csv")
    assert d.feature_names == ("x",) and any("constant" in n for n in d.notes)


@pytest.mark.parametrize("frame, target, task, text", [
    (pd.DataFrame({"x": [1.0, 2, 3], "y": [1.0, 2, 3]}), "yy", "regression", "column 'yy' is not in"),
    (pd.DataFrame({"x": [1.0, np.nan, 3], "y": [1.0, 2, 3]}), "y", "regression", "feature column 'x'"),
    (pd.DataFrame({"x": [1.0, np.inf, 3], "y": [1.0, 2, 3]}), "y", "regression", "feature column 'x'"),
    (pd.DataFrame({"x": [1.0, 2, 3], "y": ["a", "b", "c"]}), "y", "regression", "numeric target"),
    (pd.DataFrame({"x": [1.0, 2, 3], "y": ["a", "a", "a"]}), "y", "classification", "exactly two classes"),
])
def test_bad_frames_are_refused_clearly(frame, target, task, text):
    with pytest.raises(DataError, match=text):
        frame_to_dataset(frame, target, task, "t.csv")
