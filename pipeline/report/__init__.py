"""The self-contained HTML report of one execution, rendered from its payload."""
from __future__ import annotations

import datetime as dt
import json
import pathlib
import re
import time
from importlib import resources

import jinja2
import yaml

from ..evaluate import METRICS, unit_text
from ..evaluate.summary import paragraph
from ..models.families import FAMILIES, compared_pair, get_family
from ..selection import RULE_TABLE
from .drawing import draw_figures
from .payload import build_payload, upgrade_payload


def template_env() -> jinja2.Environment:
    loader = jinja2.FileSystemLoader(str(resources.files("pipeline.report") / "templates"))
    return jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)


WALL_TOKEN = "@@penduel-wall-seconds@@"   # replaced by the wall time once the report is rendered


def difference_label() -> str:
    """How every paired difference reads: the first family's advantage ("L1 advantage")."""
    first, _ = compared_pair()
    return f"{first.short} advantage"


def convention_text() -> str:
    first, second = compared_pair()
    return (f"Every difference in this report is the {first.title}'s advantage over the {second.title} in the "
            f"direction in which the metric is better: positive means the {first.title} is better.")


def _metric_name(name, unit) -> str:
    m = METRICS.get(name)
    label = m.label if m else name.replace("_", " ")
    u = unit_text(m, unit) if m else ""
    return f"{label} ({u})" if u else label


def _g(x, digits=4) -> str:
    return "—" if x is None else f"{x:.{digits}g}"


def _with_interval(f, name) -> str:
    lo, hi = f["intervals"].get(name, (None, None))
    return f"{_g(f['metrics'].get(name))} [{_g(lo)}, {_g(hi)}]"


def _problems(f) -> str:
    bad = [f"λ={lam:.3g}: {status}" for lam, ok, status in zip(f["lambdas"], f["converged"], f["status"]) if not ok]
    return "; ".join(bad[:8]) + (f" (and {len(bad) - 8} more)" if len(bad) > 8 else "")


def _by_loss(p) -> dict[str, list]:
    by_loss: dict[str, list] = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], []).append(f)
    return by_loss


def _support_family(fams):
    return next((f for f in fams if get_family(f["family"]).has_support), None)   # the support-selecting family


def figures_wanted(p) -> list[tuple[tuple[str, str], str, tuple]]:
    """Every figure of the report: ((slot, loss label), `plots` function, its arguments), in page order."""
    out = []
    for label, fams in _by_loss(p).items():
        l1 = _support_family(fams)
        out += [(("cv_plot", label), "cv_curves", (fams, label)), (("df_plot", label), "error_vs_df", (fams, label))]
        if l1 and l1["coef_path"] and l1["coef_path"]["names"]:
            out.append((("path_plot", label), "coefficient_path", (l1,)))
        stab = p.get("stability", {}).get(label) or {}
        if stab.get("l1_paths"):
            out.append((("paths_plot", label), "stability_paths", (stab,)))
        if stab.get("frequency"):
            out.append((("freq_plot", label), "selection_frequency", (stab,)))
    return out


def _loss_blocks(p, figures) -> list[dict]:
    blocks = []
    for label, fams in _by_loss(p).items():
        l1 = _support_family(fams)
        names = sorted({k for f in fams for k in f["metrics"]})
        blocks.append({
            "loss": label, "families": [f["title"] for f in fams],
            "metric_rows": [{"name": _metric_name(m, p.get("unit")) if m != "own_loss" else "own loss (mean)",
                             "decides": m == (p.get("decisions") or {}).get(label, {}).get("metric"),
                             "cells": [_with_interval(f, m) if m in f["metrics"] else "—" for f in fams]}
                            for m in names],
            "cv_plot": figures[("cv_plot", label)], "df_plot": figures[("df_plot", label)],
            "path_plot": figures.get(("path_plot", label)),
            "top_features": [(n, _g(c)) for n, c in l1["top_features"]] if l1 else [],
            "truth": None if not (l1 and l1["truth"]) else {k: (_g(v, 3) if isinstance(v, float) or v is None else v)
                                                          for k, v in l1["truth"].items()},
            "problems": "; ".join(x for x in (_problems(f) for f in fams) if x),
            "truth_rows": [_truth_row(f) for f in fams if f.get("truth")],
            "certificates": [_certificate_row(f) for f in fams if f.get("certificate")],
            "stability": _stability_block(p.get("stability", {}).get(label), figures, label),
            "df_kinds": [(f["title"], f["df_kind"]) for f in fams if f.get("df_kind")],
            "confusions": [_confusion(f, p.get("class_labels") or []) for f in fams if f.get("confusion")],
            "several_classes": p.get("several_classes", "")})
    return blocks


