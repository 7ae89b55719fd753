"""The resampling stage: both families refitted on identical resamples of the training rows.

Each resample is one more fit task per (loss, family), run and cached like the CV fits, marked
selection_only (the family may certify support and signs instead of a duality gap); its
held-out rows are the test rows (never in any resample), so prediction instability is measured
on rows no fit saw. The summary reads the fits at each family's chosen λ.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from .. import seeds
from ..models.families import FAMILIES
from ..models.multiclass import SELECTED_SENTENCE, selection_weights
from .bounds import bound_for, ss_unimodal_bound
from .measures import (compare_families, correlated_groups_sharing, family_stability,
                       lambda_range_for_error_bound, prediction_instability, selected, selection_probabilities)
from .schemes import SCHEME_TABLE, resample_indices

TOP_FEATURES = 20
# the family whose fits select a support, and the one compared with it by its top-k |w| set
SUPPORT_FAMILY = next(f.key for f in FAMILIES if f.has_support)
TOP_K_FAMILY = next(f.key for f in FAMILIES if not f.has_support)
# The families whose resample fits are read along the whole λ path (stability paths, the error-control
# λ range); every other family's resample fits are read at its chosen λ only, so they are fitted there only.
READ_ALONG_PATH = frozenset(f.key for f in FAMILIES if f.has_support)


def resample_grid(family: str, lambdas, chosen_index: int) -> tuple[np.ndarray, int]:
    """The λ values a family's resample fits are fitted at, and where its chosen λ sits among them."""
    lambdas = np.asarray(lambdas, dtype=float)
    if family in READ_ALONG_PATH:
        return lambdas, int(chosen_index)
    return lambdas[chosen_index:chosen_index + 1], 0


def resample_grids(results, labels) -> dict:
    """(loss label, family) -> the λ grid of its resample fits, for every result whose loss is resampled:
    planned once cross-validation has settled each grid and its chosen λ."""
    return {(r.loss_label, r.family): resample_grid(r.family, r.lambdas, r.chosen_index)[0]
            for r in results if r.loss_label in labels}


def with_resamples(results, tasks, outcomes) -> list:
    """The results with their resample fits attached (in the order of the resamples' names)."""
    found: dict[tuple, dict] = {}
    for t, o in zip(tasks, outcomes):
        found.setdefault((t.loss_label, t.family), {})[t.split] = o
    return [dataclasses.replace(r, resamples=tuple(o for _, o in sorted(found.get((r.loss_label, r.family),
                                                                                  {}).items())))
            for r in results]

def stability_losses(spec) -> tuple[str, ...]:
    if not spec.stability.enabled:
        return ()
    labels = [loss.label for loss in spec.losses]
    wanted = spec.stability.losses or (labels[0],)
    unknown = [w for w in wanted if w not in labels]
    if unknown:
        from ..data import DataError
        raise DataError(f"stability.losses: {unknown} not among the experiment's losses ({labels}); "
                        f"use the labels shown there (e.g. 'huber_delta1').")
    return tuple(wanted)


def resample_splits(spec, train_rows: np.ndarray, test_rows: np.ndarray, y_train, task: str, groups=None) -> list:
    st = spec.stability
    strata = y_train if task == "classification" else None
    rows = resample_indices(len(train_rows), st.scheme, st.n_resamples, st.fraction,
                            rng=seeds.generator(spec.seed, "resampling"), y=strata, groups=groups)
    return [(f"resample{m}", train_rows[r], test_rows) for m, r in enumerate(rows)]


def _names(feature_names, idx):
    return [str(feature_names[j]) for j in idx]


@dataclass(frozen=True)
class StabilityResult:
    summaries: dict = field(default_factory=dict)        # loss label -> what the report shows
    selection_paths: dict = field(default_factory=dict)  # (loss label, family) -> (L, p) selection probabilities


def coefficient_gaps(spec) -> dict:
    """family key -> why its fits have no weight per feature ("" when they have), asked of the family."""
    out = {}
    for f in FAMILIES:
        options = f.options(getattr(spec.families, f.key))
        out[f.key] = "" if f.has_coefficients(options) else (f.why_no_coefficients(options) or
                                                              "its fits have no weight per feature")
    return out


