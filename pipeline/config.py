"""The experiment file: pydantic models, safe YAML loading, clear errors.

This is the only place defaults live. Every other module receives an
`ExperimentSpec` (or a piece of it) with every value resolved.
"""
from __future__ import annotations

import difflib
import hashlib
import json
import pathlib
from typing import Annotated, Any, Literal, Union

import yaml
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

LOSS_CHOICES = ("squared", "absolute", "huber", "quantile", "logistic", "hinge", "squared_hinge")
REGRESSION_LOSSES = ("squared", "absolute", "huber", "quantile")
CLASSIFICATION_LOSSES = ("logistic", "hinge", "squared_hinge")
SCENARIO_CHOICES = ("spectral_bands", "binary_blobs", "dense_effects")
BUNDLED_CHOICES = ("diabetes", "breast_cancer")


class ConfigError(ValueError):
    """A user mistake in the experiment file: one paragraph, shown without a traceback."""


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


# ---------------------------------------------------------------- data sources
class FileSource(_Strict):
    kind: Literal["csv", "parquet"] = Field(description="Read a CSV or Parquet file.")
    path: str = Field(description="File path, relative to the config file's folder.")
    target: str = Field(description="Name of the column to predict.")


class BundledSource(_Strict):
    kind: Literal["bundled"] = Field(description="An open dataset shipped with scikit-learn.")
    name: Literal["diabetes", "breast_cancer"] = Field(
        description="diabetes (Efron et al. 2004) or breast_cancer (Wisconsin diagnostic, UCI).")


class ScenarioSource(_Strict):
    kind: Literal["scenario"] = Field(description="A synthetic scenario that records its ground truth.")
    name: Literal["spectral_bands", "binary_blobs", "dense_effects"] = Field(
        description="spectral_bands: correlated bands, sparse signal; binary_blobs: two-class, "
                    "few informative features; dense_effects: many small effects.")
    n_samples: int = Field(160, ge=10, le=1_000_000, description="Number of rows.")
    n_features: int = Field(400, ge=2, le=1_000_000, description="Number of columns.")
    n_informative: int = Field(6, ge=1, description="Columns that carry the signal.")
    correlation: float = Field(0.95, ge=0.0, lt=1.0,
                               description="Correlation between neighbouring columns (spectral_bands).")
    noise: float = Field(1.0, gt=0.0, description="Noise standard deviation (regression) or label-flip scale.")
    seed: int = Field(0, ge=0, description="Seed of the data draw (separate from the experiment seed).")

    @model_validator(mode="after")
    def _informative_fits(self) -> "ScenarioSource":
        if self.n_informative > self.n_features:
            raise ValueError(f"n_informative ({self.n_informative}) exceeds n_features ({self.n_features})")
        return self


DataSource = Annotated[Union[FileSource, BundledSource, ScenarioSource], Field(discriminator="kind")]


# ---------------------------------------------------------------- features
class IdentityMap(_Strict):
    kind: Literal["identity"] = Field(description="The input columns themselves.")


class PolynomialMap(_Strict):
    kind: Literal["polynomial"] = Field(description="Products of standardised inputs up to a degree.")
    degree: int = Field(2, ge=2, le=5, description="Highest total degree.")
    interaction_only: bool = Field(False, description="Only products of distinct columns.")


class RandomFourierMap(_Strict):
    kind: Literal["random_fourier"] = Field(
        description="Random Fourier features approximating a Gaussian kernel (Rahimi & Recht 2007).")
    n_components: int = Field(300, ge=1, le=5_000_000, description="Number of random features.")
    bandwidth: Union[float, Literal["median"]] = Field(
        "median", description="Gaussian bandwidth σ on standardised inputs, or 'median' for the "
                              "median pairwise distance of training rows.")

    @field_validator("bandwidth")
    @classmethod
    def _positive(cls, v):
        if not isinstance(v, str) and v <= 0:
            raise ValueError("bandwidth must be positive or 'median'")
        return v


