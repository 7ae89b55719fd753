"""The sections of the experiment file other than data, losses and the whole experiment."""
from __future__ import annotations

from typing import Annotated, Literal, Union

from pydantic import Field, field_validator, model_validator

from ..execution import BACKENDS
from ..features import MAPS
from ..kernels import KERNELS
from ..models.sparse.routing import SOLVERS
from ..selection import L2_CRITERIA, RULES
from ..stability.schemes import SCHEMES
from ..settings import Settings

# The feature-map union is assembled from the registered maps' settings models.
FeatureMap = Annotated[Union[tuple(m.settings for m in MAPS.values())], Field(discriminator="kind")]


class FeaturesSpec(Settings):
    maps: tuple[FeatureMap, ...] = Field((MAPS["identity"].settings(kind="identity"),),
                                         description="Feature maps whose outputs are concatenated.")
    memory_budget_mib: int = Field(2048, ge=16, description="Largest explicit feature matrix allowed, in MiB.")

    @field_validator("maps")
    @classmethod
    def _not_empty(cls, v):
        if len(v) == 0:
            raise ValueError("at least one feature map is needed")
        return v


class L1Spec(Settings):
    enabled: bool = Field(True, description="Fit the sparse family.")
    n_lambdas: int = Field(30, ge=2, le=500, description="Points on the λ path.")
    lambda_ratio: float = Field(0.01, gt=0.0, lt=1.0, description="Smallest λ as a fraction of λ_max.")
    tol: float = Field(1e-7, gt=0.0, lt=1.0, description="Optimality tolerance of each fit.")
    solver: Literal[SOLVERS] = Field(
        "auto", description="Solver back-end ('auto' picks per loss).")
    alpha: float = Field(1.0, gt=0.0, le=1.0, description="Elastic-net mixing: penalty α‖w‖₁ + (1−α)/2‖w‖²₂; "
                                                          "1 is the lasso.")


# Settings of L2Spec that are kernel parameters; "median" means: let the kernel choose.
KERNEL_SETTINGS = ("bandwidth", "degree")


class L2Spec(Settings):
    enabled: bool = Field(True, description="Fit the ridge-type family.")
    kernel: Literal[tuple(KERNELS)] = Field(
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
        """The settings the chosen kernel takes (asked of the kernel, not decided by its name)."""
        takes = KERNELS[self.kernel].params
        return {name: getattr(self, name) for name in KERNEL_SETTINGS
                if name in takes and getattr(self, name) != "median"}
    n_lambdas: int = Field(30, ge=2, le=500, description="Points on the λ path.")


class FamiliesSpec(Settings):
    l1: L1Spec = L1Spec()
    l2: L2Spec = L2Spec()


class SplitSpec(Settings):
    test_fraction: float = Field(0.25, gt=0.0, lt=0.9, description="Share of rows held out for testing.")


class SelectionSpec(Settings):
    cv_folds: int = Field(5, ge=2, le=50, description="Folds of K-fold cross-validation.")
    repeats: int = Field(1, ge=1, le=50, description="Repeats of K-fold CV, each with fresh folds (same for "
                                                     "both families).")
    rule: Literal[RULES] = Field("min", description="Pick the λ of least CV error, or the simplest "
                                                              "within one standard error of it.")
    l2_criterion: Literal[tuple(L2_CRITERIA)] = Field(
        "cv", description="How the ridge-type family picks λ for the squared loss: K-fold CV, exact "
                          "leave-one-out or generalised CV (other losses always use K-fold CV).")
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


class ReportSpec(Settings):
    directory: str = Field("reports", description="Folder where reports are written, relative to the config "
                                                  "file's folder.")


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
