"""The self-contained HTML report of one execution, rendered from its payload."""
from __future__ import annotations

import datetime as dt
import json
import pathlib
import re
from importlib import resources

import jinja2
import yaml

from ..models.families import FAMILIES, compared_pair, get_family
from . import plots
from .payload import build_payload

RULE_TEXT = {"min": "least CV error", "one_se": "the one-standard-error rule"}


def template_env() -> jinja2.Environment:
    loader = jinja2.FileSystemLoader(str(resources.files("pipeline.report") / "templates"))
    return jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)


def difference_label() -> str:
    """How every paired difference reads, first family minus second ("L1 − L2")."""
    first, second = compared_pair()
    return f"{first.short} − {second.short}"


def _g(x, digits=4) -> str:
    return "—" if x is None else f"{x:.{digits}g}"


def _with_interval(f, name) -> str:
    lo, hi = f["intervals"].get(name, (None, None))
    return f"{_g(f['metrics'].get(name))} [{_g(lo)}, {_g(hi)}]"


def _problems(f) -> str:
    bad = [f"λ={lam:.3g}: {status}" for lam, ok, status in zip(f["lambdas"], f["converged"], f["status"]) if not ok]
    return "; ".join(bad[:8]) + (f" (and {len(bad) - 8} more)" if len(bad) > 8 else "")


def _loss_blocks(p) -> list[dict]:
    by_loss: dict[str, list] = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], []).append(f)
    blocks = []
    for label, fams in by_loss.items():
        l1 = next((f for f in fams if get_family(f["family"]).has_support), None)   # the support-selecting family
        names = sorted({k for f in fams for k in f["metrics"]})
        blocks.append({
            "loss": label, "families": [f["title"] for f in fams],
            "metric_rows": [{"name": m, "cells": [_with_interval(f, m) if m in f["metrics"] else "—" for f in fams]}
                            for m in names],
            "cv_plot": plots.cv_curves(fams, label), "df_plot": plots.error_vs_df(fams, label),
            "path_plot": plots.coefficient_path(l1) if l1 and l1["coef_path"] and l1["coef_path"]["names"] else None,
            "top_features": [(n, _g(c)) for n, c in l1["top_features"]] if l1 else [],
            "truth": None if not (l1 and l1["truth"]) else {k: (_g(v, 3) if isinstance(v, float) or v is None else v)
                                                          for k, v in l1["truth"].items()},
            "problems": "; ".join(x for x in (_problems(f) for f in fams) if x),
            "truth_rows": [_truth_row(f) for f in fams if f.get("truth")],
            "certificates": [_certificate_row(f) for f in fams if f.get("certificate")],
            "stability": _stability_block(p.get("stability", {}).get(label)),
            "df_kinds": [(f["title"], f["df_kind"]) for f in fams if f.get("df_kind")]})
    return blocks


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


def _stability_block(stab) -> dict | None:
    if not stab:
        return None
    rows = []
    for family in FAMILIES:
        s = (stab.get("families") or {}).get(family.key)
        if s:
            rows.append({"family": f"{family.title}: {family.selected_set}", "index": f"{_g(s['stability'], 3)} [{_g(s['lower'], 3)}, {_g(s['upper'], 3)}]",
                         "size": _g(s["mean_set_size"], 3), "signs": _g(s["sign_agreement"], 3),
                         "instability": _g(s["prediction_instability"], 3)})
    ec = stab.get("error_control") or {}
    return {"rows": rows, "scheme": stab["scheme"].replace("_", " "), "n": stab["n_resamples"],
            "fraction": stab["fraction"], "threshold": stab["threshold"],
            "group_correlation": stab.get("group_correlation", 0.9),
            "paths_plot": plots.stability_paths(stab) if stab.get("l1_paths") else None,
            "freq_plot": plots.selection_frequency(stab) if stab.get("frequency") else None,
            "target": stab["target_false_selections"], "ec": ec and {
                "range": "none of the grid" if ec.get("lambda_min") is None else
                f"{_g(ec['lambda_min'])} … {_g(ec['lambda_max'])}",
                "q": _g(ec.get("q"), 3), "bound": _g(ec.get("bound"), 3), "stable": ", ".join(ec.get("stable_set") or [])
                or "none"},
            "stable_at_chosen": ", ".join(stab.get("stable_at_chosen") or []) or "none",
            "groups": [{"features": ", ".join(g["features"]), "freqs": ", ".join(_g(x, 2) for x in g["frequencies"]),
                        "any": _g(g["any_member_frequency"], 2), "together": _g(g["mean_members_selected"], 2)}
                       for g in stab.get("groups") or []]}


