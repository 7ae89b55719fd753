"""Stable-set bounds only where their assumptions hold, and per-feature stability shown as not applicable
for a family without weights per feature."""
import html
import json
import pathlib
import re

import pytest
import yaml

from pipeline.stability import SCHEME_TABLE
from pipeline.stability.bounds import (MEINSHAUSEN_BUHLMANN, SHAH_SAMWORTH, bound_for, ss_unimodal_bound,
                                       ss_worst_case_bound)
from tests.conftest import CONFIGS, penduel


def test_shah_samworth_worst_case_by_hand():
    # Shah & Samworth (2013, JRSS-B 75(1)), Theorem 1 with θ = q/p: θ q / (2τ − 1).
    # q = 5, p = 100, τ = 0.75: 0.05 · 5 / 0.5 = 0.5 (computed by hand).
    assert ss_worst_case_bound(5, 0.75, 100) == pytest.approx(0.5, rel=1e-12)


@pytest.mark.parametrize("q, tau, p, B, expected", [
    # Shah & Samworth (2013), improved bound under unimodality: C(τ, B) θ q with θ = q/p, values by hand.
    # τ = 0.7 ≤ ¾, B = 25: C = 1 / (2 (1.4 − 1 − 1/50)) = 1/0.76; θ q = 0.05 · 5 = 0.25 → 0.328947…
    (5, 0.70, 100, 25, 0.25 / 0.76),
    # τ = 0.9 > ¾, B = 50: C = 4 (1 − 0.9 + 1/100) / (1 + 1/50) = 0.44/1.02; θ q = 0.01 · 10 = 0.1
    (10, 0.90, 1000, 50, 0.1 * 0.44 / 1.02),
    # τ = 0.75 with B = 25 is read at τ' = ⌈37.5⌉/50 = 0.76 (Π̂ moves in steps of 1/50):
    # C = 4 (1 − 0.76 + 0.02) / 1.04 = 1 → θ q = 0.25
    (5, 0.75, 100, 25, 0.25),
])
def test_shah_samworth_unimodal_by_hand(q, tau, p, B, expected):
    # The same constant is coded as 1 / um_const(τ, B, θ) in the stabs R package (Hofner & Hothorn), read
    # as a reference for the formula: um_const(0.7, 25) = 2 (2·0.7 − 1 − 1/50) = 0.76.
    assert ss_unimodal_bound(q, tau, p, B) == pytest.approx(expected, rel=1e-12)


def test_shah_samworth_unimodal_outside_its_range_gives_none():
    assert ss_unimodal_bound(60, 0.9, 100, 25) is None          # θ = 0.6 > 1/√3
    assert ss_unimodal_bound(50, 0.51, 100, 25) is None         # τ' = 0.52 ≤ ½ + θ² = 0.75


def test_each_scheme_gets_the_bound_its_assumptions_allow():
    assert bound_for(SCHEME_TABLE["subsample"], 0.5) == (MEINSHAUSEN_BUHLMANN, "")
    assert bound_for(SCHEME_TABLE["complementary_pairs"], 0.5) == (SHAH_SAMWORTH, "")
    none, why = bound_for(SCHEME_TABLE["subsample"], 0.6)
    assert none is None and "0.6" in why and "half the rows" in why
    none, why = bound_for(SCHEME_TABLE["bootstrap"], 0.5)
    assert none is None and "with replacement" in why


def _text(page: str) -> str:
    return html.unescape(re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", re.sub(r"<img[^>]*>", "", page))))


@pytest.mark.slow   # a run with its own tracking store: about 20–40 s on a shared machine
def test_kernel_without_feature_weights_is_not_applicable_everywhere(tmp_path):
    """rbf kernel, complementary pairs: the ridge-type family's per-feature stability is 'not applicable'
    with the reason in the tables and captions, its prediction instability is still there, and the bound is
    Shah & Samworth's."""
    config = yaml.safe_load((CONFIGS / "tiny.yaml").read_text())
    config["families"]["l2"]["kernel"] = "rbf"
    config["stability"] = {"n_resamples": 6, "scheme": "complementary_pairs"}
    (tmp_path / "rbf.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "rbf.yaml"], tmp_path)
    assert code == 0, err
    report = pathlib.Path(next(line.split(" ", 1)[1] for line in out.splitlines() if line.startswith("report: ")))
    report = report if report.is_absolute() else tmp_path / report
    payload = json.loads((report.parent / "report_data.json").read_text())
    stab = payload["stability"]["squared"]
    ridge, sparse = stab["families"]["l2"], stab["families"]["l1"]
    assert ridge["applicable"] is False and "rbf" in ridge["reason"]
    assert ridge["prediction_instability"] > 0 and sparse["prediction_instability"] > 0
    assert sparse["applicable"] is True and -1 <= sparse["stability"] <= 1
    assert "l2" not in stab["frequency"] and stab["error_control"]["source"].startswith("Shah & Samworth")
    text = _text(report.read_text())
    section = text[text.index("Stability under resampling"):]
    assert "not applicable: with the rbf kernel" in section
    assert "sparse (L1) only" in section and "both families" not in section.lower()
    assert "Shah & Samworth (2013), Theorem 1" in section
    assert "not resampled" not in text             # the squared loss was resampled, for both families
    assert "not applicable (no weight per feature" in text   # the side-by-side table says why


def test_summary_marks_a_family_without_weights_and_keeps_its_prediction_instability():
    """The stage on hand-made resamples: the sparse family has weights, the other none."""
    from types import SimpleNamespace

    import numpy as np

    from pipeline.config import parse_config
    from pipeline.stability import summarise_families

    spec = parse_config({"name": "s", "data": {"kind": "scenario", "name": "spectral_bands"},
                         "stability": {"n_resamples": 4, "scheme": "bootstrap"}})
    rng = np.random.default_rng(0)
    l1 = [SimpleNamespace(coef=np.where(rng.random((3, 6)) < 0.5, rng.standard_normal((3, 6)), 0.0),
                          eval_pred=rng.standard_normal((3, 5))) for _ in range(4)]
    l2 = [SimpleNamespace(coef=None, eval_pred=np.full((3, 5), float(m))) for m in range(4)]
    out = summarise_families(spec, {"l1": l1, "l2": l2}, {"l1": np.array([1.0, 0.5, 0.1]),
                                                          "l2": np.array([1.0, 0.5, 0.1])},
                             {"l1": 1, "l2": 2}, [f"f{j}" for j in range(6)], None,
                             gaps={"l1": "", "l2": "no weights here"})
    ridge = out["families"]["l2"]
    assert ridge == {"applicable": False, "reason": "no weights here",
                     "prediction_instability": pytest.approx(np.var([0, 1, 2, 3], ddof=1))}
    assert out["families"]["l1"]["applicable"] and out["not_applicable"] == {"l2": "no weights here"}
    assert "l2" not in out["frequency"]
    assert out["error_control"]["shown"] is False and "with replacement" in out["error_control"]["reason"]
