"""The sections of the experiment file other than data, losses and the whole experiment."""
from __future__ import annotations

from typing import Annotated, Literal, Union

from pydantic import Field, field_validator, model_validator

from ..evaluate.metrics import METRICS
from ..execution import BACKENDS
from ..features import MAPS
from ..kernels import KERNELS
from ..models.sparse.routing import SOLVERS
from ..selection import L2_CRITERIA, RULE_TABLE, RULES
from ..stability.schemes import SCHEMES
from ..settings import Settings

# The feature-map union is assembled from the registered maps' settings models.
FeatureMap = Annotated[Union[tuple(m.settings for m in MAPS.values())], Field(discriminator="kind")]


class FeaturesSpec(Settings):
    maps: tuple[FeatureMap, ...] = Field((MAPS["identity"].settings(kind="identity"),),
                                         description="Feature maps whose outputs are concatenated.")
    memory_budget_mib: int = Field(2048, ge=16, description="Largest explicit feature matrix allowed, in MiB "
                                                                  "(a sparse one counted by its stored entries).")

    @field_validator("maps")
    @classmethod
    def _not_empty(cls, v):
        if len(v) == 0:
            raise ValueError("at least one feature map is needed")
        return v


CLASS_WEIGHTS = ("none", "balanced")
CLASS_WEIGHT_TEXT = ("Classification only: 'balanced' weights each training row n / (K · n_class), computed on the "
                     "training rows of each fit (times the data.weights column when given); 'none' leaves rows "
                     "as they are.")


class L1PathSpec(Settings):
    points: int = Field(30, ge=2, le=500, description="How many λ values the path has, geometric from the largest "
                                                      "(λ_max: the smallest λ whose solution is all zero) down.")
    smallest_share: float = Field(0.01, gt=0.0, lt=1.0, description="Smallest λ of the path as a share of the "
                                                                    "largest (λ_max).")


class L1Spec(Settings):
    enabled: bool = Field(True, description="Fit the sparse family.")
    path: L1PathSpec = L1PathSpec()
    tol: float = Field(1e-7, gt=0.0, lt=1.0, description="Optimality tolerance of each fit.")
    solver: Literal[SOLVERS] = Field(
        "auto", description="Solver back-end ('auto' picks per loss).")
    l1_share: float = Field(1.0, gt=0.0, le=1.0, description="Share of the penalty that is L1 (elastic net): "
                                                             "Ω = s‖w‖₁ + (1−s)/2‖w‖²₂ with s this share; 1 is "
                                                             "the lasso.")
    class_weight: Literal[CLASS_WEIGHTS] = Field("none", description=CLASS_WEIGHT_TEXT)


# Settings of L2Spec that are kernel parameters; "median" means: let the kernel choose.
KERNEL_SETTINGS = ("bandwidth", "degree")


class L2PathSpec(Settings):
    points: int = Field(30, ge=2, le=500, description="How many λ values the path has, geometric in λ between "
                                                      "effective degrees of freedom 1 and 0.95·(n − 1) (capped by "
                                                      "the kernel's rank), so the range is scale-free.")


class L2Spec(Settings):
    enabled: bool = Field(True, description="Fit the ridge-type family.")
    path: L2PathSpec = L2PathSpec()
    kernel: Literal[tuple(KERNELS)] = Field(
        "linear", description="Kernel on the standardised features; 'linear' is K = ΦΦᵀ of the feature map "
                              "(the only one with coefficients per feature).")
    bandwidth: Union[float, Literal["median"]] = Field(
        "median", description="Length scale of rbf, laplacian and Matérn kernels, or 'median' for the median "
                              "pairwise distance of the training rows of each fit.")
    degree: int = Field(3, ge=1, le=10, description="Degree of the polynomial kernel (1 + xᵀz/p)^degree.")
    class_weight: Literal[CLASS_WEIGHTS] = Field("none", description=CLASS_WEIGHT_TEXT)

    @field_validator("bandwidth")
    @classmethod
    def _positive_bandwidth(cls, v):
        if not isinstance(v, str) and v <= 0:
            raise ValueError("bandwidth must be positive or 'median'")
        return v

    def kernel_params(self) -> dict:
        """The settings the chosen kernel takes (asked of the kernel, not decided by its name)."""
        takes = KERNELS[self.kernel].params
        return {name: getattr(self, name) for name in KERNEL_SETTINGS
                if name in takes and getattr(self, name) != "median"}
    exact_max_rows: int = Field(8000, ge=2, description="Training rows up to which the path is exact (n × n "
                                                         "Gram); past it the low-rank (Nyström) route is used.")
    n_landmarks: int = Field(1000, ge=2, description="Seeded landmark rows of the low-rank route.")
    gap_rows: int = Field(2000, ge=10, description="On the low-rank route, the report compares it with the exact "
                                                   "route on a seeded subsample of this many training rows.")


class FamiliesSpec(Settings):
    l1: L1Spec = L1Spec()
    l2: L2Spec = L2Spec()


