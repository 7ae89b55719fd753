"""The ridge-type family behind the common interface (pipeline.models.interface).

Up to EXACT_MAX_ROWS training rows the path is exact (one eigendecomposition of the
n × n Gram); past it the family fits the Nyström low-rank route with N_LANDMARKS seeded
landmarks (O(n m²) instead of O(n³)) and says so in the fit's note.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from pipeline.kernels import KERNELS, gram
from pipeline.models.interface import Family, PathFit
from pipeline.models.ridge.nystrom import fit_nystrom_path, nystrom_spectrum
from pipeline.models.ridge.path import L2Path, fit_l2_path, l2_lambda_grid, predict_path, spectrum_lambda_grid

EXACT_MAX_ROWS = 8000      # training rows above which the low-rank route is used
N_LANDMARKS = 1000         # landmarks of the low-rank route


@dataclass(frozen=True)
class RidgeModel:
    """f = intercept + Σⱼ dual_coef[:, j] k(basis_j, ·): basis = training rows, or landmarks."""
    path: L2Path
    basis: np.ndarray
    kernel: str
    kernel_params: dict = field(default_factory=dict)

    def predict(self, Z) -> np.ndarray:
        return predict_path(self.path, gram(np.asarray(Z, float), self.basis, kernel=self.kernel,
                                            **self.kernel_params))


def _low_rank(options: dict, n: int) -> bool:
    return n > options.get("max_exact_rows", EXACT_MAX_ROWS)


class RidgeFamily(Family):
    key = "l2"
    title = "ridge-type (L2)"
    short = "L2"
    colour = "#D55E00"     # Okabe & Ito vermilion
    marker = "s"
    has_support = False
    selected_set = "top-k by |w|"
    selected_phrase = "among the k largest |w|"
    df_description = "trace of the hat matrix"
    tracked_settings = ("kernel",)
    grid_reads_loss = False
    gives_certificate = False

    def gram_mib(self, n_rows: int) -> float:
        if n_rows > EXACT_MAX_ROWS:   # low rank: Φ blocks and the m × m matrices only
            return (n_rows * N_LANDMARKS + 3 * N_LANDMARKS ** 2) * 8 / 2**20
        return n_rows ** 2 * 8 * 3 / 2**20   # K, its eigenvectors and one work copy

    def options(self, section, seed: int = 0) -> dict:
        return {"kernel": section.kernel, "kernel_params": tuple(sorted(section.kernel_params().items())),
                "n_lambdas": section.n_lambdas, "landmark_seed": int(seed)}

    def has_coefficients(self, options: dict) -> bool:
        # a kernel whose feature space is the fitted columns themselves gives f = b + Zw a weight per column
        return KERNELS[options["kernel"]].has_feature_weights

    def _kernel(self, options):
        return options["kernel"], dict(options.get("kernel_params", ()))

    def why_no_coefficients(self, options: dict) -> str:
        if self.has_coefficients(options):
            return ""
        kernel = KERNELS[options["kernel"]]
        return (f"with the {kernel.name} kernel the fit f = b + Σ cᵢ k(xᵢ, ·) has no weight per feature "
                f"(only a kernel K = ZZᵀ of the features themselves, such as linear, has one)")

    def grid(self, Z, t, loss, options: dict, widen=(0, 0)) -> np.ndarray:
        """Spaced in effective degrees of freedom from 1 to min(n, rank) − 1 (scale-free whatever the
        feature map or kernel); `widen` extends either end (see path.spectrum_lambda_grid)."""
        kernel, kp = self._kernel(options)
        if _low_rank(options, Z.shape[0]):
            d = nystrom_spectrum(Z, kernel, options.get("n_landmarks", N_LANDMARKS),
                                 options.get("landmark_seed", 0), **kp)
            return spectrum_lambda_grid(d, Z.shape[0], options["n_lambdas"], widen=widen)
        return l2_lambda_grid(gram(Z, kernel=kernel, **kp), options["n_lambdas"],
                              fit_intercept=options.get("fit_intercept", True), widen=widen)

    def fit_path(self, Z, t, loss, lambdas, options: dict) -> PathFit:
        kernel, kp = self._kernel(options)
        Z = np.asarray(Z, dtype=float)
        note, solver = "", "representer"
        if _low_rank(options, Z.shape[0]):
            ny = fit_nystrom_path(Z, t, kernel, lambdas, options.get("n_landmarks", N_LANDMARKS),
                                  options.get("landmark_seed", 0), loss=loss, **kp)
            model = RidgeModel(ny.path, ny.landmarks, kernel, ny.kernel_params)
            solver = "nystrom"
            note = (f"{Z.shape[0]} training rows exceed {options.get('max_exact_rows', EXACT_MAX_ROWS)}: "
                    f"fitted by Nyström with m = {len(ny.landmarks)} seeded landmarks "
                    f"(Williams & Seeger 2001), O(n m²) instead of O(n³)")
        else:
            path = fit_l2_path(gram(Z, kernel=kernel, **kp), t, loss, lambdas,
                               fit_intercept=options.get("fit_intercept", True),
                               on_psd_fail=options.get("on_psd_fail", "raise"))
            model = RidgeModel(path, Z, kernel, kp)
        path = model.path
        # f = b + Σ cⱼ k(zⱼ, x) with k(z, x) = zᵀx is f = b + xᵀ(Σ cⱼ zⱼ)
        coef = path.dual_coef @ model.basis if self.has_coefficients(options) else None
        return PathFit(
            lambdas=path.lambdas, intercept=path.intercept, coef=coef, n_nonzero=None,
            effective_df=path.effective_df, df_kind=path.df_kind, certificate=None, certificate_kind="",
            converged=path.converged, status=path.status, solver=solver, fit_seconds=path.fit_seconds,
            loo_error=path.loo_error, gcv=path.gcv, note=note, model=model)

    def predict(self, fit: PathFit, Z) -> np.ndarray:
        return fit.model.predict(Z)


RIDGE = RidgeFamily()
