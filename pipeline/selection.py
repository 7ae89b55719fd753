"""Selection: cross-validation folds, λ selection rules (a table), the ridge-type family's
closed-form criteria and nested CV of the whole select-then-fit procedure.

The λ grid is indexed from the simplest model (largest λ, column 0) to the most
complex (smallest λ). A CV error table has one row per split and one column per λ;
a column holding any NaN is a λ where some fit failed, and it is never chosen,
because its mean would be over different folds than the others.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np


def _sklearn_seed(rng: np.random.Generator) -> int:
    # scikit-learn splitters take an int seed; draw it from the caller's Generator so the
    # folds follow the one SeedSequence tree.
    return int(rng.integers(0, 2**31 - 1))


def make_folds(
    n: int,
    n_folds: int,
    rng: np.random.Generator,
    y: np.ndarray | None = None,
    stratify: bool = False,
    repeats: int = 1,
    groups: np.ndarray | None = None,
    order: np.ndarray | None = None,
    gap: int = 0,
) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train_idx, val_idx) pairs of shuffled K-fold CV, repeated `repeats` times.

    With `stratify` the class proportions of `y` are kept in every fold (as far as the groups allow).
    With `groups` (n,) rows sharing a label are never on both sides of a fold. With `order` (n,) the
    folds are forward-chaining: the rows sorted by order are cut into n_folds + 1 blocks and fold k
    trains on blocks 0..k and validates on block k + 1, with the `gap` rows just before the
    validation block left out of training. The result depends only on the arguments and the state of `rng`.
    """
    if not 2 <= n_folds <= n:
        raise ValueError(f"n_folds must be between 2 and n={n}; got {n_folds}")
    if repeats < 1:
        raise ValueError(f"repeats must be at least 1; got {repeats}")
    if stratify and y is None:
        raise ValueError("stratify=True needs the labels y")
    labels = np.zeros(n) if y is None else np.asarray(y)
    if len(labels) != n:
        raise ValueError(f"y has {len(labels)} rows but n={n}")
    if order is not None:
        return _forward_chaining(np.asarray(order), n_folds, gap)
    if groups is None and not stratify:
        return shuffled_folds(n, n_folds, _sklearn_seed(rng), repeats)
    # imported here, where only a stratified or grouped design needs them: reading a config and `penduel
    # validate` on rows split at random load no scikit-learn
    from sklearn.model_selection import RepeatedStratifiedKFold, StratifiedGroupKFold, StratifiedKFold

    if groups is not None:
        groups = np.asarray(groups)
        n_groups = len(np.unique(groups))
        if n_groups < n_folds:
            raise ValueError(f"{n_groups} groups cannot fill {n_folds} folds; every fold needs a group of its own")
        out = []
        for _ in range(repeats):
            if stratify:
                splitter = StratifiedGroupKFold(n_folds, shuffle=True, random_state=_sklearn_seed(rng))
                out += [(tr, va) for tr, va in splitter.split(np.zeros((n, 1)), labels, groups)]
            else:
                out += _group_folds(groups, n_folds, rng)
        return out
    seed = _sklearn_seed(rng)
    if repeats == 1:
        splitter = StratifiedKFold(n_folds, shuffle=True, random_state=seed)
    else:
        splitter = RepeatedStratifiedKFold(n_splits=n_folds, n_repeats=repeats, random_state=seed)
    return [(tr, va) for tr, va in splitter.split(np.zeros((n, 1)), labels)]


# Rows split at random, written out with numpy's legacy RandomState so that they are the very rows
# scikit-learn's KFold(shuffle=True) / RepeatedKFold and train_test_split draw from the same int seed
# (tests/test_selection.py compares them) without loading scikit-learn, which costs about a second
# of every `penduel validate`.
def shuffled_folds(n: int, n_folds: int, seed: int, repeats: int = 1) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train, validation) row indices, both sorted: the rows shuffled by RandomState(seed) and cut into
    n_folds consecutive blocks, the first n % n_folds one row larger; each repeat shuffles again with the
    same RandomState."""
    state = np.random.RandomState(seed)
    sizes = np.full(n_folds, n // n_folds)
    sizes[:n % n_folds] += 1
    edges = np.concatenate([[0], np.cumsum(sizes)])
    out = []
    for _ in range(repeats):
        rows = np.arange(n)
        state.shuffle(rows)
        for k in range(n_folds):
            held = np.zeros(n, bool)
            held[rows[edges[k]:edges[k + 1]]] = True
            out.append((np.flatnonzero(~held), np.flatnonzero(held)))
    return out


def random_test_rows(n: int, n_test: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(training rows, test rows) in drawn order: the first n_test rows of RandomState(seed)'s permutation
    are held out, the rest train."""
    if not 0 < n_test < n:
        raise ValueError(f"{n_test} test row(s) of {n} leave no training row")
    rows = np.random.RandomState(seed).permutation(n)
    return rows[n_test:], rows[:n_test]


