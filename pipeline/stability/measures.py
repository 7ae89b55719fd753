"""Stability of fitted models under resampling.

Selection probabilities and stable sets with the error bound of Meinshausen & Bühlmann
(2010, JRSS-B 72(4), Theorem 1); the stability estimator of Nogueira, Sechidis & Brown
(2018, JMLR 18(174)) with its asymptotic confidence interval; sign consistency;
prediction instability; and which groups of correlated features share selection.
"""
from __future__ import annotations

import numpy as np

from ..matrices import columns

# scipy is imported inside the functions that need it: config reads the scheme table from this
# package and should not pay for scipy.stats.


def selected(coefs: np.ndarray, tol: float = 0.0) -> np.ndarray:
    """Boolean selection indicator |coef| > tol, same shape as coefs. Indicators already made (a boolean
    array, read as weights 1 and 0) are returned as they are: the stage stacks a sparse family's resample
    paths as indicators, an eighth of their weights' memory."""
    coefs = np.asarray(coefs)
    if coefs.dtype == bool:
        return coefs if tol < 1.0 else np.zeros_like(coefs)
    return np.abs(np.asarray(coefs, dtype=float)) > tol


def selection_probabilities(coef_paths: np.ndarray, tol: float = 0.0) -> np.ndarray:
    """(B, L, p) coefficient paths over B resamples -> (L, p) fraction of resamples selecting each feature."""
    coef_paths = np.asarray(coef_paths)
    if coef_paths.ndim != 3:
        raise ValueError(f"coef_paths must have shape (B, L, p), got {coef_paths.shape}")
    return selected(coef_paths, tol).mean(axis=0)


def stable_set(probs: np.ndarray, threshold: float) -> np.ndarray:
    """Indices of features whose selection probability reaches threshold at some λ.

    probs: (p,) or (L, p) restricted to the λ range in use; the maximum over λ is taken,
    as in Meinshausen & Bühlmann's stable set {k : max_λ Π_k^λ ≥ π_thr}.
    """
    probs = np.asarray(probs, dtype=float)
    best = probs.max(axis=0) if probs.ndim == 2 else probs
    return np.flatnonzero(best >= threshold)


def mb_error_bound(q: float, threshold: float, p: int) -> float:
    """Upper bound q² / ((2π_thr − 1) p) on the expected number of falsely selected features.

    q is the average number of features selected (union over the λ range) per subsample.
    Meinshausen & Bühlmann (2010), Theorem 1; needs 1/2 < π_thr ≤ 1, subsamples of size n/2,
    exchangeable noise features and a selector better than random guessing.
    """
    if not 0.5 < threshold <= 1.0:
        raise ValueError(f"threshold must be in (0.5, 1], got {threshold}")
    if p < 1 or q < 0 or q > p:
        raise ValueError(f"need 0 <= q <= p and p >= 1, got q={q}, p={p}")
    return float(q) ** 2 / ((2.0 * threshold - 1.0) * p)


def union_sizes(coef_paths: np.ndarray, tol: float = 0.0) -> np.ndarray:
    """(L,) average over resamples of |union of supports over the first ℓ+1 λ values|, λ decreasing."""
    hits = np.logical_or.accumulate(selected(coef_paths, tol), axis=1)
    return hits.sum(axis=2).mean(axis=0)


def lambda_range_for_error_bound(coef_paths: np.ndarray, lambdas: np.ndarray, threshold: float,
                                 target_ev: float, tol: float = 0.0, bound=None) -> dict:
    """The widest λ range [λ_lo, λ_max] of the grid whose error bound meets target_ev.

    `bound(q, threshold, p)` defaults to Meinshausen & Bühlmann's (pipeline.stability.bounds has the
    others, and which resampling each needs).

    The range always starts at the largest λ of the grid (the sparsest fits) and grows towards
    smaller λ while the bound q_Λ² / ((2π_thr − 1)p) stays at or below target_ev; q_Λ (the mean
    size of the union of supports over Λ) only grows as Λ widens, so the first violation ends it.
    Returns lambda_min/lambda_max (None when even the largest λ alone fails), the grid indices
    (in the caller's order), q, the bound, the largest q allowed, and the stable set over Λ.
    """
    coef_paths = np.asarray(coef_paths)     # weights, or their selection indicators (see selected)
    lambdas = np.asarray(lambdas, dtype=float)
    if coef_paths.ndim != 3 or coef_paths.shape[1] != lambdas.size:
        raise ValueError(f"coef_paths must be (B, {lambdas.size}, p), got {coef_paths.shape}")
    if target_ev <= 0:
        raise ValueError(f"target_ev must be positive, got {target_ev}")
    p = coef_paths.shape[2]
    order = np.argsort(-lambdas, kind="stable")
    q_path = union_sizes(coef_paths[:, order], tol)
    bound = mb_error_bound if bound is None else bound
    bounds = np.array([bound(q, threshold, p) for q in q_path])
    ok = np.flatnonzero(np.cumprod(bounds <= target_ev))
    q_allowed = float(np.sqrt(target_ev * (2.0 * threshold - 1.0) * p))
    if ok.size == 0:
        return {"lambda_min": None, "lambda_max": None, "indices": np.array([], dtype=int),
                "q": float(q_path[0]), "bound": float(bounds[0]), "q_allowed": q_allowed,
                "stable_set": np.array([], dtype=int)}
    last = int(ok[-1])
    chosen = order[: last + 1]
    probs = selection_probabilities(coef_paths[:, chosen], tol)
    return {"lambda_min": float(lambdas[chosen].min()), "lambda_max": float(lambdas[chosen].max()),
            "indices": np.sort(chosen), "q": float(q_path[last]), "bound": float(bounds[last]),
            "q_allowed": q_allowed, "stable_set": stable_set(probs, threshold)}