def stability_stage(spec, results, feature_names, train_features) -> StabilityResult:
    """Summaries of every loss whose fits were resampled. `train_features()` builds the training
    rows' feature matrix (for correlated groups) only when some loss needs it."""
    summaries, paths = {}, {}
    Z_train = None
    by_loss: dict[str, dict] = {}
    for r in results:
        if r.resamples:
            by_loss.setdefault(r.loss_label, {})[r.family] = r
    gaps = coefficient_gaps(spec)
    for label, d in by_loss.items():
        if Z_train is None:
            Z_train = train_features()
        found: dict = {}
        several = any(o.multiclass for r in d.values() for o in r.resamples)
        summaries[label] = summarise_families(spec, {f: [_per_feature(o) for o in r.resamples] for f, r in d.items()},
                                              {f: r.lambdas for f, r in d.items()},
                                              {f: resample_grid(f, r.lambdas, r.chosen_index)[1]
                                               for f, r in d.items()}, feature_names, Z_train,
                                              paths_out=found, gaps=gaps)
        if several:   # weights of several classes: norms across the classes, which carry no sign
            summaries[label]["several_classes"] = SELECTED_SENTENCE
            for row in summaries[label]["families"].values():
                if "sign_agreement" in row:
                    row["sign_agreement"] = None
        paths.update({(label, f): p for f, p in found.items()})
    return StabilityResult(summaries, paths)


def _per_feature(outcome):
    """A resample fit with one weight per feature: with K > 2 classes the norm across the classes
    (nonzero where any class uses the feature; the top-k set ranks by it), see models.multiclass."""
    if outcome.coef is None or np.ndim(outcome.coef) < 3:
        return outcome
    return dataclasses.replace(outcome, coef=selection_weights(outcome.coef))