def _group_folds(groups: np.ndarray, n_folds: int, rng: np.random.Generator) -> list[tuple[np.ndarray, np.ndarray]]:
    """Whole groups dealt to folds: in a random order, largest first, each to the fold with fewest rows."""
    codes, inverse, counts = np.unique(groups, return_inverse=True, return_counts=True)
    shuffled = rng.permutation(len(codes))
    dealt = shuffled[np.argsort(-counts[shuffled], kind="stable")]
    fold_of, sizes = np.empty(len(codes), int), np.zeros(n_folds, int)
    for g in dealt:
        k = int(np.argmin(sizes))
        fold_of[g], sizes[k] = k, sizes[k] + counts[g]
    row_fold = fold_of[inverse]
    return [(np.flatnonzero(row_fold != k), np.flatnonzero(row_fold == k)) for k in range(n_folds)]


def _forward_chaining(order: np.ndarray, n_folds: int, gap: int) -> list[tuple[np.ndarray, np.ndarray]]:
    positions = np.argsort(order, kind="stable")
    n = len(positions)
    edges = np.linspace(0, n, n_folds + 2).round().astype(int)
    folds = []
    for k in range(n_folds):
        start, stop = edges[k + 1], edges[k + 2]
        train_end = start - gap
        if train_end < 1:
            raise ValueError(f"split.gap = {gap} leaves no training rows before validation block {k + 1} "
                             f"(it starts at row {start} of {n} in time order); use a smaller gap or fewer folds")
        folds.append((np.sort(positions[:train_end]), np.sort(positions[start:stop])))
    return folds


