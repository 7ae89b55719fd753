"""The ridge-type family behind the common interface (pipeline.models.interface).

Up to `families.l2.exact_max_rows` training rows the path is exact (one eigendecomposition
of the n × n Gram); past it the family fits the Nyström low-rank route with
`families.l2.n_landmarks` seeded landmarks (O(n m²) instead of O(n³)), says so in the fit's
note, and `route_check` measures how far that route is from the exact one on a subsample.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from pipeline.kernels import KERNELS, gram
from pipeline.matrices import as_features, dense, times_rows
from pipeline.models.interface import Family, PathFit
from pipeline.models.ridge.multinomial import fit_multinomial_kernel_path
from pipeline.models.ridge.nystrom import fit_nystrom_path, nystrom_gap, nystrom_spectrum
from pipeline.models.ridge.path import L2Path, fit_l2_path, l2_lambda_grid, predict_path, spectrum_lambda_grid

LOW_RANK_SETTINGS = {"max_exact_rows": "exact_max_rows", "n_landmarks": "n_landmarks", "gap_rows": "gap_rows"}


def low_rank_setting(options: dict, key: str) -> int:
    """A low-rank setting from the fit options, else its default in the config (families.l2)."""
    if key in options:
        return int(options[key])
    from pipeline.config.sections import L2Spec   # defaults live in the config only
    return int(L2Spec.model_fields[LOW_RANK_SETTINGS[key]].default)


@dataclass(frozen=True)
class RidgeModel:
    """f = intercept + Σⱼ dual_coef[:, j] k(basis_j, ·): basis = training rows, or landmarks."""
    path: L2Path
    basis: np.ndarray
    kernel: str
    kernel_params: dict = field(default_factory=dict)

    def predict(self, Z) -> np.ndarray:
        return predict_path(self.path, gram(Z, self.basis, kernel=self.kernel, **self.kernel_params))


@dataclass(frozen=True)
class RidgeMultinomialModel(RidgeModel):
    """The multinomial path: scores f_k = b_k + Σⱼ dual_coef[:, j, k] k(basis_j, ·), (L, m, K)."""

    def predict(self, Z) -> np.ndarray:
        from pipeline.models.multiclass import class_by_class   # the arithmetic a stored model repeats
        return class_by_class(predict_path, self.path, "dual_coef",
                              gram(Z, self.basis, kernel=self.kernel, **self.kernel_params))


def _low_rank(options: dict, n: int) -> bool:
    if "low_rank" in options:          # fixed for a whole experiment by for_training_rows
        return bool(options["low_rank"])
    return n > low_rank_setting(options, "max_exact_rows")


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

    def gram_mib(self, n_rows: int, options: dict | None = None) -> float:
        options = options or {}
        if _low_rank(options, n_rows):
            # Φ (n × m, held whole by the non-squared losses), the m × m matrices, and the exact fit
            # on the gap-check subsample (its K, eigenvectors and one work copy)
            m, sub = low_rank_setting(options, "n_landmarks"), min(n_rows, low_rank_setting(options, "gap_rows"))
            return (n_rows * m + 3 * m ** 2 + 3 * sub ** 2) * 8 / 2**20
        return n_rows ** 2 * 8 * 3 / 2**20   # K, its eigenvectors and one work copy

    def for_training_rows(self, options: dict, n_train: int) -> dict:
        # one route for the final fit, every CV fold and every resample, chosen on the whole training set
        return {**options, "low_rank": _low_rank(options, n_train)}

    def memory_hint(self, n_rows: int, options: dict | None = None) -> str:
        options = options or {}
        if _low_rank(options, n_rows):
            return (f"That is already the low-rank route's memory (an n × m factor with families.l2.n_landmarks = "
                    f"{low_rank_setting(options, 'n_landmarks')} landmarks, the exact check on "
                    f"families.l2.gap_rows = {low_rank_setting(options, 'gap_rows')} rows); lower those")
        return (f"The exact route holds the n × n Gram; lower families.l2.exact_max_rows (now "
                f"{low_rank_setting(options, 'max_exact_rows')}) to take the low-rank route")

    def options(self, section, seed: int = 0) -> dict:
        return {"kernel": section.kernel, "kernel_params": tuple(sorted(section.kernel_params().items())),
                "n_lambdas": section.path.points, "landmark_seed": int(seed),
                **{key: int(getattr(section, name)) for key, name in LOW_RANK_SETTINGS.items()}}

    def needs_dense(self, options: dict) -> str:
        if options.get("low_rank"):
            return "its low-rank (Nyström) route reads dense rows"
        if not KERNELS[options["kernel"]].sparse_input:
            return (f"the {options['kernel']} kernel reads dense rows; only the linear kernel, a product of the "
                    f"features, takes them sparse")
        return ""

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
            d = nystrom_spectrum(Z, kernel, low_rank_setting(options, "n_landmarks"),
                                 options.get("landmark_seed", 0), **kp)
            return spectrum_lambda_grid(d, Z.shape[0], options["n_lambdas"], widen=widen)
        return l2_lambda_grid(gram(Z, kernel=kernel, **kp), options["n_lambdas"],
                              fit_intercept=options.get("fit_intercept", True), widen=widen,
                              factors=getattr(loss, "row_factors", None))

    def fit_path(self, Z, t, loss, lambdas, options: dict) -> PathFit:
        kernel, kp = self._kernel(options)
        Z = as_features(Z) if not self.needs_dense(options) else dense(Z)
        note, solver = "", "representer"
        if _low_rank(options, Z.shape[0]):
            ny = fit_nystrom_path(Z, t, kernel, lambdas, low_rank_setting(options, "n_landmarks"),
                                  options.get("landmark_seed", 0), loss=loss, **kp)
            model = RidgeModel(ny.path, ny.landmarks, kernel, ny.kernel_params)
            solver = "nystrom"
            note = (f"the experiment's training rows exceed {low_rank_setting(options, 'max_exact_rows')} "
                    f"(families.l2.exact_max_rows): "
                    f"fitted by Nyström with m = {len(ny.landmarks)} seeded landmarks "
                    f"(Williams & Seeger 2001), O(n m²) instead of O(n³)")
        else:
            path = fit_l2_path(gram(Z, kernel=kernel, **kp), t, loss, lambdas,
                               fit_intercept=options.get("fit_intercept", True),
                               on_psd_fail=options.get("on_psd_fail", "raise"))
            model = RidgeModel(path, Z, kernel, kp)
        path = model.path
        # f = b + Σ cⱼ k(zⱼ, x) with k(z, x) = zᵀx is f = b + xᵀ(Σ cⱼ zⱼ)
        coef = times_rows(path.dual_coef, model.basis.T) if self.has_coefficients(options) else None
        return PathFit(
            lambdas=path.lambdas, intercept=path.intercept, coef=coef, n_nonzero=None,
            effective_df=path.effective_df, df_kind=path.df_kind, certificate=None, certificate_kind="",
            converged=path.converged, status=path.status, solver=solver, fit_seconds=path.fit_seconds,
            loo_error=path.loo_error, gcv=path.gcv, note=note, model=model)

    def predict(self, fit: PathFit, Z) -> np.ndarray:
        return fit.model.predict(Z)

    # K > 2 classes with a multinomial loss (logistic): one softmax fit of every class on one
    # eigendecomposition of the Gram (exact route; the low-rank route fits one versus the rest)
    fits_multinomial = True

    def takes_multinomial(self, options: dict, n_rows: int) -> bool:
        return not _low_rank(options, n_rows)

    def multinomial_grid(self, Z, codes, n_classes, loss, options: dict, widen=(0, 0)) -> np.ndarray:
        return self.grid(Z, codes, loss, options, widen=widen)

    def fit_multinomial(self, Z, codes, n_classes, loss, lambdas, options: dict) -> PathFit:
        from pipeline.models.multiclass import multinomial_pathfit
        kernel, kp = self._kernel(options)
        Z = as_features(Z)     # a sparse matrix stays sparse (the linear kernel's Gram reads it as is)
        path = fit_multinomial_kernel_path(gram(Z, kernel=kernel, **kp), codes, n_classes, lambdas,
                                           fit_intercept=options.get("fit_intercept", True))
        model = RidgeMultinomialModel(path, Z, kernel, kp)
        coef = np.stack([np.asarray(Z.T @ c) for c in path.dual_coef]) if self.has_coefficients(options) else None
        return multinomial_pathfit(path.lambdas, path, effective_df=path.effective_df, df_kind=path.df_kind,
                                   coef=coef, model=model)

    def predict_multinomial(self, fit: PathFit, Z) -> np.ndarray:
        return fit.model.predict(Z)

    def route_check(self, n_rows: int, training, lambdas, options: dict) -> str:
        """On the low-rank route: how far it is from the exact route, measured on a seeded subsample
        of the training rows (`training()` gives their features and scaled targets). Measured with the
        squared loss's leave-one-out error, whatever loss was fitted (the closed form gives both routes
        exactly). Empty on the exact route."""
        if not _low_rank(options, n_rows):
            return ""
        kernel, kp = self._kernel(options)
        Z, t = training()
        m, sub = low_rank_setting(options, "n_landmarks"), low_rank_setting(options, "gap_rows")
        gap = nystrom_gap(Z, t, kernel, lambdas, m, sub, options.get("landmark_seed", 0), **kp)
        return (f"low-rank (Nyström) route on {n_rows} training rows with {m} landmarks; on a seeded subsample "
                f"of {gap['subsample']} rows with {gap['n_landmarks']} landmarks its best leave-one-out squared "
                f"error is {gap['relative_gap'] * 100:+.2g} % from the exact route's "
                f"({gap['nystrom_best_loo']:.4g} against {gap['exact_best_loo']:.4g}; largest gap over the λ grid "
                f"{gap['max_relative_gap_on_grid'] * 100:.2g} %)")


RIDGE = RidgeFamily()
