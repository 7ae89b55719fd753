"""The sparse family behind the common interface (pipeline.models.interface)."""
from __future__ import annotations

import numpy as np

from pipeline.models.interface import Family, PathFit
from pipeline.models.sparse.dual import lambda_max
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

    def grid(self, Z, t, loss, options: dict) -> np.ndarray:
        top = lambda_max(Z, t, loss, alpha=options.get("alpha", 1.0))
        return lambda_grid(top, options["n_lambdas"], options["lambda_ratio"])

    def fit_path(self, Z, t, loss, lambdas, options: dict) -> PathFit:
        path = fit_l1_path(Z, t, loss, lambdas, **{k: options[k] for k in _FIT_OPTIONS if k in options})
        lasso = options.get("alpha", 1.0) == 1.0
        return PathFit(
            lambdas=path.lambdas, intercept=path.intercept, coef=path.coef, n_nonzero=path.n_nonzero,
            effective_df=degrees_of_freedom(path, Z), certificate=path.certificate,
            df_kind="number of nonzero coefficients" if lasso else
            "elastic-net trace on the support (squared loss; nonzero count as upper bound otherwise)",
            certificate_kind=path.certificate_kind, converged=path.converged, status=path.status,
            solver=path.solver, fit_seconds=path.fit_seconds, model=path)

    def predict(self, fit: PathFit, Z) -> np.ndarray:
        return predict_path(fit.model, Z)


SPARSE = SparseFamily()
