"""More than two classes for any model family.

Targets of K > 2 classes are integer codes 0..K−1 and a path's decision values are (L, m, K): column k
is the score of class k, and the predicted class is the argmax. How a loss goes beyond two classes is
declared on the loss (`Loss.multiclass`):

- "one_versus_rest" (hinge, squared hinge): K binary fits, class k coded +1 against every other class
  coded −1, all on ONE shared λ grid. A family whose grid reads the loss (the sparse family) takes the
  largest of the K per-class grids, whose top is the largest per-class λ_max (every class is all-zero
  there); a family whose grid does not read the loss (the ridge-type family) has one grid anyway.
- "multinomial" (logistic: softmax cross-entropy): one fit of all classes together, by the family's own
  multinomial fitter where it declares one (`Family.fits_multinomial`, with `multinomial_grid`,
  `fit_multinomial`, `predict_multinomial`). A family without one fits that loss one versus the rest
  too, and the fit's note says so.

The K fits are packed into one `PathFit`: coef (L, p, K) or None, intercept (L, K), n_nonzero (L,)
the features nonzero in ANY class (how a feature counts as selected with several classes), effective
df (L,) summed over the classes, certificate (L,) the worst class's, converged (L,) all classes'.
`SeveralClasses(family, K)` is the family as every caller sees it for K > 2 classes; `for_classes`
gives the family itself for two classes (or regression), so that path is untouched.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np
from scipy.special import logsumexp

from pipeline.models.interface import PathFit

ONE_VERSUS_REST = "one_versus_rest"
MULTINOMIAL = "multinomial"
# what each way of fitting K classes is called in notes and the report
STRATEGY_TEXT = {ONE_VERSUS_REST: "one versus the rest", MULTINOMIAL: "multinomial (softmax)"}
SELECTED_SENTENCE = ("With several classes a feature counts as selected when its weight is nonzero in any class; "
                     "the ridge-type family's top-k set ranks features by the Euclidean norm of their weights "
                     "across the classes.")


@dataclass(frozen=True)
class ClassFits:
    """The family's own path of every class against the rest (read back by `SeveralClasses.predict`)."""
    fits: tuple[PathFit, ...]


def class_targets(codes, k: int) -> np.ndarray:
    """Class k coded +1, every other class −1 (the binary problem of class k against the rest)."""
    return np.where(np.asarray(codes) == k, 1.0, -1.0)


def _combined_status(fits) -> tuple[str, ...]:
    out = []
    for per_class in zip(*(f.status for f in fits)):
        if len(set(per_class)) == 1:
            out.append(per_class[0])
        else:
            out.append("; ".join(f"class {k}: {s}" for k, s in enumerate(per_class)))
    return tuple(out)


def pack(fits, note: str = "") -> PathFit:
    """K per-class paths on one λ grid → one PathFit (see the module docstring for the shapes)."""
    first = fits[0]
    coef = None if any(f.coef is None for f in fits) else np.stack([f.coef for f in fits], axis=-1)
    n_nonzero = None
    if coef is not None and first.n_nonzero is not None:
        n_nonzero = np.count_nonzero(np.any(coef != 0, axis=2), axis=1)
    certificate = None
    if all(f.certificate is not None for f in fits):
        certificate = np.max(np.stack([np.asarray(f.certificate, float) for f in fits]), axis=0)
    return PathFit(
        lambdas=first.lambdas, intercept=np.stack([np.asarray(f.intercept, float) for f in fits], axis=-1),
        coef=coef, n_nonzero=n_nonzero,
        effective_df=np.sum([np.asarray(f.effective_df, float) for f in fits], axis=0),
        df_kind=f"{first.df_kind}, summed over the {len(fits)} one-versus-rest fits",
        certificate=certificate, certificate_kind=first.certificate_kind and
        f"{first.certificate_kind} (the worst of the {len(fits)} classes)",
        converged=np.all(np.stack([np.asarray(f.converged, bool) for f in fits]), axis=0),
        status=_combined_status(fits), solver=first.solver, fit_seconds=float(sum(f.fit_seconds for f in fits)),
        note="; ".join(t for t in (note, first.note) if t), model=ClassFits(tuple(fits)), multiclass=ONE_VERSUS_REST)


def multinomial_pathfit(lambdas, path, *, effective_df, df_kind: str, coef=None, model=None, note: str = "") -> PathFit:
    """A multinomial solver's path (fields as agreed for them: intercept (L, K), converged, status, fit_seconds,
    and where it has them coef (L, p, K), n_nonzero, certificate, certificate_kind, solver) as the PathFit
    every caller reads; `model` is what the family's predict_multinomial reads back (default: the path)."""
    return PathFit(
        lambdas=np.asarray(lambdas, float), intercept=np.asarray(path.intercept, float),
        coef=coef if coef is not None else getattr(path, "coef", None), n_nonzero=getattr(path, "n_nonzero", None),
        effective_df=np.asarray(effective_df, float), df_kind=df_kind, certificate=getattr(path, "certificate", None),
        certificate_kind=getattr(path, "certificate_kind", ""), converged=np.asarray(path.converged, bool),
        status=tuple(path.status), solver=getattr(path, "solver", MULTINOMIAL), fit_seconds=float(path.fit_seconds),
        note=note, model=path if model is None else model, multiclass=MULTINOMIAL)


