"""The sparse family behind the common interface (pipeline.models.interface)."""
from __future__ import annotations

import numpy as np

from pipeline.matrices import dense, is_sparse
from pipeline.models.interface import Family, PathFit, widen_points
from pipeline.models.sparse.dual import lambda_max
from pipeline.models.sparse.multinomial import fit_multinomial_l1_path, multinomial_lambda_max
from pipeline.models.sparse.path import degrees_of_freedom, fit_l1_path, lambda_grid, predict_path

# options the path fit takes; the config section's other fields shape the grid. "selection_only" is set
# by the fit task for fits read only for their support and signs (stability resamples)
_FIT_OPTIONS = ("tol", "solver", "alpha", "selection_only")


class SparseFamily(Family):
    key = "l1"
    title = "sparse (L1)"
    short = "L1"
    colour = "#0072B2"     # Okabe & Ito blue
    marker = "o"
    has_support = True
    selected_set = "support"
    selected_phrase = "in the support"
    df_description = "nonzeros"
    tracked_settings = ("l1_share",)
    grid_reads_loss = True
    gives_certificate = True

    def options(self, section, seed: int = 0) -> dict:
        # the option keys are the fitting code's own; the config names are section.path.* and l1_share
        return {"tol": section.tol, "solver": section.solver, "alpha": section.l1_share,
                "n_lambdas": section.path.points, "lambda_ratio": section.path.smallest_share}

    def has_coefficients(self, options: dict) -> bool:
        return True

    # λ_max gives the all-zero fit and so does every larger λ: a choice there is the answer
    # "no feature helps", never a grid too short
    closed_ends = ("largest",)

    def grid(self, Z, t, loss, options: dict, widen=(0, 0)) -> np.ndarray:
        return self._grid_below(lambda_max(Z, t, loss, alpha=options.get("alpha", 1.0)), options, widen)

    def _grid_below(self, top, options: dict, widen) -> np.ndarray:
        n = options["n_lambdas"]
        grid = lambda_grid(top, n, options["lambda_ratio"])
        extra = int(widen[1]) * widen_points(n)
        if extra and n > 1:   # further down at the grid's own ratio per step
            step = grid[-1] / grid[-2]
            grid = np.concatenate([grid, grid[-1] * step ** np.arange(1, extra + 1)])
        return grid

    def saturated(self, n_nonzero_last, n_rows: int, n_features: int) -> bool:
        # a lasso fit has at most min(n − 1, p) nonzeros once the intercept is fitted
        return n_nonzero_last is not None and n_nonzero_last >= min(n_rows - 1, n_features)

    def fit_path(self, Z, t, loss, lambdas, options: dict) -> PathFit:
        path = fit_l1_path(Z, t, loss, lambdas, **{k: options[k] for k in _FIT_OPTIONS if k in options})
        lasso = options.get("alpha", 1.0) == 1.0
        return PathFit(
            lambdas=path.lambdas, intercept=path.intercept, coef=path.coef, n_nonzero=path.n_nonzero,
            effective_df=degrees_of_freedom(path, Z, getattr(loss, "row_factors", None)), certificate=path.certificate,
            df_kind="number of nonzero coefficients" if lasso else
            "elastic-net trace on the support (squared loss; nonzero count as upper bound otherwise)",
            certificate_kind=path.certificate_kind, converged=path.converged, status=path.status,
            solver=path.solver, fit_seconds=path.fit_seconds, model=path)

    def predict(self, fit: PathFit, Z) -> np.ndarray:
        return predict_path(fit.model, Z)

    # K > 2 classes with a multinomial loss (logistic): one L1 / elastic-net softmax fit of every class
    fits_multinomial = True

    # the multinomial solver works on dense rows: a sparse matrix is densified for it (and the fit says so)
    def multinomial_grid(self, Z, codes, n_classes, loss, options: dict, widen=(0, 0)) -> np.ndarray:
        top = multinomial_lambda_max(dense(Z), codes, n_classes, alpha=options.get("alpha", 1.0))
        return self._grid_below(top, options, widen)

    def fit_multinomial(self, Z, codes, n_classes, loss, lambdas, options: dict) -> PathFit:
        from pipeline.models.multiclass import multinomial_pathfit
        note = "sparse rows densified for the multinomial solver" if is_sparse(Z) else ""
        path = fit_multinomial_l1_path(dense(Z), codes, n_classes, lambdas, alpha=options.get("alpha", 1.0),
                                       tol=options.get("tol", 1e-7))
        return multinomial_pathfit(
            path.lambdas, path, effective_df=np.count_nonzero(path.coef, axis=(1, 2)).astype(float),
            df_kind="number of nonzero coefficients over every class (an upper bound where alpha < 1)", note=note)

    def predict_multinomial(self, fit: PathFit, Z) -> np.ndarray:
        from pipeline.models.multiclass import class_by_class   # the arithmetic a stored model repeats
        return class_by_class(predict_path, fit.model, "coef", Z)


SPARSE = SparseFamily()