def nogueira_stability(Z: np.ndarray, level: float = 0.95) -> dict:
    """Stability Φ̂ of M selected sets with an asymptotic confidence interval.

    Z: (M, p) binary, row m marks the features selected on resample m. Nogueira, Sechidis &
    Brown (2018): Φ̂ = 1 − mean_f s_f² / ((k̄/p)(1 − k̄/p)) with s_f² the unbiased variance of
    column f and k̄ the mean set size. Φ̂ is asymptotically normal (their Section 5); its variance
    here is the delta-method estimate from each row's influence, checked by simulated coverage
    in tests/test_stability.py. Φ̂ is 1 for identical sets and has expectation 0 for random sets of a
    fixed size; it is undefined (NaN) when every row is empty or every row is full.
    """
    from scipy import stats

    Z = np.asarray(Z, dtype=float)
    if Z.ndim != 2 or Z.shape[0] < 2:
        raise ValueError(f"Z must be (M, p) with M >= 2, got shape {Z.shape}")
    if not np.isin(Z, (0.0, 1.0)).all():
        raise ValueError("Z must be binary (0/1)")
    M, p = Z.shape
    freq = Z.mean(axis=0)
    sizes = Z.sum(axis=1)
    k_bar = sizes.mean()
    denom = (k_bar / p) * (1.0 - k_bar / p)
    nan = float("nan")
    if denom == 0:
        return {"stability": nan, "variance": nan, "lower": nan, "upper": nan, "level": level, "M": M}
    phi_hat = 1.0 - (M / (M - 1.0)) * np.mean(freq * (1.0 - freq)) / denom
    # Delta method: influence of row m is ∇Φ(p̂)·Z_m; Var Φ̂ ≈ (1/M²) Σ_m (ψ_m − ψ̄)².
    psi = -((sizes - 2.0 * (Z @ freq)) / p - (1.0 - phi_hat) * (sizes / p) * (1.0 - 2.0 * k_bar / p)) / denom
    variance = np.sum((psi - psi.mean()) ** 2) / M**2
    half = stats.norm.ppf(0.5 + level / 2.0) * np.sqrt(variance)
    return {"stability": float(phi_hat), "variance": float(variance), "lower": float(phi_hat - half),
            "upper": float(phi_hat + half), "level": level, "M": M}


def top_k_sets(W: np.ndarray, k) -> np.ndarray:
    """(M, p) binary: the k largest |w| of each row (k an int or one per row); ties go to the lower index."""
    W = np.abs(np.asarray(W, dtype=float))
    M, p = W.shape
    k = np.broadcast_to(np.asarray(k, dtype=int), (M,))
    if (k < 0).any() or (k > p).any():
        raise ValueError(f"k must be within [0, {p}]")
    ranks = np.empty((M, p), dtype=int)
    ranks[np.arange(M)[:, None], np.argsort(-W, axis=1, kind="stable")] = np.arange(p)
    return (ranks < k[:, None]).astype(np.int8)


def sign_consistency(coefs: np.ndarray, tol: float = 0.0) -> np.ndarray:
    """Per feature, the share of resamples selecting it whose sign is the majority sign.

    coefs: (M, ...) over M resamples -> (...); 1 means the sign never flips; NaN where the
    feature is never selected.
    """
    coefs = np.asarray(coefs, dtype=float)
    pos = (coefs > tol).sum(axis=0)
    neg = (coefs < -tol).sum(axis=0)
    total = pos + neg
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, np.maximum(pos, neg) / total, np.nan)


def held_out_matrix(n: int, eval_rows: list[np.ndarray], eval_preds: list[np.ndarray]) -> np.ndarray:
    """(M, n) predictions placed at their rows, NaN where resample m made no held-out prediction."""
    out = np.full((len(eval_rows), n), np.nan)
    for m, (rows, pred) in enumerate(zip(eval_rows, eval_preds)):
        out[m, np.asarray(rows)] = pred
    return out


