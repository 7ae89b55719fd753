"""Kernel functions, blockwise Gram matrices and the positive-semidefiniteness check.

`KERNELS` is the one table of kernels: each `Kernel` carries its name, block function,
formula, parameters with their defaults, and whether it has per-feature weights (only
``linear``: K = ΦΦᵀ). ``d`` is the Euclidean distance ‖x − z‖₂, ``d₁`` the Manhattan
distance ‖x − z‖₁, ``ℓ`` = ``bandwidth``. A new kernel is one `register_kernel(Kernel(...))`
call (see tests/test_registries.py for a toy one).

The Matérn and rbf forms follow the usual Gaussian-process parameterisation
(Rasmussen & Williams 2006, eq. 4.14 and 4.17). When ``bandwidth`` is not given it
is the median pairwise distance of the *training side* rows (``Z`` when given, else
``X``; Manhattan distance for ``laplacian``), so ``gram(X_test, X_train)`` and
``gram(X_train)`` agree. Call :func:`resolve_params` once on the training rows to
fix it explicitly.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable, Mapping

import numpy as np

from .matrices import as_features, dense

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


# Rows the median distance looks at: its cost is quadratic in them.
MEDIAN_MAX_ROWS = 2000


def median_bandwidth(X, rng=None, max_rows: int = MEDIAN_MAX_ROWS, metric: str = "euclidean") -> float:
    """Median of the nonzero pairwise distances of (a seeded subsample of) the rows of X.

    A common-practice default for the length scale of distance-based kernels and of the
    random Fourier feature map. ``rng`` None means a fixed seed, so the value is reproducible.
    """
    X = np.asarray(X, dtype=float)
    if X.shape[0] > max_rows:
        rng = np.random.default_rng(0) if rng is None else np.random.default_rng(rng)
        X = X[rng.choice(X.shape[0], size=max_rows, replace=False)]
    from scipy.spatial.distance import pdist   # scipy loads where a kernel is evaluated, not with the table

    dist = pdist(X, metric="cityblock" if metric == "manhattan" else metric)
    dist = dist[dist > 0]
    if dist.size == 0:
        return 1.0  # all rows identical: any scale gives the same constant Gram
    return float(np.median(dist))


@dataclass(frozen=True)
class Kernel:
    """One kernel: its block function, the parameters it takes and their defaults."""

    name: str
    block: Callable[[np.ndarray, np.ndarray, dict], np.ndarray]   # (rows, centres, resolved params) → K
    formula: str = ""
    params: tuple[str, ...] = ()
    # constants, or callables of the training rows, for parameters not given; a
    # "bandwidth" without a default is the median distance in `metric`
    defaults: Mapping[str, Any] = field(default_factory=dict)
    metric: str = "euclidean"
    # K = ΦΦᵀ of the features themselves, so a fit has one coefficient per feature
    has_feature_weights: bool = False
    # its block takes scipy sparse rows (a product of the features: ZZᵀ without densifying Z); other
    # kernels get dense rows
    sparse_input: bool = False

    def resolve(self, X_train, **params) -> dict:
        """Validate the parameter names and fill in the defaults from the training rows."""
        unknown = set(params) - set(self.params)
        if unknown:
            raise ValueError(f"kernel {self.name!r} takes no parameter(s) {sorted(unknown)}; "
                             f"allowed: {sorted(self.params) or 'none'}")
        X_train = as_features(X_train) if self.sparse_input else dense(X_train)
        out = dict(params)
        for name in self.params:
            if out.get(name) is not None:
                continue
            if name in self.defaults:
                default = self.defaults[name]
                out[name] = default(X_train) if callable(default) else default
            elif name == "bandwidth":
                out[name] = median_bandwidth(X_train, metric=self.metric)
        if "bandwidth" in out and not out["bandwidth"] > 0:
            raise ValueError(f"kernel bandwidth must be positive, got {out['bandwidth']!r}")
        return out


KERNELS: dict[str, Kernel] = {}


def register_kernel(kernel: Kernel) -> Kernel:
    """Add a kernel. Register before `pipeline.config` is imported: its choices are read once.

    Worker processes (backends other than local) know only the entries of the modules they
    import: a built-in entry belongs in this module's table.
    """
    if not kernel.name.isidentifier():
        raise ValueError(f"a kernel name is an identifier, got {kernel.name!r}")
    KERNELS[kernel.name] = kernel
    return kernel


def get_kernel(name: str) -> Kernel:
    if name not in KERNELS:
        raise ValueError(f"unknown kernel {name!r}; allowed: {', '.join(KERNELS)}")
    return KERNELS[name]


def resolve_params(X_train, kernel: str, **params) -> dict:
    """Fill in the defaults of ``kernel`` from the training rows; validate the names."""
    return get_kernel(kernel).resolve(X_train, **params)


def _distances(Xb, Z, p):
    # cdist subtracts before squaring: the expansion trick loses ~1e-8 near d = 0, which
    # the square root would pass on to the Matérn kernels.
    from scipy.spatial.distance import cdist

    r = cdist(Xb, Z)
    r /= p["bandwidth"]
    return r


def _rbf(Xb, Z, p):
    from sklearn.metrics.pairwise import euclidean_distances   # loaded by a fit, never by reading a config

    sq = euclidean_distances(Xb, Z, squared=True)
    return np.exp(sq * (-0.5 / p["bandwidth"] ** 2), out=sq)


def _laplacian(Xb, Z, p):
    from sklearn.metrics.pairwise import manhattan_distances

    d1 = manhattan_distances(Xb, Z)
    return np.exp(d1 * (-1.0 / p["bandwidth"]), out=d1)


def _matern32(Xb, Z, p):
    r = _distances(Xb, Z, p) * np.sqrt(3.0)
    return (1.0 + r) * np.exp(-r)


def _matern52(Xb, Z, p):
    r = _distances(Xb, Z, p) * np.sqrt(5.0)
    return (1.0 + r + r * r / 3.0) * np.exp(-r)


for _kernel in (
    Kernel("linear", lambda Xb, Z, p: dense(Xb @ Z.T), "xᵀz", has_feature_weights=True, sparse_input=True),
    Kernel("polynomial", lambda Xb, Z, p: (p["scale"] * (Xb @ Z.T) + p["coef0"]) ** p["degree"],
           "(scale·xᵀz + coef0)^degree", ("degree", "coef0", "scale"),
           {"degree": 3, "coef0": 1.0, "scale": lambda X: 1.0 / max(X.shape[1], 1)}),
    Kernel("rbf", _rbf, "exp(−d² / (2ℓ²)) (Gaussian)", ("bandwidth",)),
    Kernel("laplacian", _laplacian, "exp(−d₁ / ℓ) (exponential, L1)", ("bandwidth",), metric="manhattan"),
    Kernel("matern12", lambda Xb, Z, p: np.exp(-_distances(Xb, Z, p)), "exp(−d/ℓ) (Matérn ν = 1/2)",
           ("bandwidth",)),
    Kernel("matern32", _matern32, "(1 + √3 d/ℓ) exp(−√3 d/ℓ) (Matérn ν = 3/2)", ("bandwidth",)),
    Kernel("matern52", _matern52, "(1 + √5 d/ℓ + 5d²/(3ℓ²)) exp(−√5 d/ℓ) (Matérn ν = 5/2)", ("bandwidth",)),
):
    register_kernel(_kernel)


def __getattr__(name: str):
    if name == "KERNEL_NAMES":   # every registered kernel name, read when asked
        return tuple(KERNELS)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def gram(X, Z=None, kernel: str = "linear", block_rows: int = DEFAULT_BLOCK_ROWS,
         **params) -> np.ndarray:
    """K[i, j] = k(X_i, Z_j), computed in row blocks of X; Z None gives K(X, X). Sparse rows stay sparse
    for a kernel that takes them (Kernel.sparse_input) and are densified for the others."""
    k = get_kernel(kernel)
    rows = as_features if k.sparse_input else dense
    X = rows(X)
    symmetric = Z is None
    Z = X if symmetric else rows(Z)
    if X.shape[1] != Z.shape[1]:
        raise ValueError(f"X has {X.shape[1]} columns but Z has {Z.shape[1]}")
    p = k.resolve(Z, **params)
    K = np.empty((X.shape[0], Z.shape[0]))
    for start in range(0, X.shape[0], block_rows):
        stop = min(start + block_rows, X.shape[0])
        K[start:stop] = k.block(X[start:stop], Z, p)
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
    import scipy.linalg

    ev = scipy.linalg.eigvalsh(0.5 * (K + K.T), check_finite=False)
    return psd_from_eigenvalues(ev, tol, on_fail, asym)