class SplineMap(_Strict):
    kind: Literal["spline"] = Field(description="B-spline basis of each standardised input, knots at quantiles.")
    n_knots: int = Field(6, ge=2, le=200, description="Knots per input column.")
    degree: int = Field(3, ge=1, le=5, description="Spline degree.")


class RandomReLUMap(_Strict):
    kind: Literal["random_relu"] = Field(description="max(0, ωᵀx + b) with random Gaussian ω, b.")
    n_components: int = Field(500, ge=1, le=5_000_000, description="Number of random features.")


class KernelDictionaryMap(_Strict):
    kind: Literal["kernel_dictionary"] = Field(
        description="Columns k(x, z_j) at training rows or k-means centres: the sparse counterpart of the "
                    "representer form.")
    kernel: Literal["rbf", "laplacian", "matern12", "matern32", "matern52", "polynomial", "linear"] = Field(
        "rbf", description="Kernel of the dictionary columns.")
    n_centres: int | None = Field(None, ge=1, description="Number of centres; none uses every training row.")
    centres: Literal["rows", "kmeans"] = Field("rows", description="Centres at training rows or k-means centres.")
    bandwidth: float | None = Field(None, gt=0.0, description="Kernel length scale; none uses the median distance.")


FeatureMap = Annotated[Union[IdentityMap, PolynomialMap, RandomFourierMap, SplineMap, RandomReLUMap,
                             KernelDictionaryMap], Field(discriminator="kind")]


class FeaturesSpec(_Strict):
    maps: tuple[FeatureMap, ...] = Field((IdentityMap(kind="identity"),),
                                         description="Feature maps whose outputs are concatenated.")
    memory_budget_mib: int = Field(2048, ge=16, description="Largest explicit feature matrix allowed, in MiB.")

    @field_validator("maps")
    @classmethod
    def _not_empty(cls, v):
        if len(v) == 0:
            raise ValueError("at least one feature map is needed")
        return v


# ---------------------------------------------------------------- families
class L1Spec(_Strict):
    enabled: bool = Field(True, description="Fit the sparse family.")
    n_lambdas: int = Field(30, ge=2, le=500, description="Points on the λ path.")
    lambda_ratio: float = Field(0.01, gt=0.0, lt=1.0, description="Smallest λ as a fraction of λ_max.")
    tol: float = Field(1e-7, gt=0.0, lt=1.0, description="Optimality tolerance of each fit.")
    solver: Literal["auto", "active_set", "osqp", "highs", "cvxpy"] = Field(
        "auto", description="Solver back-end ('auto' picks per loss).")
    alpha: float = Field(1.0, gt=0.0, le=1.0, description="Elastic-net mixing: penalty α‖w‖₁ + (1−α)/2‖w‖²₂; "
                                                          "1 is the lasso.")


class L2Spec(_Strict):
    enabled: bool = Field(True, description="Fit the ridge-type family.")
    kernel: Literal["linear", "polynomial", "rbf", "laplacian", "matern12", "matern32", "matern52"] = Field(
        "linear", description="Kernel on the standardised features; 'linear' is K = ΦΦᵀ of the feature map "
                              "(the only one with coefficients per feature).")
    bandwidth: Union[float, Literal["median"]] = Field(
        "median", description="Length scale of rbf, laplacian and Matérn kernels, or 'median' for the median "
                              "pairwise distance of the training rows of each fit.")
    degree: int = Field(3, ge=1, le=10, description="Degree of the polynomial kernel (1 + xᵀz/p)^degree.")

    @field_validator("bandwidth")
    @classmethod
    def _positive_bandwidth(cls, v):
        if not isinstance(v, str) and v <= 0:
            raise ValueError("bandwidth must be positive or 'median'")
        return v

    def kernel_params(self) -> dict:
        if self.kernel == "polynomial":
            return {"degree": self.degree}
        if self.kernel != "linear" and self.bandwidth != "median":
            return {"bandwidth": float(self.bandwidth)}
        return {}
    n_lambdas: int = Field(30, ge=2, le=500, description="Points on the λ path.")


class FamiliesSpec(_Strict):
    l1: L1Spec = L1Spec()
    l2: L2Spec = L2Spec()


