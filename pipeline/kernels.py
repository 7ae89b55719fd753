"""Kernel functions, blockwise Gram matrices and the positive-semidefiniteness check.

Kernels (``KERNEL_NAMES``) and their parameters; ``d`` is the Euclidean distance
‖x − z‖₂, ``d₁`` the Manhattan distance ‖x − z‖₁, ``ℓ`` = ``bandwidth``:

=============  ==============================================  =====================
name           k(x, z)                                         parameters
=============  ==============================================  =====================
linear         xᵀz                                             —
polynomial     (scale·xᵀz + coef0)^degree                      degree=3, coef0=1,
                                                               scale=1/p
rbf            exp(−d² / (2ℓ²))          (Gaussian)            bandwidth
laplacian      exp(−d₁ / ℓ)              (exponential, L1)     bandwidth
matern12       exp(−d/ℓ)                 (Matérn ν = 1/2)      bandwidth
matern32       (1 + √3 d/ℓ) exp(−√3 d/ℓ) (Matérn ν = 3/2)      bandwidth
matern52       (1 + √5 d/ℓ + 5d²/(3ℓ²)) exp(−√5 d/ℓ)           bandwidth
=============  ==============================================  =====================

The Matérn and rbf forms follow the usual Gaussian-process parameterisation
(Rasmussen & Williams 2006, eq. 4.14 and 4.17). When ``bandwidth`` is not given it
is the median pairwise distance of the *training side* rows (``Z`` when given, else
``X``; Manhattan distance for ``laplacian``), so ``gram(X_test, X_train)`` and
``gram(X_train)`` agree. Call :func:`resolve_params` once on the training rows to
fix it explicitly.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np
import scipy.linalg
from scipy.spatial.distance import cdist, pdist
from sklearn.metrics.pairwise import euclidean_distances, manhattan_distances

KERNEL_NAMES: tuple[str, ...] = (
    "linear", "polynomial", "rbf", "laplacian", "matern12", "matern32", "matern52",
)
BANDWIDTH_KERNELS = frozenset({"rbf", "laplacian", "matern12", "matern32", "matern52"})
_ALLOWED_PARAMS = {
    "linear": set(),
    "polynomial": {"degree", "coef0", "scale"},
    **{name: {"bandwidth"} for name in BANDWIDTH_KERNELS},
}
# Rows per block: bounds the temporaries of a block to about block_rows × m floats.
DEFAULT_BLOCK_ROWS = 1024


class KernelNotPSDError(ValueError):
    """A Gram matrix whose smallest eigenvalue is too negative relative to its largest."""


@dataclass(frozen=True)
class PSDReport:
    min_eigenvalue: float
    max_eigenvalue: float
    ratio: float          # min / max (0 when max is 0)
    tol: float
    passed: bool          # ratio >= -tol
    asymmetry: float      # max |K - Kᵀ| / max |K|

    def message(self) -> str:
        return (f"Gram matrix smallest/largest eigenvalue ratio is {self.ratio:.3e} "
                f"(smallest {self.min_eigenvalue:.3e}, largest {self.max_eigenvalue:.3e}); "
                f"allowed down to {-self.tol:.1e}. The kernel is not positive semidefinite "
                f"on these rows: choose another kernel or parameters, or loosen the tolerance.")


def median_bandwidth(X, rng=None, max_rows: int = 2000, metric: str = "euclidean") -> float:
    """Median of the nonzero pairwise distances of (a seeded subsample of) the rows of X.

    A common-practice default for the length scale of distance-based kernels.
    ``rng`` None means a fixed seed, so the value is reproducible.
    """
    X = np.asarray(X, dtype=float)
    if X.shape[0] > max_rows:
        rng = np.random.default_rng(0) if rng is None else np.random.default_rng(rng)
        X = X[rng.choice(X.shape[0], size=max_rows, replace=False)]
    dist = pdist(X, metric="cityblock" if metric == "manhattan" else metric)
    dist = dist[dist > 0]
    if dist.size == 0:
        return 1.0  # all rows identical: any scale gives the same constant Gram
    return float(np.median(dist))


def resolve_params(X_train, kernel: str, **params) -> dict:
    """Fill in the defaults of ``kernel`` from the training rows; validate the names."""
    if kernel not in KERNEL_NAMES:
        raise ValueError(f"unknown kernel {kernel!r}; allowed: {', '.join(KERNEL_NAMES)}")
    unknown = set(params) - _ALLOWED_PARAMS[kernel]
    if unknown:
        raise ValueError(f"kernel {kernel!r} takes no parameter(s) {sorted(unknown)}; "
                         f"allowed: {sorted(_ALLOWED_PARAMS[kernel]) or 'none'}")
    X_train = np.asarray(X_train, dtype=float)
    out = dict(params)
    if kernel in BANDWIDTH_KERNELS and out.get("bandwidth") is None:
        metric = "manhattan" if kernel == "laplacian" else "euclidean"
        out["bandwidth"] = median_bandwidth(X_train, metric=metric)
    if kernel == "polynomial":
        out.setdefault("degree", 3)
        out.setdefault("coef0", 1.0)
        if out.get("scale") is None:
            out["scale"] = 1.0 / max(X_train.shape[1], 1)
    if "bandwidth" in out and not out["bandwidth"] > 0:
        raise ValueError(f"kernel bandwidth must be positive, got {out['bandwidth']!r}")
    return out


def _kernel_block(Xb: np.ndarray, Z: np.ndarray, kernel: str, p: dict) -> np.ndarray:
    if kernel == "linear":
        return Xb @ Z.T
    if kernel == "polynomial":
        return (p["scale"] * (Xb @ Z.T) + p["coef0"]) ** p["degree"]
    ell = p["bandwidth"]
    if kernel == "rbf":
        sq = euclidean_distances(Xb, Z, squared=True)
        return np.exp(sq * (-0.5 / ell**2), out=sq)
    if kernel == "laplacian":
        d1 = manhattan_distances(Xb, Z)
        return np.exp(d1 * (-1.0 / ell), out=d1)
    # cdist subtracts before squaring: the expansion trick loses ~1e-8 near d = 0, which
    # the square root would pass on to these kernels.
    r = cdist(Xb, Z)
    r /= ell
    if kernel == "matern12":
        return np.exp(-r, out=r)
    if kernel == "matern32":
        r *= np.sqrt(3.0)
        return (1.0 + r) * np.exp(-r)
    r *= np.sqrt(5.0)  # matern52
    return (1.0 + r + r * r / 3.0) * np.exp(-r)


def gram(X, Z=None, kernel: str = "linear", block_rows: int = DEFAULT_BLOCK_ROWS,
         **params) -> np.ndarray:
    """K[i, j] = k(X_i, Z_j), computed in row blocks of X; Z None gives K(X, X)."""
    X = np.asarray(X, dtype=float)
    symmetric = Z is None
    Z = X if symmetric else np.asarray(Z, dtype=float)
    if X.shape[1] != Z.shape[1]:
        raise ValueError(f"X has {X.shape[1]} columns but Z has {Z.shape[1]}")
    p = resolve_params(Z, kernel, **params)
    K = np.empty((X.shape[0], Z.shape[0]))
    for start in range(0, X.shape[0], block_rows):
        stop = min(start + block_rows, X.shape[0])
        K[start:stop] = _kernel_block(X[start:stop], Z, kernel, p)
    if symmetric:
        # Distances computed by expansion are not exactly symmetric; make K so.
        K += K.T
        K *= 0.5
    return K


def feature_gram(blocks: Iterable[Callable[[np.ndarray], np.ndarray]], X, Z=None):
    """K = Σ_b Φ_b(X) Φ_b(Z)ᵀ over feature blocks, so the full Φ is never held.

    ``blocks`` yields callables, each mapping rows to one block of feature columns
    (for example one seeded slice of random Fourier features). With ``Z`` given it
    returns ``(K(X, X), K(Z, X))`` from one pass, for fitting on X and predicting Z.
    """
    X = np.asarray(X, dtype=float)
    K = np.zeros((X.shape[0], X.shape[0]))
    K_cross = None if Z is None else np.zeros((np.asarray(Z).shape[0], X.shape[0]))
    for phi in blocks:
        Px = np.asarray(phi(X), dtype=float)
        K += Px @ Px.T
        if K_cross is not None:
            K_cross += np.asarray(phi(Z), dtype=float) @ Px.T
    K += K.T
    K *= 0.5
    return K if K_cross is None else (K, K_cross)


def random_fourier_blocks(n_features_in: int, n_components: int, bandwidth: float,
                          seed=0, block_size: int = 10_000):
    """Seeded blocks of random Fourier features for the rbf kernel (Rahimi & Recht 2007).

    φ(x) = √(2/D) cos(Wᵀx + u), W ~ N(0, ℓ⁻² I), u ~ U[0, 2π); E φ(x)ᵀφ(z) = rbf(x, z).
    Each block draws from its own child of one SeedSequence, so a block is the
    same whichever pass or worker evaluates it.
    """
    children = np.random.SeedSequence(seed).spawn((n_components + block_size - 1) // block_size)
    scale = np.sqrt(2.0 / n_components)

    def make(child, width):
        def phi(X):
            rng = np.random.default_rng(child)
            W = rng.normal(scale=1.0 / bandwidth, size=(n_features_in, width))
            u = rng.uniform(0.0, 2.0 * np.pi, size=width)
            out = X @ W
            out += u
            np.cos(out, out=out)
            out *= scale
            return out
        return phi

    widths = [min(block_size, n_components - i * block_size) for i in range(len(children))]
    return [make(c, w) for c, w in zip(children, widths)]


def psd_from_eigenvalues(eigenvalues, tol: float = 1e-8, on_fail: str = "raise",
                         asymmetry: float = 0.0) -> PSDReport:
    """PSD verdict from already computed eigenvalues (the L2 path has them anyway)."""
    if on_fail not in ("raise", "warn", "ignore"):
        raise ValueError(f"on_fail must be 'raise', 'warn' or 'ignore', got {on_fail!r}")
    ev = np.asarray(eigenvalues, dtype=float)
    lo, hi = float(ev.min()), float(ev.max())
    ratio = lo / hi if hi > 0 else (0.0 if lo == 0 else -np.inf)
    report = PSDReport(lo, hi, ratio, tol, bool(ratio >= -tol), asymmetry)
    if not report.passed:
        if on_fail == "raise":
            raise KernelNotPSDError(report.message())
        if on_fail == "warn":
            warnings.warn(report.message(), RuntimeWarning, stacklevel=2)
    return report


def psd_check(K, tol: float = 1e-8, on_fail: str = "raise") -> PSDReport:
    """Smallest / largest eigenvalue of the symmetric part of K; raise, warn or just report.

    ``on_fail`` is ``"raise"`` (KernelNotPSDError giving the value), ``"warn"`` or
    ``"ignore"``. The check is of ratio = λ_min / λ_max ≥ −tol.
    """
    K = np.asarray(K, dtype=float)
    if K.ndim != 2 or K.shape[0] != K.shape[1]:
        raise ValueError(f"a Gram matrix must be square, got shape {K.shape}")
    scale = float(np.abs(K).max()) or 1.0
    asym = float(np.abs(K - K.T).max()) / scale
    ev = scipy.linalg.eigvalsh(0.5 * (K + K.T), check_finite=False)
    return psd_from_eigenvalues(ev, tol, on_fail, asym)