def _fold_test(t) -> str:
    if not t:
        return "—"
    return (f"{_g(t['mean'])} [{_g(t['low'])}, {_g(t['high'])}], p = {_g(t['p_value'], 2)} "
            f"({t['dof'] + 1} folds)")


def render(p: dict, run_id: str) -> str:
    primary = p["primary"]
    stab_index = {}
    for label, st in (p.get("stability") or {}).items():
        for fam, s in (st.get("families") or {}).items():
            stab_index[(label, fam)] = f"{_g(s['stability'], 3)} [{_g(s['lower'], 3)}, {_g(s['upper'], 3)}]"
    summary = [{"loss": f["loss_label"], "family": f["title"], "lam": _g(f["lambda_chosen"]),
                "stability": stab_index.get((f["loss_label"], f["family"]), "not resampled"),
                "selected_by": f.get("selected_by", ""),
                "nested": "—" if not f.get("nested") else f"{_g(f['nested']['mean'])} ± {_g(f['nested']['se'], 2)}",
                "primary": _with_interval(f, primary),
                "nnz": f["n_nonzero"] if f["n_nonzero"] is not None else f"all {f['n_features']}",
                "df": _g(f["effective_df"], 3), "fit": f"{f['fit_seconds']:.2f}", "cv": f"{f['cv_seconds']:.2f}",
                "ok": f"{sum(f['converged'])} of {len(f['lambdas'])}"} for f in p["families"]]
    by_loss = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], {})[f["family"]] = f
    verdicts = []
    for v in p["verdicts"]:
        fams = by_loss[v["loss"]]
        verdicts.append({"loss": v["loss"],
                         "cells": [_with_interval(fams[f.key], primary) if f.key in fams else "not fitted"
                                   for f in FAMILIES],
                         "diff": "—" if v["diff"] is None else f"{_g(v['diff'])} [{_g(v['low'])}, {_g(v['high'])}]",
                         "sentence": v["sentence"], "fold_test": _fold_test(p.get("fold_tests", {}).get(v["loss"]))})
    data_rows = [(k.replace("_", " "), _g(v) if isinstance(v, float) else v) for k, v in p["dataset"].items()]
    data_rows += [("features built", f"{p['n_features_built']} (maps: {', '.join(p['feature_maps'])})"),
                  ("training rows", p["n_train"]), ("test rows", p["n_test"])]
    css = (resources.files("pipeline.report") / "templates" / "report.css").read_text(encoding="utf-8")
    return template_env().get_template("execution.html").render(
        name=p["name"], description=p["description"], run_id=run_id,
        written=dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        config_hash=p["config_hash"], data_hash=p["data_hash"], seconds=p["seconds"],
        n_test=p["n_test"], n_rows=p["n_rows"], n_boot=p["n_boot"],
        primary_label=primary.replace("_", " ") + ("" if p["primary_lower_is_better"] else " (higher is better)"),
        rule_text=RULE_TEXT[p["rule"]], verdicts=verdicts, difference=difference_label(),
        family_titles=[f.title[:1].upper() + f.title[1:] for f in FAMILIES], summary=summary, loss_blocks=_loss_blocks(p),
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


def write_payload_report(payload: dict, run_id: str, reports: pathlib.Path) -> pathlib.Path:
    path = report_path(reports, payload["name"], run_id)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render(payload, run_id), encoding="utf-8")
    (path.parent / "report_data.json").write_text(json.dumps(payload, allow_nan=False), encoding="utf-8")
    return path


def write_report(result, run_id: str, reports: pathlib.Path) -> pathlib.Path:
    return write_payload_report(build_payload(result), run_id, reports)