class LossSpec(_Strict):
    name: Literal["squared", "absolute", "huber", "quantile", "logistic", "hinge", "squared_hinge"] = Field(
        description="squared, absolute, huber, quantile (regression); logistic, hinge, squared_hinge "
                    "(classification). A plain string in the list stands for {name: ...}.")
    delta: float = Field(1.0, gt=0.0, description="Huber threshold (on standardised target).")
    tau: float = Field(0.5, gt=0.0, lt=1.0, description="Quantile level.")

    def params(self) -> dict[str, float]:
        if self.name == "huber":
            return {"delta": self.delta}
        if self.name == "quantile":
            return {"tau": self.tau}
        return {}

    @property
    def label(self) -> str:
        p = self.params()
        return self.name + "".join(f"_{k}{v:g}" for k, v in p.items())


class SplitSpec(_Strict):
    test_fraction: float = Field(0.25, gt=0.0, lt=0.9, description="Share of rows held out for testing.")


class SelectionSpec(_Strict):
    cv_folds: int = Field(5, ge=2, le=50, description="Folds of K-fold cross-validation.")
    repeats: int = Field(1, ge=1, le=50, description="Repeats of K-fold CV, each with fresh folds (same for "
                                                     "both families).")
    rule: Literal["min", "one_se"] = Field("min", description="Pick the λ of least CV error, or the simplest "
                                                              "within one standard error of it.")
    l2_criterion: Literal["cv", "loo", "gcv"] = Field(
        "cv", description="How the ridge-type family picks λ for the squared loss: K-fold CV, exact "
                          "leave-one-out or generalised CV (other losses always use K-fold CV).")
    nested: bool = Field(False, description="Also estimate the error of the whole select-then-fit procedure "
                                            "by nested CV (outer folds = cv_folds); costs cv_folds times more.")


class StabilitySpec(_Strict):
    enabled: bool = Field(True, description="Refit both families on resamples of the training rows.")
    scheme: Literal["subsample", "bootstrap", "complementary_pairs"] = Field(
        "subsample", description="Resampling scheme (complementary pairs: Shah & Samworth 2013).")
    n_resamples: int = Field(50, ge=2, le=10_000, description="Number of resamples (even for complementary pairs).")
    fraction: float = Field(0.5, gt=0.0, le=1.0, description="Share of training rows per subsample.")
    threshold: float = Field(0.75, gt=0.5, le=1.0, description="Selection probability for the stable set.")
    target_false_selections: float = Field(
        1.0, gt=0.0, description="Target E[V] (expected falsely selected features) for the λ range "
                                 "(Meinshausen & Bühlmann 2010 bound).")
    losses: tuple[str, ...] | None = Field(None, description="Loss labels to resample; default: the first loss.")
    group_correlation: float = Field(0.9, gt=0.0, le=1.0, description="Features whose training-row |correlation| "
                                     "reaches this are grouped when reporting shared selection.")

    @model_validator(mode="after")
    def _pairs_even(self) -> "StabilitySpec":
        if self.scheme == "complementary_pairs" and (self.n_resamples % 2 or self.fraction != 0.5):
            raise ValueError("complementary_pairs needs an even n_resamples and fraction 0.5")
        return self


class TrackingSpec(_Strict):
    uri: str = Field("sqlite:///mlflow.db", description="mlflow tracking URI (SQLite file by default).")
    experiment_name: str | None = Field(None, description="Tracking experiment; defaults to the experiment name.")


class ReportSpec(_Strict):
    directory: str = Field("reports", description="Folder where reports are written.")


class CacheSpec(_Strict):
    directory: str = Field(".penduel-cache", description="Folder of finished fit tasks, relative to the current "
                                                         "folder; a rerun reuses them.")
    enabled: bool = Field(True, description="Reuse and store finished fit tasks.")


class ExecutionSpec(_Strict):
    backend: Literal["local", "processes", "dask"] = Field(
        "local", description="Where fits run: this process, worker processes, or a Dask cluster.")
    n_jobs: int = Field(1, ge=1, le=256, description="Worker processes (processes) or local Dask workers.")
    scheduler_address: str | None = Field(None, description="Dask scheduler address; none starts a local cluster.")