class SplitSpec(Settings):
    test_fraction: float = Field(0.25, gt=0.0, lt=0.9, description="Share of rows held out for testing (unless "
                                                                   "holdout or test_file fixes the test rows).")
    groups: str | None = Field(None, description="Column of group labels: rows sharing a value stay together in "
                                                 "the test split, every CV fold and every resample.")
    order: str | None = Field(None, description="Column of times (numbers or dates): the test rows are the last in "
                                                "this order, CV folds train on the past and validate on the next "
                                                "block, resamples draw contiguous blocks.")
    gap: int = Field(0, ge=0, description="Rows (in split.order) left out between the training rows and the rows "
                                          "they are validated or tested on.")
    holdout: str | None = Field(None, description="Column marking fixed test rows (1/true/yes/test; training rows "
                                                  "0/false/no/train); they are never used to fit or choose λ.")
    test_file: str | None = Field(None, description="A CSV or Parquet file with the same columns whose rows are the "
                                                    "fixed test set (path relative to the config file's folder).")

    @model_validator(mode="after")
    def _one_design(self) -> "SplitSpec":
        if self.holdout is not None and self.test_file is not None:
            raise ValueError("give split.holdout or split.test_file, not both")
        if self.groups is not None and self.order is not None:
            raise ValueError("split.groups and split.order together are not supported; give one")
        if self.gap and self.order is None:
            raise ValueError("split.gap counts rows in time order; it needs split.order")
        return self

    @property
    def columns(self) -> tuple[str, ...]:
        return tuple(c for c in (self.groups, self.order, self.holdout) if c is not None)


class SelectionSpec(Settings):
    cv_folds: int = Field(5, ge=2, le=50, description="Folds of K-fold cross-validation.")
    repeats: int = Field(1, ge=1, le=50, description="Repeats of K-fold CV, each with fresh folds (same for "
                                                     "both families).")
    rule: Literal[RULES] = Field("least_error", description="How λ is chosen from the CV errors: " + "; ".join(
        f"{r.name}: {r.description}" for r in RULE_TABLE.values()) + ".")
    l2_criterion: Literal[tuple(L2_CRITERIA)] = Field(
        "cv", description="How the ridge-type family picks λ for the squared loss: K-fold CV, exact "
                          "leave-one-out, generalised CV with the intercept in the trace (gcv) or as Golub, "
                          "Heath & Wahba 1979 (gcv_classical); other losses always use K-fold CV.")
    nested: bool = Field(False, description="Also estimate the error of the whole select-then-fit procedure "
                                            "by nested CV (outer folds = cv_folds); costs cv_folds times more.")


class StabilitySpec(Settings):
    enabled: bool = Field(True, description="Refit both families on resamples of the training rows.")
    scheme: Literal[SCHEMES] = Field(
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


class TrackingSpec(Settings):
    uri: str = Field("sqlite:///mlflow.db", description="mlflow tracking URI (SQLite file by default; a relative "
                                                        "file is in the config file's folder).")
    experiment_name: str | None = Field(None, description="Tracking experiment; defaults to the experiment name.")
    register_as: str | None = Field(None, pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,100}$",
                                    description="Also register each chosen model in the model registry as "
                                                "NAME-<family>-<loss label> (a new version per run).")


class ReportSpec(Settings):
    directory: str = Field("reports", description="Folder where reports are written, relative to the config "
                                                  "file's folder.")
    level: float = Field(0.9, ge=0.5, lt=1.0, description="Confidence level of every interval in the report "
                                                        "(held-out metrics, differences, fold tests).")


class VerdictSpec(Settings):
    metric: Literal[tuple(METRICS)] | None = Field(
        None, description="Held-out metric that decides between the families for every loss; by default each "
                          "loss is judged on its own scale (squared: rmse, absolute: mae, quantile: pinball at τ, "
                          "huber: huber, logistic: log_loss, hinge and squared_hinge: balanced_accuracy).")
    weighted_metrics: bool = Field(False, description="Weight the held-out metrics, their bootstrap intervals and "
                                                      "the paired comparison by the test rows' data.weights (needs "
                                                      "data.weights); by default every test row counts once.")


class CacheSpec(Settings):
    directory: str = Field(".penduel-cache", description="Folder of finished fit tasks, relative to the config "
                                                         "file's folder; a rerun reuses them.")
    enabled: bool = Field(True, description="Reuse and store finished fit tasks.")


def _backends_text() -> str:
    where = [b.description for b in BACKENDS.values()]
    return ", ".join(where[:-1]) + ", or " + where[-1] if len(where) > 1 else where[0]


class ExecutionSpec(Settings):
    backend: Literal[tuple(BACKENDS)] = Field("local", description=f"Where fits run: {_backends_text()}.")
    n_jobs: int = Field(1, ge=1, le=256, description="Worker processes (processes) or local Dask workers.")
    scheduler_address: str | None = Field(None, description="Dask scheduler address; none starts a local cluster.")