def cv_summary(cv_errors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-column mean and standard error (std with ddof=1 over splits / √n_splits).

    Columns with any NaN get NaN for both. With repeated CV the splits are not
    independent, so this standard error is optimistic (common practice all the same).
    """
    errors = np.asarray(cv_errors, dtype=float)
    if errors.ndim != 2 or errors.shape[0] < 2:
        raise ValueError(f"cv_errors must be (n_splits >= 2, L); got shape {errors.shape}")
    mean = errors.mean(axis=0)
    se = errors.std(axis=0, ddof=1) / np.sqrt(errors.shape[0])
    return mean, se


def _rule_least_error(mean: np.ndarray, se: np.ndarray, valid: np.ndarray, best: int) -> int:
    return best


def _rule_one_standard_error(mean: np.ndarray, se: np.ndarray, valid: np.ndarray, best: int) -> int:
    within = valid & (mean <= mean[best] + se[best])
    return int(np.flatnonzero(within)[0])


@dataclass(frozen=True)
class Rule:
    """A λ selection rule: `choose(mean, se, valid, best)` -> column index, where `best` is the
    valid column of least mean CV error (the simplest one on ties). `phrase` completes "the λ
    chosen by ..." in the report; `marker` is the matplotlib marker of its pick in the figures."""

    name: str
    description: str
    choose: Callable[[np.ndarray, np.ndarray, np.ndarray, int], int]
    phrase: str
    marker: str


RULE_TABLE: dict[str, Rule] = {r.name: r for r in (
    Rule("least_error", "the λ of least mean CV error (the simplest one on ties)", _rule_least_error,
         "the least-CV-error rule", "D"),
    Rule("one_standard_error", "the simplest λ whose mean CV error is within one standard error of the least, "
         "the error bar being that of the least-error λ (ESL 2nd ed. §7.10)", _rule_one_standard_error,
         "the one-standard-error rule", "^"),
)}
RULES = tuple(RULE_TABLE)

def _loo_values(final, n_rows: int):
    return final.loo_error


def _gcv_values(final, n_rows: int):
    return final.gcv


def _gcv_classical_values(final, n_rows: int):
    # final.gcv = mean(r²)/(1 − (df + 1)/n)², the intercept counted in the trace; the classical
    # mean(r²)/(1 − df/n)² is the same residual over the other denominator (the pipeline always fits
    # the intercept of the ridge-type family)
    from .models.ridge.closed_form import classical_gcv_from_intercept_gcv

    return classical_gcv_from_intercept_gcv(final.gcv, final.effective_df, n_rows)


@dataclass(frozen=True)
class L2Criterion:
    """How the ridge-type family may pick λ for the squared loss. `values(final outcome, n training rows)`
    gives the (L,) values whose least is chosen; None means K-fold CV with the selection rule."""

    name: str
    description: str
    values: Callable | None


# Other losses always use K-fold CV. Both GCV choices have the same residual mean(r²) of the fit on all
# training rows (r = y − ŷ, intercept fitted, never penalised) and differ in the trace counted:
#   gcv           mean(r²)/(1 − (df + 1)/n)²: the trace of the whole hat matrix, intercept included
#                 (Golub, Heath & Wahba 1979, Technometrics 21(2), eq. (1.4) with A(λ) the full
#                 smoother of the centred problem plus the mean);
#   gcv_classical mean(r²)/(1 − df/n)², df = tr of the ridge smoother of the centred columns, intercept
#                 excluded: Golub, Heath & Wahba's V(λ) as the R package MASS computes it in lm.ridge
#                 returns RSS/(n − df)², this divided by n: the same minimiser). On small n the two differ.
L2_CRITERIA: dict[str, L2Criterion] = {c.name: c for c in (
    L2Criterion("cv", "K-fold CV with the selection rule", None),
    L2Criterion("loo", "exact leave-one-out error of the closed form", _loo_values),
    L2Criterion("gcv", "generalised cross-validation, intercept counted in the trace: mean(r²)/(1 − (df+1)/n)²",
                _gcv_values),
    L2Criterion("gcv_classical", "generalised cross-validation as Golub, Heath & Wahba (1979) and MASS "
                                 "lm.ridge: RSS/(n − df)², df without the intercept", _gcv_classical_values),
)}


def _least_valid(mean: np.ndarray) -> tuple[np.ndarray, int]:
    valid = np.isfinite(mean)
    if not valid.any():
        raise ValueError("every λ has a failed fit (NaN) in some split; nothing to choose")
    return valid, int(np.argmin(np.where(valid, mean, np.inf)))


def rule_choices(mean, se) -> dict[str, int]:
    """The column every rule of RULE_TABLE picks from a CV summary (mean and standard error per λ,
    NaN where a fit failed) — what the figures mark beside the chosen model."""
    mean, se = np.asarray(mean, dtype=float), np.asarray(se, dtype=float)
    valid, best = _least_valid(mean)
    return {name: rule.choose(mean, se, valid, best) for name, rule in RULE_TABLE.items()}


def choose_lambda_index(cv_errors: np.ndarray, rule: str = "least_error") -> int:
    """Column index chosen by `rule` (a name in RULE_TABLE)."""
    if rule not in RULE_TABLE:
        raise ValueError(f"unknown selection rule {rule!r}; allowed: {', '.join(RULES)}")
    mean, se = cv_summary(cv_errors)
    valid, best = _least_valid(mean)
    return RULE_TABLE[rule].choose(mean, se, valid, best)


# ---------------------------------------------------------------- nested CV
# Outer folds of the training rows; in each, inner folds choose λ and the outer-fold fit on all
# outer-training rows is scored on the outer test rows, which never take part in choosing λ.
# The splits run as ordinary fit tasks named "outer{o}.fold{k}" and "outer{o}.final".


def nested_splits(train_rows: np.ndarray, y_train, n_folds: int, rng: np.random.Generator,
                  stratify: bool, groups=None, order=None, gap: int = 0) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """(name, fit rows, evaluation rows) of every nested-CV split; `rng` is the `nested` stream.
    `groups` / `order` (aligned with train_rows) make both levels grouped / forward-chaining."""
    splits = []
    y_train = np.asarray(y_train)

    def design(rows):
        return dict(groups=None if groups is None else np.asarray(groups)[rows],
                    order=None if order is None else np.asarray(order)[rows], gap=gap)

    everything = np.arange(len(train_rows))
    for o, (otr, ote) in enumerate(make_folds(len(train_rows), n_folds, rng, y=y_train, stratify=stratify,
                                              **design(everything))):
        outer_train = train_rows[otr]
        inner = make_folds(len(outer_train), n_folds, rng, y=y_train[otr], stratify=stratify, **design(otr))
        splits += [(f"outer{o}.fold{k}", outer_train[tr], outer_train[va]) for k, (tr, va) in enumerate(inner)]
        splits.append((f"outer{o}.final", outer_train, train_rows[ote]))
    return splits


def nested_estimate(eval_loss_by_split: dict, n_folds: int, rule: str) -> dict:
    """Outer-fold held-out loss of the whole procedure (inner CV picks λ, refit on the outer fold),
    from the (L,) evaluation losses of the nested splits keyed by split name."""
    values = []
    for o in range(n_folds):
        inner = [eval_loss_by_split[f"outer{o}.fold{k}"] for k in range(n_folds)]
        idx = choose_lambda_index(np.vstack(inner), rule)
        values.append(float(eval_loss_by_split[f"outer{o}.final"][idx]))
    v = np.array(values)
    return {"mean": float(v.mean()), "se": float(v.std(ddof=1) / np.sqrt(len(v))), "outer": values}


# ---------------------------------------------------------------- the test split and its one-line statement


def test_split(n: int, test_fraction: float, seed: int, y=None, stratify: bool = False, groups=None, order=None,
               holdout=None, gap: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """(training rows, test rows), sorted. `holdout` (bool mask) fixes the test rows; `order` makes them the
    last rows in time (the `gap` rows before them are left out); `groups` keeps each group on one side
    (stratified by class where possible); otherwise a seeded random split, stratified for classification."""
    rows = np.arange(n)
    n_test = max(1, int(round(test_fraction * n)))
    if holdout is not None:
        tr, te = rows[~holdout], rows[holdout]
        if order is not None and gap:
            tr = tr[np.argsort(order[tr], kind="stable")][:max(0, len(tr) - gap)]
    elif order is not None:
        by_time = np.argsort(order, kind="stable")
        te, tr = by_time[n - n_test:], by_time[:max(0, n - n_test - gap)]
    elif groups is not None:
        n_parts = max(2, int(round(1 / test_fraction)))
        if len(np.unique(groups)) < n_parts:
            raise ValueError(f"{len(np.unique(groups))} groups are too few to hold out about {test_fraction:g} of "
                             f"the rows as whole groups (at least {n_parts} are needed)")
        if stratify:
            from sklearn.model_selection import StratifiedGroupKFold

            splitter = StratifiedGroupKFold(n_parts, shuffle=True, random_state=seed)
            tr, te = next(splitter.split(np.zeros((n, 1)), y, groups))
        else:
            tr, te = _group_folds(np.asarray(groups), n_parts, np.random.default_rng(seed))[0]
    elif stratify:
        from sklearn.model_selection import train_test_split

        tr, te = train_test_split(rows, test_size=n_test, random_state=seed, stratify=y)
    else:
        tr, te = random_test_rows(n, n_test, seed)
    return np.sort(tr), np.sort(te)


def design_line(kinds: tuple[str, ...], n_train: int, n_test: int, folds, gap: int = 0,
                forward: bool = False, grouped: bool = False) -> str:
    """One sentence: how the test rows and the CV folds were formed, with their sizes."""
    sizes = [(len(tr), len(va)) for tr, va in folds]
    span = (lambda v: f"{min(v)}" if min(v) == max(v) else f"{min(v)}–{max(v)}")
    how = ("forward-chaining" if forward else "grouped" if grouped else "shuffled") + " folds"
    fold_text = (f"{len(sizes)} {how} of {span([a for a, _ in sizes])} training / {span([b for _, b in sizes])} "
                 f"validation rows" + (f", {gap} row(s) left out between them" if gap else ""))
    design = "; ".join(kinds) if kinds else "rows split at random"
    return f"Design: {design}. Test set: {n_test} rows, training set: {n_train} rows; CV: {fold_text}."