def _error_control(st, paths, lambdas, feature_names) -> dict:
    """The stable-set bound whose assumptions this resampling meets, or the reason none is shown."""
    bound, reason = bound_for(SCHEME_TABLE[st.scheme], st.fraction)
    if bound is None:
        return {"shown": False, "reason": reason}
    control = lambda_range_for_error_bound(paths, lambdas, st.threshold, st.target_false_selections,
                                           bound=bound.value)
    out = {"shown": True, "source": bound.title, "meaning": bound.bounds, "formula": bound.formula,
           "lambda_min": control["lambda_min"], "lambda_max": control["lambda_max"], "q": control["q"],
           "bound": control["bound"], "q_allowed": control["q_allowed"],
           "stable_set": _names(feature_names, control["stable_set"])}
    if SCHEME_TABLE[st.scheme].paired:
        out["unimodal"] = ss_unimodal_bound(control["q"], st.threshold, paths.shape[2], st.n_resamples // 2)
    return out


def summarise_families(spec, outcomes_by_family: dict, lambdas_by_family: dict, chosen: dict,
                       feature_names, Z_train: np.ndarray | None, paths_out: dict | None = None,
                       gaps: dict | None = None) -> dict:
    """The report's stability summary of one loss. When `paths_out` is given, the (L, p) selection
    probabilities along each family's path are returned in it, keyed by family. `gaps` (family key ->
    reason) names the families whose fits have no weight per feature: their per-feature stability is
    not applicable, and only their prediction instability is reported."""
    st = spec.stability
    gaps = dict(gaps or {})
    for f, outs in outcomes_by_family.items():
        if outs and outs[0].coef is None and not gaps.get(f):
            gaps[f] = "its fits have no weight per feature"
    out = {"scheme": st.scheme, "n_resamples": st.n_resamples, "fraction": st.fraction,
           "threshold": st.threshold, "target_false_selections": st.target_false_selections,
           "group_correlation": st.group_correlation}
    l1, l2 = outcomes_by_family.get(SUPPORT_FAMILY), outcomes_by_family.get(TOP_K_FAMILY)
    have_l1 = l1 is not None and not gaps.get(SUPPORT_FAMILY)
    have_l2 = l2 is not None and not gaps.get(TOP_K_FAMILY)
    if have_l1:
        paths = np.stack([selected(o.coef) for o in l1])          # (M, L, p) selection indicators
        probs = selection_probabilities(paths)                    # (L, p)
        if paths_out is not None:
            paths_out[SUPPORT_FAMILY] = probs
        idx = chosen[SUPPORT_FAMILY]
        top = np.argsort(-probs.max(0), kind="stable")[:TOP_FEATURES]
        at_chosen = probs[idx]
        freq_order = np.argsort(-at_chosen, kind="stable")[:TOP_FEATURES]
        out["l1_paths"] = {"lambdas": [float(x) for x in lambdas_by_family[SUPPORT_FAMILY]],
                           "names": _names(feature_names, top), "probabilities": probs[:, top].T.tolist()}
        out["frequency"] = {"names": _names(feature_names, freq_order), SUPPORT_FAMILY: at_chosen[freq_order].tolist()}
        out["error_control"] = _error_control(st, paths, lambdas_by_family[SUPPORT_FAMILY], feature_names)
        out["stable_at_chosen"] = _names(feature_names, np.flatnonzero(at_chosen >= st.threshold))
        if Z_train is not None:
            sel = np.stack([o.coef[idx] for o in l1]) != 0
            groups = correlated_groups_sharing(sel, Z_train, min_abs_corr=st.group_correlation, min_frequency=0.1)
            out["groups"] = [{"features": _names(feature_names, g["features"]),
                              "frequencies": [float(f) for f in g["frequencies"]],
                              "any_member_frequency": g["any_member_frequency"],
                              "mean_members_selected": g["mean_members_selected"]} for g in groups[:8]]
    out["families"] = _family_rows(outcomes_by_family, chosen, gaps, have_l1, have_l2, spec.report.level)
    if have_l1 and have_l2:
        l2_freq = out["families"][TOP_K_FAMILY].pop("selection_frequency")
        lookup = {str(n): j for j, n in enumerate(feature_names)}
        out["frequency"][TOP_K_FAMILY] = [float(l2_freq[lookup[n]]) for n in out["frequency"]["names"]]
    for row in out["families"].values():
        row.pop("selection_frequency", None)
    out["not_applicable"] = {f: gaps[f] for f in outcomes_by_family if gaps.get(f)}
    return out


def _family_rows(outcomes_by_family, chosen, gaps, have_l1, have_l2, level: float) -> dict:
    """One row per resampled family: per-feature stability where the family has weights per feature
    (the top-k set of the dense family needs the sparse family's support sizes), prediction
    instability for every family."""
    def preds(f):
        return np.stack([o.eval_pred[chosen[f]] for o in outcomes_by_family[f]])

    def coefs(f):
        return np.stack([o.coef[chosen[f]] for o in outcomes_by_family[f]])

    rows = {f: {"applicable": False, "reason": gaps.get(f) or "", "prediction_instability":
                prediction_instability(preds(f))} for f in outcomes_by_family}
    if have_l1 and have_l2:
        both = compare_families(coefs(SUPPORT_FAMILY), coefs(TOP_K_FAMILY), preds(SUPPORT_FAMILY), preds(TOP_K_FAMILY),
                               level=level)   # the report's one level
        rows[SUPPORT_FAMILY].update(_family_row(both["support"]))
        rows[TOP_K_FAMILY].update(_family_row(both["top_k"]))
    elif have_l1:
        rows[SUPPORT_FAMILY].update(_family_row(family_stability(coefs(SUPPORT_FAMILY), preds(SUPPORT_FAMILY), None,
                                                                  level)))
    if have_l2 and not have_l1:
        rows[TOP_K_FAMILY]["reason"] = ("its selected set is its k largest |w| with k the sparse family's "
                                        "support size on the same resample, and the sparse family was not "
                                        "resampled with weights per feature")
    return rows


def _family_row(summary: dict) -> dict:
    idx = summary["index"]
    return {"applicable": True, "reason": "", "stability": idx["stability"], "lower": idx["lower"],
            "upper": idx["upper"], "level": idx["level"], "mean_set_size": summary["mean_set_size"],
            "sign_agreement": summary["sign_agreement"], "prediction_instability": summary["prediction_instability"],
            "selection_frequency": summary["selection_frequency"]}