class ExperimentSpec(_Strict):
    name: str = Field(description="Experiment name, used for the tracking experiment and report folder.",
                      min_length=1, max_length=120, pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
    description: str = Field("", description="Free text shown in the report.")
    seed: int = Field(0, ge=0, description="Root of every random choice.")
    data: DataSource = Field(description="Where the rows come from: a file, a bundled open dataset or a "
                                         "synthetic scenario (chosen by data.kind).")
    split: SplitSpec = SplitSpec()
    features: FeaturesSpec = FeaturesSpec()
    losses: tuple[LossSpec, ...] = Field((LossSpec(name="squared"),), description="Losses to compare on.")
    families: FamiliesSpec = FamiliesSpec()
    selection: SelectionSpec = SelectionSpec()
    tracking: TrackingSpec = TrackingSpec()
    report: ReportSpec = ReportSpec()
    execution: ExecutionSpec = ExecutionSpec()
    stability: StabilitySpec = StabilitySpec()
    cache: CacheSpec = CacheSpec()

    @field_validator("losses", mode="before")
    @classmethod
    def _loss_strings(cls, v):
        if isinstance(v, (list, tuple)):
            return [{"name": x} if isinstance(x, str) else x for x in v]
        return v

    @field_validator("losses")
    @classmethod
    def _losses_not_empty(cls, v):
        if len(v) == 0:
            raise ValueError("at least one loss is needed")
        labels = [loss.label for loss in v]
        if len(set(labels)) != len(labels):
            raise ValueError(f"a loss is listed twice: {labels}")
        return v

    @model_validator(mode="after")
    def _consistent(self) -> "ExperimentSpec":
        if not (self.families.l1.enabled or self.families.l2.enabled):
            raise ValueError("both families are disabled; enable families.l1 or families.l2")
        tasks = {"regression" if loss.name in REGRESSION_LOSSES else "classification" for loss in self.losses}
        if len(tasks) > 1:
            raise ValueError("losses mix regression losses (squared, absolute, huber, quantile) with "
                             "classification losses (logistic, hinge, squared_hinge); list one kind")
        if self.data.kind == "scenario":   # checked before the rows are drawn
            mib = self.data.n_samples * self.data.n_features * 8 / 2**20
            if mib > self.features.memory_budget_mib:
                raise ValueError(f"data: a scenario of {self.data.n_samples} rows × {self.data.n_features} "
                                 f"columns needs about {mib:,.0f} MiB, over features.memory_budget_mib = "
                                 f"{self.features.memory_budget_mib}; use fewer rows or columns")
        return self

    @property
    def task(self) -> str:
        return "regression" if self.losses[0].name in REGRESSION_LOSSES else "classification"

    def resolved(self) -> dict[str, Any]:
        return self.model_dump(mode="json")

    def config_hash(self) -> str:
        text = json.dumps(self.resolved(), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


# ---------------------------------------------------------------- loading
def _describe(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def _allowed(model_error: dict) -> str:
    ctx = model_error.get("ctx") or {}
    if "expected" in ctx:
        return f"allowed: {ctx['expected']}"
    return model_error["msg"].lower()


def _closest(word: str, choices) -> str:
    match = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.5)
    return f" Did you mean {match[0]!r}?" if match else ""


def _format_validation(err: ValidationError, source: str) -> str:
    parts = []
    for e in err.errors()[:5]:
        loc = ".".join(str(x) for x in e["loc"] if not (isinstance(x, str) and x in (
            "csv", "parquet", "bundled", "scenario", "identity", "polynomial", "random_fourier",
            "function-after[_positive(), union[float,literal['median']]]")))
        if e["type"] == "extra_forbidden":
            parts.append(f"field '{loc}' is not a known setting (found {_describe(e['input'])}).")
            continue
        if e["type"] == "missing":
            parts.append(f"field '{loc}' is required but missing.")
            continue
        if e["type"] == "value_error" and (not loc or isinstance(e["input"], dict)):   # a rule across settings
            parts.append(f"{loc + ': ' if loc else ''}{(e.get('ctx') or {}).get('error', e['msg'])}.")
            continue
        hint = ""
        if e["type"] == "literal_error":
            expected = (e.get("ctx") or {}).get("expected", "")
            choices = [c.strip().strip("'") for c in expected.replace(" or ", ",").split(",") if c.strip()]
            hint = _closest(e["input"], choices)
        if e["type"] == "union_tag_invalid":   # an unknown kind: of a data source or a feature map
            ctx = e.get("ctx") or {}
            choices = [c.strip().strip("'") for c in str(ctx.get("expected_tags", "")).split(",")]
            hint = _closest(ctx.get("tag", ""), choices)
        parts.append(f"field '{loc}' has value {_describe(e['input'])}; {_allowed(e)}.{hint}")
    more = len(err.errors()) - 5
    if more > 0:
        parts.append(f"({more} more problem(s) not shown.)")
    return f"{source}: invalid experiment config — " + " ".join(parts)


def parse_config(mapping: Any, source: str = "config") -> ExperimentSpec:
    if not isinstance(mapping, dict):
        raise ConfigError(f"{source}: the file must hold a mapping of settings (name:, data:, ...), "
                          f"found {type(mapping).__name__}.")
    try:
        return ExperimentSpec.model_validate(mapping)
    except ValidationError as err:
        raise ConfigError(_format_validation(err, source)) from None


def load_yaml(path: str | pathlib.Path) -> Any:
    path = pathlib.Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: config file not found (looked for it at {path.resolve()}).")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read the config file ({exc}).") from None
    try:
        return yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc)
        raise ConfigError(f"{path}: YAML syntax error{where}: {problem}. Check indentation and quoting "
                          f"there.") from None