def prediction_instability(preds: np.ndarray) -> float:
    """Mean over data rows of the variance (ddof=1) of their held-out predictions across resamples.

    preds: (M, m), NaN where a row was in the fit (no held-out prediction); rows with fewer
    than two held-out predictions are left out. NaN when no row has two.
    """
    preds = np.asarray(preds, dtype=float)
    counts = np.sum(~np.isnan(preds), axis=0)
    usable = counts >= 2
    if not usable.any():
        return float("nan")
    return float(np.mean(np.nanvar(preds[:, usable], axis=0, ddof=1)))


def correlated_groups(X: np.ndarray, features: np.ndarray, min_abs_corr: float) -> list[np.ndarray]:
    """Connected components of the graph |corr(x_a, x_b)| ≥ min_abs_corr among the given features."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    features = np.asarray(features, dtype=int)
    if features.size == 0:
        return []
    cols = columns(X, features)   # dense or sparse design: only these columns are densified
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = np.corrcoef(cols, rowvar=False) if features.size > 1 else np.ones((1, 1))
    adjacency = np.nan_to_num(np.abs(np.atleast_2d(corr))) >= min_abs_corr
    _, labels = connected_components(csr_matrix(adjacency), directed=False)
    return [features[labels == g] for g in np.unique(labels)]


def correlated_groups_sharing(Z: np.ndarray, X: np.ndarray, min_abs_corr: float = 0.7,
                              min_frequency: float = 0.1) -> list[dict]:
    """Groups of correlated features among which the resamples spread their selection.

    Z: (M, p) binary selections (one λ); X: (n, p) the design the features come from. Features
    selected in at least min_frequency of resamples are linked when |correlation| ≥ min_abs_corr;
    every connected group of two or more shares selection and is reported with its members'
    frequencies, the share of resamples selecting any member, the mean number of members
    selected together (near 1: members stand in for each other; near the group size: picked
    together) and the substitution share: resamples that pick a member but not the most
    frequent one. Sorted by any-member frequency.
    """
    Z = np.asarray(Z, dtype=bool)
    freq = Z.mean(axis=0)
    frequent = np.flatnonzero(freq >= min_frequency)
    groups = []
    for members in correlated_groups(X, frequent, min_abs_corr):
        if members.size < 2:
            continue
        any_member = float(Z[:, members].any(axis=1).mean())
        groups.append({
            "features": members.tolist(),
            "frequencies": freq[members].tolist(),
            "any_member_frequency": any_member,
            "mean_members_selected": float(Z[:, members].sum(axis=1).mean()),
            "substitution": any_member - float(freq[members].max()),
        })
    return sorted(groups, key=lambda g: -g["any_member_frequency"])


def family_stability(coefs: np.ndarray, held_out_preds: np.ndarray | None = None, k=None,
                     level: float = 0.95, tol: float = 0.0) -> dict:
    """Stability summary of one family at one λ over M resamples.

    coefs: (M, p) explicit-feature weights; the selected set is the support (k None, sparse
    family) or the k largest |w| per resample (k an int or one per resample, ridge family).
    held_out_preds: (M, n) with NaN on rows each fit saw. Sign agreement counts, over every
    selection made, the share that carries the feature's majority sign.
    """
    coefs = np.asarray(coefs, dtype=float)
    Z = selected(coefs, tol).astype(np.int8) if k is None else top_k_sets(coefs, k)
    chosen = np.where(Z.astype(bool), coefs, 0.0)
    per_feature = sign_consistency(chosen, tol)
    counts = Z.sum(axis=0)
    agree = float(np.nansum(per_feature * counts) / counts.sum()) if counts.sum() else float("nan")
    return {
        "index": nogueira_stability(Z, level),
        "mean_set_size": float(Z.sum(axis=1).mean()),
        "selection_frequency": Z.mean(axis=0),
        "sign_consistency": per_feature,
        "sign_agreement": agree,
        "prediction_instability": (float("nan") if held_out_preds is None
                                   else prediction_instability(held_out_preds)),
    }


def compare_families(support_coefs: np.ndarray, dense_coefs: np.ndarray, support_preds=None, dense_preds=None,
                     level: float = 0.95, tol: float = 0.0) -> dict:
    """Both families on identical resamples: the support sets of the family with exact zeros against,
    resample by resample, the same number of largest |w| of the dense fit (its top-k set, k = that
    resample's support size). Keys: "support" and "top_k"."""
    support = family_stability(support_coefs, support_preds, None, level, tol)
    k = selected(support_coefs, tol).sum(axis=1)
    return {"support": support, "top_k": family_stability(dense_coefs, dense_preds, k, level, tol)}