class SeveralClasses:
    """A model family fitted on K > 2 classes; every other property is the family's own."""

    def __init__(self, family, n_classes: int):
        self.family = family
        self.n_classes = int(n_classes)

    def __getattr__(self, name):
        return getattr(self.family, name)

    def strategy(self, loss, options: dict | None = None, n_rows: int = 0) -> str:
        """How this family fits `loss` on several classes: the loss's declared way where the family can
        (on these options and training rows, when given)."""
        # the multinomial fitters take no row weights: a weighted loss goes one versus the rest
        if loss.multiclass == MULTINOMIAL and self.family.fits_multinomial and loss.row_factors is None and (
                options is None or self.family.takes_multinomial(options, n_rows)):
            return MULTINOMIAL
        return ONE_VERSUS_REST

    def note(self, loss, options: dict | None = None, n_rows: int = 0) -> str:
        way = self.strategy(loss, options, n_rows)
        text = f"{self.n_classes} classes fitted {STRATEGY_TEXT[way]}"
        declared = loss.multiclass or ONE_VERSUS_REST     # a loss that declares nothing: one versus the rest
        if way != declared:
            text += (f" (the {loss.name} loss is declared {STRATEGY_TEXT[declared]}, but this family's route for "
                     f"these settings (or with row weights) has no multinomial fitter, so each class is fitted against the rest on one "
                     f"shared λ grid)")
        elif way == ONE_VERSUS_REST:
            text += " on one shared λ grid"
        return text

    def grid(self, Z, t, loss, options: dict, widen=(0, 0)) -> np.ndarray:
        if self.strategy(loss, options, Z.shape[0]) == MULTINOMIAL:
            return self.family.multinomial_grid(Z, t, self.n_classes, loss, options, widen=widen)
        if not self.family.grid_reads_loss:
            return self.family.grid(Z, t, loss, options, widen=widen)
        grids = [self.family.grid(Z, class_targets(t, k), loss, options, widen=widen) for k in range(self.n_classes)]
        return max(grids, key=lambda g: g[0])    # one shared grid: from the largest per-class λ_max down

    def fit_path(self, Z, t, loss, lambdas, options: dict) -> PathFit:
        note = self.note(loss, options, Z.shape[0])
        if self.strategy(loss, options, Z.shape[0]) == MULTINOMIAL:
            fit = self.family.fit_multinomial(Z, t, self.n_classes, loss, lambdas, options)
            return dataclasses.replace(fit, multiclass=MULTINOMIAL, note="; ".join(x for x in (note, fit.note) if x))
        fits = [self.family.fit_path(Z, class_targets(t, k), loss, lambdas, options) for k in range(self.n_classes)]
        return pack(fits, note)

    def predict(self, fit: PathFit, Z) -> np.ndarray:
        """Decision values (L, m, K)."""
        if isinstance(fit.model, ClassFits):
            return np.stack([self.family.predict(f, Z) for f in fit.model.fits], axis=-1)
        return self.family.predict_multinomial(fit, Z)


def class_by_class(predict_one, path, weights: str, *args) -> np.ndarray:
    """(L, m, K) scores of a path whose `weights` field ("coef" or "dual_coef") and intercept carry a class
    axis last, predicted one class at a time by the family's binary `predict_one(path, *args)` — the same
    arithmetic, bit for bit, as a stored model's class-by-class prediction."""
    def part(a, k):
        return np.ascontiguousarray(np.asarray(a)[..., k])
    K = np.shape(path.intercept)[-1]
    return np.stack([predict_one(SimpleNamespace(**{weights: part(getattr(path, weights), k)},
                                                 intercept=part(path.intercept, k)), *args) for k in range(K)], axis=-1)


def for_classes(family, n_classes: int):
    """The family as fitted on `n_classes` classes: itself for two (or 0, regression)."""
    return SeveralClasses(family, n_classes) if n_classes > 2 else family


# ---------------------------------------------------------------- losses and weights of several classes
def row_losses(loss, codes, F, strategy: str) -> np.ndarray:
    """Per-row loss of decision values F (m, K) for class codes: the softmax cross-entropy for a
    multinomial fit, the sum over classes of each one-versus-rest fit's binary loss otherwise."""
    F = np.asarray(F, float)
    codes = np.asarray(codes).astype(int)
    if strategy == MULTINOMIAL:
        return logsumexp(F, axis=1) - F[np.arange(len(codes)), codes]
    return np.sum([loss.value(class_targets(codes, k), F[:, k]) for k in range(F.shape[1])], axis=0)


def path_losses(loss, t, F_path, strategy: str = "", weights=None) -> np.ndarray:
    """(L,) mean held-out loss along a path of decision values: (L, m) for one output, (L, m, K) for K classes;
    weighted by the rows' `weights` where given."""
    if np.ndim(F_path) == 3:
        return np.array([np.average(row_losses(loss, t, F, strategy), weights=weights) for F in F_path])
    return np.array([np.average(loss.value(t, f), weights=weights) for f in F_path])


def output_scale(builder, coef, intercept):
    """FeatureBuilder.to_output_scale for a (L, p) path, or class by class for a (L, p, K) one."""
    if np.ndim(coef) == 3:
        parts = [builder.to_output_scale(coef[..., k], intercept[..., k]) for k in range(coef.shape[2])]
        return np.stack([w for w, _ in parts], axis=-1), np.stack([b for _, b in parts], axis=-1)
    return builder.to_output_scale(coef, intercept)


def selection_weights(coef, path: bool = True):
    """Weights per feature for selection, of a path (L, p) or of one λ (p,) (path=False), returned as they
    are; with a class axis last ((L, p, K) or (p, K)) the Euclidean norm across the classes — nonzero
    exactly where some class uses the feature, and the size the ridge-type top-k set ranks by."""
    if coef is None or np.ndim(coef) < (3 if path else 2):
        return coef
    return np.linalg.norm(coef, axis=-1)