def _confusion(f, labels) -> dict:
    """A family's confusion matrix of the test rows (K > 2 classes): rows true class, columns predicted."""
    from ..models.multiclass import STRATEGY_TEXT
    return {"family": f["title"], "labels": labels, "how": STRATEGY_TEXT.get(f.get("multiclass"), ""),
            "rows": [(label, counts) for label, counts in zip(labels, f["confusion"])]}


def _truth_row(f) -> dict:
    t, err = f["truth"], f["truth"].get("coef_error") or {}
    selects = get_family(f["family"]).has_support   # support recovery is defined only for exact zeros
    return {"family": f["title"], "true": t["true"], "selected": t["selected"] if selects else "all",
            "precision": _g(t["precision"], 3) if selects else "—",
            "recall": _g(t["recall"], 3) if selects else "—",
            "f1": _g(t["f1"], 3) if selects else "—",
            "l2_error": _g(err.get("l2")), "relative": _g(err.get("relative_l2"), 3)}


def _certificate_row(f) -> dict:
    cert = [c for c in f["certificate"] if c is not None]
    return {"family": f["title"], "kind": f["certificate_kind"].replace("_", " "), "solver": f["solver"],
            "worst": _g(max(cert) if cert else None, 3), "chosen": _g(f["certificate"][f["chosen_index"]], 3),
            "ok": f"{sum(f['converged'])} of {len(f['converged'])}"}


def _stability_block(stab, figures, label) -> dict | None:
    if not stab:
        return None
    rows = []
    for family in FAMILIES:
        s = (stab.get("families") or {}).get(family.key)
        if not s:
            continue
        if s.get("applicable", "stability" in s):
            rows.append({"family": f"{family.title}: {family.selected_set}",
                         "index": f"{_g(s['stability'], 3)} [{_g(s['lower'], 3)}, {_g(s['upper'], 3)}]",
                         "size": _g(s["mean_set_size"], 3), "signs": _g(s["sign_agreement"], 3),
                         "instability": _g(s["prediction_instability"], 3), "reason": ""})
        else:
            rows.append({"family": family.title, "reason": f"not applicable: {s.get('reason')}",
                         "instability": _g(s["prediction_instability"], 3)})
    ec = stab.get("error_control") or {}
    shown = [fam for fam in FAMILIES if fam.key in (stab.get("frequency") or {})]
    return {"rows": rows, "scheme": stab["scheme"].replace("_", " "), "n": stab["n_resamples"],
            "fraction": stab["fraction"], "threshold": stab["threshold"],
            "group_correlation": stab.get("group_correlation", 0.9),
            "paths_plot": figures.get(("paths_plot", label)),
            "freq_plot": figures.get(("freq_plot", label)),
            "freq_families": " and ".join(f.title for f in shown) if len(shown) > 1 else
            (f"{shown[0].title} only" if shown else ""),
            "not_applicable": [f"{get_family(k).title}: {v}" for k, v in (stab.get("not_applicable") or {}).items()],
            "target": stab["target_false_selections"],
            "no_bound": None if ec.get("shown", True) else ec.get("reason"),
            "ec": ec and ec.get("shown", True) and {
                "source": ec.get("source", "Meinshausen & Bühlmann (2010), Theorem 1"),
                "formula": ec.get("formula", "E[V] ≤ q² / ((2π − 1) p)"), "meaning": ec.get("meaning", ""),
                "range": "none of the grid" if ec.get("lambda_min") is None else
                f"{_g(ec['lambda_min'])} … {_g(ec['lambda_max'])}",
                "q": _g(ec.get("q"), 3), "bound": _g(ec.get("bound"), 3),
                "unimodal": None if "unimodal" not in ec else (
                    _g(ec["unimodal"], 3) if ec["unimodal"] is not None else
                    "not covered at this threshold and q (needs π above ½ + (q/p)² and q/p ≤ 1/√3)"),
                "stable": ", ".join(ec.get("stable_set") or []) or "none"},
            "stable_at_chosen": ", ".join(stab.get("stable_at_chosen") or []) or "none",
            "groups": [{"features": ", ".join(g["features"]), "freqs": ", ".join(_g(x, 2) for x in g["frequencies"]),
                        "any": _g(g["any_member_frequency"], 2), "together": _g(g["mean_members_selected"], 2)}
                       for g in stab.get("groups") or []]}


