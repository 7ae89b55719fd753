"""The plain-words paragraph per loss at the top of a report, from the stored report data alone
(so `penduel report RUN_ID` writes the same paragraph): which family, by how much in the metric's
unit, how sure, at what sparsity and stability, and every caveat that applies."""
from __future__ import annotations

from .comparisons import advantage_winner

GRID_END_TEXT = {"largest": "the largest λ of its grid (the most heavily penalised model)",
                 "smallest": "the smallest λ of its grid (the least penalised model)"}


def _g(x, digits: int = 3) -> str:
    return "—" if x is None else f"{x:.{digits}g}"


def _size(f) -> str:
    if f.get("n_nonzero") is not None:
        return f"{f['n_nonzero']} of {f['n_features']} features"
    return f"all {f['n_features']} features (effective df {_g(f.get('effective_df'))})"


def _stability(stab, family) -> str:
    s = ((stab or {}).get("families") or {}).get(family)
    if not s or s.get("stability") is None:
        return ""
    return f", stability index {_g(s['stability'], 2)}"


def paragraph(verdict: dict, fams: dict, first: str, second: str, decision: dict, fold_test: dict | None,
              stability: dict | None, level: float, n_test: int) -> str:
    """One paragraph for one loss. `fams` maps family key -> report-data family; `first`/`second` are
    the keys of the compared pair (sparse, ridge-type); differences are the first's advantage."""
    unit = f" {decision['unit']}" if decision.get("unit") else ""
    metric = decision["title"]
    lead = f"Judged on {metric}{unit and ' (' + unit.strip() + ')'}, because {decision['why']}."
    if verdict.get("diff") is None:
        only = next(iter(fams.values()))
        return (f"{lead} Only {only['title']} was fitted, so there is no comparison; it used {_size(only)}.")
    a, b = fams[first], fams[second]
    est_a, est_b = a["metrics"].get(decision["metric"]), b["metrics"].get(decision["metric"])
    low, high, adv = verdict["low"], verdict["high"], verdict["diff"]
    how = f"{level:.0%} interval {_g(low)} to {_g(high)}{unit}"
    win = None if low is None or high is None else advantage_winner(low, high)
    scores = f"{a['title']} {_g(est_a)}{unit}, {b['title']} {_g(est_b)}{unit}"
    if win is None:
        body = (f"Neither family is clearly better on the {n_test} held-out rows ({scores}; "
                f"{a['title']}'s advantage {_g(adv)}{unit}, {how}, which contains 0), so these data do not "
                f"decide between them.")
    else:
        better, worse = (a, b) if win == 0 else (b, a)
        body = (f"{better['title'][:1].upper() + better['title'][1:]} predicted better on the {n_test} held-out "
                f"rows ({scores}), by {_g(abs(adv))}{unit} ({how} for the sparse family's advantage, which "
                f"excludes 0).")
    sizes = (f" The sparse family kept {_size(a)}{_stability(stability, first)}; the ridge-type family uses "
             f"{_size(b)}{_stability(stability, second)}.")
    caveats = []
    if fold_test:
        fw = advantage_winner(fold_test["low"], fold_test["high"])
        if verdict.get("reconcile"):
            caveats.append(verdict["reconcile"])
        elif fw is not None:
            caveats.append(f"The fold-by-fold test agrees (p = {_g(fold_test['p_value'], 2)}).")
    for f in (a, b):
        end = f.get("grid_end")
        if end:
            caveats.append(f"Caution: cross-validation chose {GRID_END_TEXT.get(end, end)} for {f['title']}, "
                           f"so its result is not comparable at this setting — a wider grid might change it.")
    return " ".join([lead, body + sizes, *caveats])
