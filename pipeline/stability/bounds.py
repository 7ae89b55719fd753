"""Error bounds for stable sets, and which one a resampling scheme supports.

A bound is shown only where its assumptions hold. `bound_for(scheme, fraction)` reads the scheme's
properties (pipeline.stability.schemes.SCHEME_TABLE), never its name:

- disjoint complementary halves (``paired``): Shah & Samworth (2013, JRSS-B 75(1), 55–80),
  Theorem 1, the worst-case bound. With θ = q/p it reads E|Ŝ_CPSS ∩ L_θ| ≤ q² / ((2τ − 1) p),
  where L_θ are the features whose selection probability on half the rows is at most θ. It needs
  no exchangeability and no "better than random guessing" condition. Beside it the report shows
  their improved bound under unimodality of the selection proportions (`ss_unimodal_bound`).
- other subsamples of half the rows without replacement (``half_size`` with fraction 1/2):
  Meinshausen & Bühlmann (2010, JRSS-B 72(4)), Theorem 1: E[V] ≤ q² / ((2π − 1) p), under
  exchangeable noise features and a selector better than random guessing.
- anything else (the bootstrap, a fraction other than 1/2): no bound, and the reason is said.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from .measures import mb_error_bound


def ss_worst_case_bound(q: float, threshold: float, p: int) -> float:
    """Shah & Samworth (2013), Theorem 1 with θ = q/p: θ · q / (2τ − 1) = q² / ((2τ − 1) p)."""
    return mb_error_bound(q, threshold, p)   # the same number, proved without exchangeability


def ss_unimodal_bound(q: float, threshold: float, p: int, n_pairs: int) -> float | None:
    """Shah & Samworth (2013), improved bound when every Π̂_B(k), k ∈ L_θ, has a unimodal distribution:
    E|Ŝ_CPSS ∩ L_θ| ≤ C(τ, B) θ q with θ = q/p and

        C(τ, B) = 1 / (2 (2τ − 1 − 1/(2B)))        for τ ∈ (min(½ + θ², ½ + 1/(2B) + ¾θ²), ¾]
        C(τ, B) = 4 (1 − τ + 1/(2B)) / (1 + 1/B)   for τ ∈ (¾, 1],

    for θ ≤ 1/√3 (the constant as stated in the paper, from memory, and as coded in the stabs R
    package's `um_const`, Hofner & Hothorn). Π̂_B takes values in multiples of 1/(2B), so
    {Π̂_B ≥ τ} is {Π̂_B ≥ τ'} with τ' = ⌈2Bτ⌉/(2B), and τ' is the level the constant is read at.
    None when τ' or θ is outside the range the bound covers.
    """
    B = int(n_pairs)
    if B < 1 or p < 1 or not 0 <= q <= p:
        raise ValueError(f"need B >= 1, p >= 1 and 0 <= q <= p; got B={n_pairs}, p={p}, q={q}")
    tau = math.ceil(round(2 * B * threshold, 9)) / (2 * B)
    theta = q / p
    if theta > 1 / math.sqrt(3) or tau > 1:
        return None
    if tau <= 0.75:
        if tau <= min(0.5 + theta ** 2, 0.5 + 1 / (2 * B) + 0.75 * theta ** 2):
            return None
        constant = 1.0 / (2.0 * (2.0 * tau - 1.0 - 1.0 / (2 * B)))
    else:
        constant = 4.0 * (1.0 - tau + 1.0 / (2 * B)) / (1.0 + 1.0 / B)
    return constant * theta * q


@dataclass(frozen=True)
class ErrorBound:
    key: str
    title: str             # how the report names it, with its source
    bounds: str            # what it bounds, in words
    formula: str
    value: Callable[[float, float, int], float]   # (q, threshold, p) -> bound


MEINSHAUSEN_BUHLMANN = ErrorBound(
    "meinshausen_buhlmann", "Meinshausen & Bühlmann (2010), Theorem 1",
    "the expected number of falsely selected features E[V], assuming exchangeable noise features and a "
    "selector better than random guessing", "E[V] ≤ q² / ((2π − 1) p)", mb_error_bound)
SHAH_SAMWORTH = ErrorBound(
    "shah_samworth", "Shah & Samworth (2013), Theorem 1 (worst case, complementary pairs)",
    "the expected number of selected features whose selection probability on half the rows is at most "
    "q/p (no exchangeability assumption)", "E|Ŝ ∩ L_q/p| ≤ q² / ((2π − 1) p)", ss_worst_case_bound)


def bound_for(scheme, fraction: float) -> tuple[ErrorBound | None, str]:
    """The bound whose assumptions this resampling meets, or None and the reason none is shown."""
    if scheme.with_replacement:
        return None, (f"{scheme.name.replace('_', ' ')} resamples draw rows with replacement; the stable-set "
                      f"bounds of Meinshausen & Bühlmann (2010) and Shah & Samworth (2013) are proved for "
                      f"subsamples of half the rows without replacement, so no bound is shown")
    if not scheme.half_size or fraction != 0.5:
        return None, (f"resamples of {fraction:g} of the training rows; the stable-set bounds are proved for "
                      f"subsamples of half the rows (stability.fraction 0.5), so no bound is shown")
    return (SHAH_SAMWORTH if scheme.paired else MEINSHAUSEN_BUHLMANN), ""