def _fold_test(t) -> str:
    if not t:
        return "—"
    return (f"{_g(t['mean'])} [{_g(t['low'])}, {_g(t['high'])}], p = {_g(t['p_value'], 2)} "
            f"({t['dof'] + 1} folds)")


def _rule_phrase(name: str) -> str:
    """How the rule reads in a sentence; a payload stored under a rule name since retired shows that name."""
    rule = RULE_TABLE.get(name)
    return rule.phrase if rule else f"the rule '{name}'"


def _summaries(p) -> list[dict]:
    first, second = (f.key for f in compared_pair())
    by_loss: dict[str, dict] = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], {})[f["family"]] = f
    return [{"loss": v["loss"], "text": paragraph(v, by_loss[v["loss"]], first, second, p["decisions"][v["loss"]],
                                                  (p.get("fold_tests") or {}).get(v["loss"]),
                                                  (p.get("stability") or {}).get(v["loss"]), p["level"], p["n_test"])}
            for v in p["verdicts"]]


def _decision_name(d) -> str:
    return d["title"] + (f" ({d['unit']})" if d["unit"] else "")


def _wall_text(p) -> str:
    seconds = WALL_TOKEN if p.get("seconds") is None else f"{p['seconds']:.1f}"
    text = f"{seconds} s (start of the run to this report written)"
    if p.get("tasks_reused"):
        text += (f"; {p['tasks_reused']} of {p['tasks_total']} fits were reused from the cache — the fits behind "
                 f"these results originally took {p['fit_seconds_total']:.1f} s of fitting")
    return text


