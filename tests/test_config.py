"""Config models: defaults, strictness, clear messages."""
import pytest

from pipeline.config import ConfigError, load_config, parse_config

BASE = {"name": "t", "data": {"kind": "scenario", "name": "spectral_bands"}}


def test_defaults_are_filled_in():
    spec = parse_config(dict(BASE))
    assert spec.selection.cv_folds == 5 and spec.losses[0].name == "squared"
    assert spec.tracking.uri == "sqlite:///mlflow.db" and spec.task == "regression"


def test_loss_strings_and_mappings_both_accepted():
    spec = parse_config({**BASE, "losses": ["squared", {"name": "huber", "delta": 2.0}]})
    assert [l.label for l in spec.losses] == ["squared", "huber_delta2"]


@pytest.mark.parametrize("patch, culprit", [
    ({"losses": ["squard"]}, "losses[1].name"),
    ({"features": {"maps": [{"kind": "identity"}, {"kind": "spline", "n_knots": 1}]}}, "field 'features.maps[2].n_knots'"),
    ({"data": {"kind": "scenario", "name": "spectral_bands", "n_samples": 3}}, "field 'data.n_samples'"),
    ({"families": {"l2": {"bandwidth": -1}}}, "field 'families.l2.bandwidth'"),
    ({"features": {"maps": [{"kind": "random_fourier", "bandwidth": 0}]}}, "field 'features.maps[1].bandwidth'"),
    ({"selection": {"cv_folds": 1}}, "selection.cv_folds"),
    ({"families": {"l1": {"path": {"smallest_share": -0.5}}}}, "families.l1.path.smallest_share"),
    ({"families": {"l1": {"path": {"points": 0}}}}, "families.l1.path.points"),
    ({"colour": "red"}, "colour"),
    ({"losses": ["squared", "logistic"]}, "mix regression losses"),
    ({"data": {"kind": "csv", "path": "x.csv"}}, "data.target"),
])
def test_bad_values_name_the_field(patch, culprit):
    with pytest.raises(ConfigError) as err:
        parse_config({**BASE, **patch})
    assert culprit in str(err.value)
    assert "\n" not in str(err.value)


def test_unknown_loss_suggests_closest():
    with pytest.raises(ConfigError, match="Did you mean 'squared'"):
        parse_config({**BASE, "losses": ["squard"]})


def test_yaml_syntax_error_gives_line_and_column(tmp_path):
    bad = tmp_path / "c.yaml"
    bad.write_text("name: x\ndata: {kind: scenario\n  name: [\n")
    with pytest.raises(ConfigError, match=r"line \d+, column \d+"):
        load_config(bad)


def test_yaml_is_loaded_safely(tmp_path):
    bad = tmp_path / "c.yaml"
    bad.write_text("name: !!python/object/apply:os.system ['echo hacked']\n")
    with pytest.raises(ConfigError):
        load_config(bad)


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="not found"):
        load_config(tmp_path / "none.yaml")


def test_config_hash_changes_with_settings():
    a = parse_config(dict(BASE))
    b = parse_config({**BASE, "seed": 1})
    assert a.config_hash() != b.config_hash() and a.config_hash() == parse_config(dict(BASE)).config_hash()
