"""The one interface every model family exports (pipeline.models.sparse, pipeline.models.ridge).

The runner, the fit task, the estimators, tracking and the report talk to a family only
through a `Family`: they read its labels and properties and call grid / fit_path /
predict, and never ask which family it is by name. A family's fit of one λ path comes
back as a `PathFit`, the same shape for every family.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from pipeline.losses import Loss


# Points a round of widening adds beyond an end of a grid: a share of the grid's points (at least
# WIDEN_MIN_POINTS), at the grid's own spacing.
WIDEN_SHARE, WIDEN_MIN_POINTS = 0.3, 5


def widen_points(n_lambdas: int) -> int:
    return max(WIDEN_MIN_POINTS, int(round(WIDEN_SHARE * n_lambdas)))


@dataclass(frozen=True)
class PathFit:
    """One family's path over λ on the training rows, on the scale it was fitted on."""
    lambdas: np.ndarray              # (L,) decreasing
    intercept: np.ndarray            # (L,)
    coef: np.ndarray | None          # (L, p) weight per fitted column; None where the family has none
    n_nonzero: np.ndarray | None     # (L,) size of the support, for families with exact zeros
    effective_df: np.ndarray         # (L,)
    df_kind: str                     # what effective_df counts
    certificate: np.ndarray | None   # (L,) optimality certificate, for families that give one
    certificate_kind: str
    converged: np.ndarray            # (L,) bool
    status: tuple[str, ...]
    solver: str
    fit_seconds: float
    loo_error: np.ndarray | None = None   # exact leave-one-out error, where the family has it
    gcv: np.ndarray | None = None
    note: str = ""                   # how the path was fitted when that is worth saying (e.g. low rank)
    model: Any = None                # the family's own path object, read back by predict
    multiclass: str = ""             # K > 2 classes: "one_versus_rest" or "multinomial" (models.multiclass)


class Family:
    """A penalised model family. Subclasses set the labels and implement the four methods."""
    key: str                  # its section under `families:` in the experiment file
    title: str                # how the report, tracking and CLI name it
    short: str                # its penalty in two characters, for axis labels
    colour: str               # plot colour (Okabe & Ito colour-blind-safe palette)
    marker: str               # plot marker
    has_support: bool         # exact zeros: the fit selects a set of features
    selected_set: str         # which features count as selected in stability summaries
    selected_phrase: str      # the same, said of one feature ("in the support")
    df_description: str       # what its degrees of freedom count, in a few words
    gives_certificate: bool   # each fit carries an optimality certificate
    tracked_settings: tuple   # config fields of its section logged as parameters of every fit
    grid_reads_loss: bool     # the λ grid depends on the loss (else one grid serves every loss)
    closed_ends: tuple = ()   # grid ends ("largest", "smallest") beyond which every fit is the same
    # K > 2 classes (pipeline.models.multiclass): a family that fits a loss declared "multinomial"
    # (Loss.multiclass) in one piece sets this and implements the three multinomial_* methods below;
    # without them every class is fitted one versus the rest
    fits_multinomial: bool = False

    def gram_mib(self, n_rows: int, options: dict | None = None) -> float:
        """Memory (MiB) of the kernel matrices a fit on n_rows training rows holds; 0 without any."""
        return 0.0

    def for_training_rows(self, options: dict, n_train: int) -> dict:
        """The options every split of one experiment uses, fixed from the whole training set's size (so CV
        folds, resamples and the final fit take the same route). Default: unchanged."""
        return options

    def memory_hint(self, n_rows: int, options: dict | None = None) -> str:
        """What to change when gram_mib is over the budget (a sentence naming the settings)."""
        return ""

    def route_check(self, n_rows: int, training, lambdas, options: dict) -> str:
        """A sentence for the report when the fit takes an approximate route (how far from the exact one);
        `training()` gives the training rows' features and scaled targets. Empty when exact."""
        return ""

    def options(self, section, seed: int = 0) -> dict:
        """The picklable fit options from its config section; `seed` for any random choice it makes."""
        raise NotImplementedError

    def needs_dense(self, options: dict) -> str:
        """Why fits with these options need dense feature rows, in a few words; "" when they take a scipy
        sparse matrix as it is (the sparse family: Zᵀu products and column slices of the working set)."""
        return ""

    def has_coefficients(self, options: dict) -> bool:
        """Whether fits with these options have one weight per feature."""
        raise NotImplementedError

    def why_no_coefficients(self, options: dict) -> str:
        """Why fits with these options have no weight per feature, in a few words ("" when they have)."""
        return ""

    def grid(self, Z, t, loss: Loss, options: dict, widen=(0, 0)) -> np.ndarray:
        """Decreasing λ grid from the training features Z and (scaled) targets t. `widen` = (a, b): the
        rounds by which cross-validation asked to extend the largest-λ end (a) and the smallest (b)."""
        raise NotImplementedError

    def saturated(self, n_nonzero_last, n_rows: int, n_features: int) -> bool:
        """Whether the fit at the smallest λ is as complex as the family gets on n_rows rows (a wider
        grid could not go further)."""
        return False

    def fit_path(self, Z, t, loss: Loss, lambdas, options: dict) -> PathFit:
        """Fit every λ of the grid on the training features Z and targets t."""
        raise NotImplementedError

    def predict(self, fit: PathFit, Z) -> np.ndarray:
        """Decision values (L, m) of the fitted path on the rows Z (built like the training ones)."""
        raise NotImplementedError

    # ------------------------------------------------ K > 2 classes in one fit (see fits_multinomial)
    def takes_multinomial(self, options: dict, n_rows: int) -> bool:
        """Whether the multinomial fitter serves these options on n_rows training rows (else one versus rest)."""
        return True

    def multinomial_grid(self, Z, codes, n_classes: int, loss: Loss, options: dict, widen=(0, 0)) -> np.ndarray:
        """Decreasing λ grid of a multinomial fit of class codes 0..K−1."""
        raise NotImplementedError

    def fit_multinomial(self, Z, codes, n_classes: int, loss: Loss, lambdas, options: dict) -> PathFit:
        """A multinomial path packed as PathFit: coef (L, p, K) or None, intercept (L, K), n_nonzero (L,)
        nonzero in any class, certificate (L,)."""
        raise NotImplementedError

    def predict_multinomial(self, fit: PathFit, Z) -> np.ndarray:
        """Decision values (L, m, K) of a multinomial path."""
        raise NotImplementedError