def render(p: dict, run_id: str) -> str:
    stab_index = {}
    for label, st in (p.get("stability") or {}).items():
        for fam, s in (st.get("families") or {}).items():
            stab_index[(label, fam)] = (f"{_g(s['stability'], 3)} [{_g(s['lower'], 3)}, {_g(s['upper'], 3)}]"
                                        if s.get("applicable", "stability" in s) else
                                        "not applicable (no weight per feature; prediction instability "
                                        f"{_g(s['prediction_instability'], 3)})")
    summary = [{"loss": f["loss_label"], "family": f["title"], "lam": _g(f["lambda_chosen"]),
                "primary": _with_interval(f, p["decisions"][f["loss_label"]]["metric"]),
                "metric": _decision_name(p["decisions"][f["loss_label"]]),
                "stability": stab_index.get((f["loss_label"], f["family"]), "not resampled"),
                "selected_by": f.get("selected_by", ""),
                "nested": "—" if not f.get("nested") else f"{_g(f['nested']['mean'])} ± {_g(f['nested']['se'], 2)}",
                "nnz": f["n_nonzero"] if f["n_nonzero"] is not None else f"all {f['n_features']}",
                "df": _g(f["effective_df"], 3), "fit": f"{f['fit_seconds']:.2f}", "cv": f"{f['cv_seconds']:.2f}",
                "ok": f"{sum(f['converged'])} of {len(f['lambdas'])}"} for f in p["families"]]
    by_loss = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], {})[f["family"]] = f
    verdicts = []
    for v in p["verdicts"]:
        fams, d = by_loss[v["loss"]], p["decisions"][v["loss"]]
        verdicts.append({"loss": v["loss"], "metric": _decision_name(d),
                         "why": d["why"], "lower": d["lower_is_better"],
                         "method": p["interval_sources"].get(v.get("interval_method"), "percentile bootstrap"),
                         "cells": [(_with_interval(fams[f.key], d["metric"]),
                                    [f"{_metric_name(b, p.get('unit'))} {_with_interval(fams[f.key], b)}"
                                     for b in d["beside"] if b in fams[f.key]["metrics"]])
                                   if f.key in fams else ("not fitted", []) for f in FAMILIES],
                         "diff": "—" if v["diff"] is None else f"{_g(v['diff'])} [{_g(v['low'])}, {_g(v['high'])}]",
                         "sentence": v["sentence"], "reconcile": v.get("reconcile"),
                         "fold_test": _fold_test(p.get("fold_tests", {}).get(v["loss"]))})
    data_rows = [(k.replace("_", " "), _g(v) if isinstance(v, float) else v) for k, v in p["dataset"].items()]
    data_rows += [("features built", f"{p['n_features_built']} (maps: {', '.join(p['feature_maps'])})"),
                  ("training rows", p["n_train"]), ("test rows", p["n_test"])]
    data_rows += [("split design", p["design"])] if p.get("design") else []
    data_rows += [("row weights", p["weighting"])] if p.get("weighting") else []
    css = (resources.files("pipeline.report") / "templates" / "report.css").read_text(encoding="utf-8")
    return template_env().get_template("execution.html").render(
        name=p["name"], description=p["description"], run_id=run_id,
        written=dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        config_hash=p["config_hash"], data_hash=p["data_hash"], wall=_wall_text(p),
        level_pct=f"{p['level']:.0%}", convention=convention_text(), summaries=_summaries(p),
        unit=p.get("unit"), sources=p["interval_sources"],
        n_test=p["n_test"], n_rows=p["n_rows"], n_boot=p["n_boot"],
        rule_text=_rule_phrase(p["rule"]), verdicts=verdicts, difference=difference_label(),
        family_titles=[f.title[:1].upper() + f.title[1:] for f in FAMILIES], summary=summary, loss_blocks=_loss_blocks(p, draw_figures(figures_wanted(p))),
        n_folds=p["n_folds"], data_rows=data_rows, notes=p["notes"],
        config_yaml=yaml.safe_dump(p["config"], sort_keys=False, allow_unicode=True),
        versions=", ".join(f"{k} {v}" for k, v in p["versions"].items()), version=p["versions"]["penduel"], css=css)


def safe_part(text: str, limit: int = 80) -> str:
    """One path component from a name read from a store or a config: letters, digits, '_', '-', '.', never
    '..' or a leading dot, so a forged name cannot leave the reports folder."""
    part = re.sub(r"[^A-Za-z0-9_.-]", "_", str(text))[:limit].lstrip(".")
    return part or "unnamed"


def report_path(reports: pathlib.Path, name: str, run_id: str) -> pathlib.Path:
    """`reports` is the configured local folder; the stored name and run id are only sanitised components."""
    return pathlib.Path(reports) / safe_part(name) / safe_part(run_id, 64) / "index.html"


def write_payload_report(payload: dict, run_id: str, reports: pathlib.Path, started: float | None = None) -> pathlib.Path:
    """Render and write the report. With `started` (a time.perf_counter() reading at the start of the run)
    the wall time — start to report written — is measured after rendering and put in both files."""
    payload = upgrade_payload(payload)
    path = report_path(reports, payload["name"], run_id)
    path.parent.mkdir(parents=True, exist_ok=True)
    html = render(payload, run_id)
    if started is not None:
        payload["seconds"] = time.perf_counter() - started
        html = html.replace(WALL_TOKEN, f"{payload['seconds']:.1f}")
    path.write_text(html, encoding="utf-8")
    (path.parent / "report_data.json").write_text(json.dumps(payload, allow_nan=False), encoding="utf-8")
    return path


def write_report(result, run_id: str, reports: pathlib.Path, started: float | None = None) -> tuple[pathlib.Path, float]:
    """(report path, wall seconds from `started` to the report written; the run's own time without it)."""
    payload = build_payload(result)
    path = write_payload_report(payload, run_id, reports, started if started is not None else
                                time.perf_counter() - result.seconds)
    return path, payload["seconds"]