def load_config(path: str | pathlib.Path) -> tuple[ExperimentSpec, pathlib.Path]:
    """Validated spec and the folder relative paths in it are resolved against."""
    path = pathlib.Path(path)
    return parse_config(load_yaml(path), str(path)), path.resolve().parent


def _default_text(field) -> str:
    if field.is_required():
        return "required"
    value = field.default
    if isinstance(value, BaseModel):
        value = value.model_dump(mode="json")
    elif isinstance(value, tuple):
        value = [v.model_dump(mode="json") if isinstance(v, BaseModel) else v for v in value]
    return f"`{json.dumps(value, ensure_ascii=False)}`"


def _variants(annotation) -> list[type[BaseModel]]:
    """Model classes inside an annotation such as Annotated[Union[A, B], ...] or tuple[...]."""
    import typing

    found: list[type[BaseModel]] = []

    def visit(t):
        if isinstance(t, type) and issubclass(t, BaseModel):
            found.append(t)
            return
        for arg in typing.get_args(t):
            visit(arg)

    visit(annotation)
    return found


def schema_reference() -> str:
    """Markdown table of every setting, generated from the models (the README embeds it)."""
    lines = ["| setting | default | meaning |", "| --- | --- | --- |"]

    def walk(model: type[BaseModel], prefix: str, note: str = "") -> None:
        for name, field in model.model_fields.items():
            path = f"{prefix}{name}"
            variants = _variants(field.annotation)
            is_list = "tuple" in str(field.annotation)
            if variants and not (len(variants) == 1 and not is_list and variants[0] is field.annotation):
                lines.append(f"| `{path}` | {_default_text(field)} | {field.description or ''} |")
                for v in variants:
                    kind = v.model_fields.get("kind")
                    label = f" (kind: {' or '.join(kind.annotation.__args__)})" if kind is not None else ""
                    walk(v, f"{path}{'[]' if is_list else ''}.", label)
                continue
            if variants:
                walk(variants[0], path + ".")
                continue
            lines.append(f"| `{path}`{note} | {_default_text(field)} | {field.description or ''} |")

    walk(ExperimentSpec, "")
    return "\n".join(lines)


if __name__ == "__main__":
    print(schema_reference())
