"""Registries as data: config choices are the registry keys, and a new loss or kernel is one
registration that flows through `penduel validate` and `penduel run`.

The toy entries are registered in a subprocess the test starts, so the global tables of this
test session stay as shipped.
"""
import shutil
import subprocess
import sys
import textwrap
import typing

import pytest

from pipeline import config
from pipeline.data import BUNDLED, SCENARIOS
from pipeline.execution import BACKENDS
from pipeline.features import MAPS
from pipeline.kernels import KERNELS
from pipeline.losses import LOSSES, all_loss_params, loss_names

from .conftest import ROOT, empty_store


def _choices(model, field):
    return typing.get_args(model.model_fields[field].annotation)


def test_config_choice_lists_are_the_registry_keys():
    assert _choices(config.LossSpec, "name") == tuple(LOSSES) == config.LOSS_CHOICES
    assert config.REGRESSION_LOSSES == loss_names("regression")
    assert config.CLASSIFICATION_LOSSES == loss_names("classification")
    assert set(config.REGRESSION_LOSSES) | set(config.CLASSIFICATION_LOSSES) == set(LOSSES)
    assert _choices(config.L2Spec, "kernel") == tuple(KERNELS)
    assert _choices(config.KernelDictionaryMap, "kernel") == tuple(KERNELS)
    tags = [t for m in config.reference.variants(config.FeatureMap) for t in config.reference.kind_tags(m)]
    assert tags == list(MAPS)
    assert _choices(config.BundledSource, "name") == tuple(BUNDLED) == config.BUNDLED_CHOICES
    assert _choices(config.ScenarioSource, "name") == tuple(SCENARIOS) == config.SCENARIO_CHOICES
    assert _choices(config.ExecutionSpec, "backend") == tuple(BACKENDS)


def test_loss_parameters_come_from_the_table():
    params = all_loss_params()
    assert set(params) == {"delta", "tau"}
    for name, p in params.items():
        field = config.LossSpec.model_fields[name]
        assert field.default == p.default and field.description == p.description
    for name, kind in LOSSES.items():
        spec = config.LossSpec(name=name)
        assert tuple(spec.params()) == kind.param_names and spec.task == kind.task
    assert config.LossSpec(name="quantile", tau=0.2).label == "quantile_tau0.2"


def test_a_parameter_shared_by_two_losses_must_agree():
    from pipeline.losses import LossParam, QuantileLoss, register_loss
    with pytest.raises(ValueError, match="already declared differently"):
        register_loss("other_quantile", "regression", "Other", QuantileLoss,
                      (LossParam("tau", 0.3, "Another level.", gt=0.0, lt=1.0),))
    assert "other_quantile" not in LOSSES


# ---------------------------------------------------------------- toy entries through the CLI
TOY_LOSS = """
from dataclasses import dataclass
import cvxpy as cp
import numpy as np
import pipeline.losses as L

@dataclass(frozen=True)
class ScaledSquared(L.Loss):
    # weight/2 * (y - f)^2: smooth, but not the 0.5 (y - f)^2 the closed forms assume
    weight: float = 2.0
    def __post_init__(self):
        object.__setattr__(self, "name", "scaled_squared")
    def value(self, y, f):
        return 0.5 * self.weight * self._arg(y, f) ** 2
    def derivative(self, y, f):
        return -self.weight * self._arg(y, f)
    def second_derivative(self, y, f):
        return np.full(np.shape(f), self.weight)
    def cvxpy_sum(self, y, f_expr):
        return 0.5 * self.weight * cp.sum_squares(y - f_expr)
    def conjugate(self, y, u):
        u = np.asarray(u, float)
        return u * np.asarray(y, float) + u ** 2 / (2 * self.weight)
    def intercept_only(self, y):
        return float(np.mean(y))

L.register_loss("scaled_squared", L.REGRESSION, "Scaled squared", ScaledSquared,
                (L.LossParam("weight", 2.0, "Weight of the squared residual.", gt=0.0),))
"""

TOY_KERNEL = """
import numpy as np
from scipy.spatial.distance import cdist
import pipeline.kernels as K

def rational_quadratic(Xb, Z, p):
    # (1 + d^2 / (2 alpha l^2))^(-alpha) (Rasmussen & Williams 2006, eq. 4.19)
    return (1.0 + cdist(Xb, Z, "sqeuclidean") / (2 * p["alpha"] * p["bandwidth"] ** 2)) ** -p["alpha"]

K.register_kernel(K.Kernel("rational_quadratic", rational_quadratic, params=("bandwidth", "alpha"),
                           defaults={"alpha": 1.0}))
"""

CONFIG = """
name: toy
seed: 1
data: {{kind: scenario, name: dense_effects, n_samples: 40, n_features: 5, n_informative: 2}}
losses: [{losses}]
families:
  l1: {{path: {{points: 3, smallest_share: 0.1}}}}
  l2: {{path: {{points: 3}}, kernel: {kernel}}}
selection: {{cv_folds: 2}}
stability: {{enabled: false}}
cache: {{enabled: false}}
tracking: {{uri: "sqlite:///{store}"}}
report: {{directory: "{reports}"}}
"""


