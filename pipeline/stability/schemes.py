"""Resampling schemes as a table: each scheme's name, description, draw function and properties.

Both families are fitted on the same index arrays, so their stability is compared on
identical resamples. Complementary pairs follow Shah & Samworth (2013, JRSS-B 75(1)).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np


def _by_class(n: int, y) -> list[np.ndarray]:
    if y is None:
        return [np.arange(n)]
    y = np.asarray(y)
    if y.shape != (n,):
        raise ValueError(f"y must have shape ({n},), got {y.shape}")
    return [np.flatnonzero(y == label) for label in np.unique(y)]


def _subsample(rng, strata, fraction):
    parts = []
    for rows in strata:
        size = int(np.floor(fraction * rows.size))
        if size < 1:
            raise ValueError(f"fraction {fraction} leaves no row of a group of {rows.size}")
        parts.append(rng.choice(rows, size=size, replace=False))
    return np.sort(np.concatenate(parts))


def _bootstrap(rng, strata):
    return np.sort(np.concatenate([rng.choice(rows, size=rows.size, replace=True) for rows in strata]))


def _complementary_pair(rng, strata):
    # Shah & Samworth: a random split into two disjoint halves of size floor(n/2) each.
    first, second = [], []
    for rows in strata:
        half = rows.size // 2
        if half < 1:
            raise ValueError(f"a group of {rows.size} row(s) cannot be split into two halves")
        order = rng.permutation(rows)
        first.append(order[:half])
        second.append(order[half:2 * half])
    return np.sort(np.concatenate(first)), np.sort(np.concatenate(second))


def _draw_subsamples(rng, strata, n_resamples, fraction):
    return [_subsample(rng, strata, fraction) for _ in range(n_resamples)]


def _draw_bootstrap(rng, strata, n_resamples, fraction):
    return [_bootstrap(rng, strata) for _ in range(n_resamples)]


def _draw_pairs(rng, strata, n_resamples, fraction):
    if n_resamples % 2:
        raise ValueError(f"complementary pairs need an even n_resamples, got {n_resamples}")
    if fraction != 0.5:
        raise ValueError(f"complementary pairs use halves: fraction must be 0.5, got {fraction}")
    return [half for _ in range(n_resamples // 2) for half in _complementary_pair(rng, strata)]


@dataclass(frozen=True)
class Scheme:
    """A resampling scheme. `draw(rng, strata, n_resamples, fraction)` -> sorted row-index arrays."""

    name: str
    description: str
    draw: Callable[..., list[np.ndarray]]
    with_replacement: bool      # rows may repeat within a resample
    half_size: bool             # resamples are n/2 rows when fraction is 1/2 (the Meinshausen–Bühlmann setting)
    paired: bool                # resamples come in disjoint complementary pairs (needs an even count)


SCHEME_TABLE: dict[str, Scheme] = {s.name: s for s in (
    Scheme("subsample", "floor(fraction · n) rows drawn without replacement", _draw_subsamples,
           with_replacement=False, half_size=True, paired=False),
    Scheme("bootstrap", "n rows drawn with replacement", _draw_bootstrap,
           with_replacement=True, half_size=False, paired=False),
    Scheme("complementary_pairs", "random splits into two disjoint halves (Shah & Samworth 2013)", _draw_pairs,
           with_replacement=False, half_size=True, paired=True),
)}
SCHEMES = tuple(SCHEME_TABLE)


def resample_indices(n: int, scheme: str = "subsample", n_resamples: int = 100, fraction: float = 0.5,
                     rng: Any = None, y=None, groups=None) -> list[np.ndarray]:
    """Sorted row-index arrays, one per resample.

    subsample: floor(fraction * n) rows without replacement; bootstrap: n rows with replacement;
    complementary_pairs: n_resamples / 2 random splits into two disjoint halves, returned as
    [A1, A1', A2, A2', ...] (fraction must be 1/2). When y is given every draw is made within
    each class separately, so class proportions are kept. With `groups` (n,) the scheme draws whole
    groups instead of rows (classes are then not stratified): a row is in a resample exactly when its
    group is, as often as its group was drawn. rng: Generator, SeedSequence or int.
    """
    if scheme not in SCHEMES:
        raise ValueError(f"scheme must be one of {SCHEMES}, got {scheme!r}")
    if n < 2:
        raise ValueError(f"n must be at least 2, got {n}")
    if n_resamples < 1:
        raise ValueError(f"n_resamples must be >= 1, got {n_resamples}")
    if not 0 < fraction <= 1:
        raise ValueError(f"fraction must be in (0, 1], got {fraction}")
    rng = np.random.default_rng(rng)
    if groups is None:
        return SCHEME_TABLE[scheme].draw(rng, _by_class(n, y), n_resamples, fraction)
    groups = np.asarray(groups)
    if groups.shape != (n,):
        raise ValueError(f"groups must have shape ({n},), got {groups.shape}")
    codes, inverse = np.unique(groups, return_inverse=True)
    if len(codes) < 2:
        raise ValueError(f"resampling whole groups needs at least 2 groups, found {len(codes)}")
    members = [np.flatnonzero(inverse == g) for g in range(len(codes))]
    drawn = SCHEME_TABLE[scheme].draw(rng, [np.arange(len(codes))], n_resamples, fraction)
    return [np.sort(np.concatenate([members[g] for g in units])) for units in drawn]


def order_blocks(order) -> np.ndarray:
    """Block labels for time-ordered rows: the rows sorted by `order` cut into contiguous blocks of
    ceil(n^(1/3)) rows (the usual rate of block length for block resampling, Hall, Horowitz & Jing 1995;
    non-overlapping blocks as in Carlstein 1986). Resampling these blocks as groups keeps neighbours together."""
    order = np.asarray(order)
    n = len(order)
    length = max(1, int(np.ceil(n ** (1 / 3))))
    labels = np.empty(n, dtype=np.int64)
    labels[np.argsort(order, kind="stable")] = np.arange(n) // length
    return labels


def in_fit_mask(n: int, resamples: list[np.ndarray]) -> np.ndarray:
    """(M, n) boolean: True where row j was used in the fit of resample m."""
    mask = np.zeros((len(resamples), n), dtype=bool)
    for m, rows in enumerate(resamples):
        mask[m, rows] = True
    return mask


def held_out_rows(n: int, rows: np.ndarray) -> np.ndarray:
    """Rows of 0..n-1 not used by a resample (out-of-bag rows for the bootstrap)."""
    return np.setdiff1d(np.arange(n), rows)