def _penduel(tmp_path, setup: str, args: list[str]) -> subprocess.CompletedProcess:
    code = setup + "\nfrom pipeline.cli import main\nraise SystemExit(main(%r))\n" % args
    return subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True,
                          timeout=600, env={"PYTHONWARNINGS": "ignore", "PATH": "/usr/bin:/bin",
                                            "PYTHONPATH": str(ROOT), "HOME": str(tmp_path)})


def _config(tmp_path, losses="squared", kernel="linear"):
    path = tmp_path / "toy.yaml"
    path.write_text(CONFIG.format(losses=losses, kernel=kernel, store=tmp_path / "mlflow.db",
                                  reports=tmp_path / "reports"), encoding="utf-8")
    return str(path)


def test_toy_loss_is_one_registration_and_validates(tmp_path):
    path = _config(tmp_path, losses="{name: scaled_squared, weight: 3}")
    out = _penduel(tmp_path, textwrap.dedent(TOY_LOSS), ["validate", path])
    assert out.returncode == 0, out.stderr
    assert "scaled_squared" in out.stdout and "weight" in out.stdout
    # without the registration the same file is a user mistake naming the field
    out = _penduel(tmp_path, "", ["validate", path])
    assert out.returncode == 2 and "losses[1].name" in out.stderr and "'scaled_squared'" in out.stderr


def test_toy_kernel_is_one_registration_and_validates(tmp_path):
    path = _config(tmp_path, kernel="rational_quadratic")
    out = _penduel(tmp_path, textwrap.dedent(TOY_KERNEL), ["validate", path])
    assert out.returncode == 0, out.stderr
    assert "rational_quadratic" in out.stdout
    out = _penduel(tmp_path, "", ["validate", path])
    assert out.returncode == 2 and "families.l2.kernel" in out.stderr


def test_toy_loss_and_kernel_run_end_to_end(tmp_path):
    path = _config(tmp_path, losses="{name: scaled_squared, weight: 3}", kernel="rational_quadratic")
    shutil.copyfile(empty_store(), tmp_path / "mlflow.db")    # the store the config names, made once per session
    check = textwrap.dedent(TOY_LOSS) + textwrap.dedent(TOY_KERNEL) + textwrap.dedent("""
        from pipeline.config import L2Spec
        # bandwidth is a setting the kernel takes; alpha is not a setting, so the kernel's default holds
        assert L2Spec(kernel="rational_quadratic", bandwidth=0.5).kernel_params() == {"bandwidth": 0.5}
        """)
    out = _penduel(tmp_path, check, ["run", "--quiet", path])
    assert out.returncode == 0, out.stderr[-3000:]
    assert "scaled_squared_weight3" in out.stdout
    reports = list((tmp_path / "reports").rglob("*.html"))
    assert reports and "rational_quadratic" in reports[0].read_text(encoding="utf-8")


TOY_MAP = """
from typing import Literal
import numpy as np
from pydantic import Field
from sklearn.base import BaseEstimator, TransformerMixin
from pipeline.features import MapKind, register_map
from pipeline.settings import Settings

class SquaresMap(Settings):
    kind: Literal["squares"] = Field(description="Each standardised input squared.")

class Squares(TransformerMixin, BaseEstimator):
    def fit(self, X, y=None):
        return self
    def transform(self, X):
        return np.asarray(X, float) ** 2
    def get_feature_names_out(self, names):
        return [f"{n}^2" for n in names]

register_map(MapKind("squares", SquaresMap, lambda spec, seed: Squares(), lambda spec, n, rows=None: n))
"""


def test_toy_feature_map_is_one_registration(tmp_path):
    path = tmp_path / "toy.yaml"
    path.write_text("name: toy\ndata: {kind: scenario, name: dense_effects, n_features: 5, n_informative: 2}\n"
                    "features: {maps: [{kind: identity}, {kind: squares}]}\n", encoding="utf-8")
    check = textwrap.dedent(TOY_MAP) + textwrap.dedent("""
        import numpy as np
        from pipeline.config import load_config
        from pipeline.features import FeatureBuilder
        spec, _ = load_config("toy.yaml")
        X = np.random.default_rng(0).normal(size=(12, 5))
        assert FeatureBuilder(spec.features.maps).fit(X).transform(X).shape == (12, 10)
        """)
    out = _penduel(tmp_path, check, ["validate", str(path)])
    assert out.returncode == 0, out.stderr
    assert "squares" in out.stdout
    out = _penduel(tmp_path, "", ["validate", str(path)])
    assert out.returncode == 2 and "features.maps[2]" in out.stderr and "'squares'" in out.stderr
