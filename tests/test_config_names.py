"""Our own names for the path settings, the elastic-net mixing and the selection rules; the names
penduel no longer reads are refused through `penduel validate` with one paragraph naming the new key."""
from __future__ import annotations

import pathlib
import re

import pytest
import yaml

from .conftest import penduel, run_cli

ROOT = pathlib.Path(__file__).resolve().parent.parent
BASE = ("name: names\n"
        "data: {kind: scenario, name: spectral_bands, n_samples: 40, n_features: 8, n_informative: 2}\n")

# (old spelling as a user wrote it, the new key the message must name), written here by hand
OLD_KEYS = [
    ("families: {l1: {n_lambdas: 20}}", "families.l1.path.points", "families.l1.n_lambdas"),
    ("families: {l1: {lambda_ratio: 0.05}}", "families.l1.path.smallest_share", "families.l1.lambda_ratio"),
    ("families: {l1: {alpha: 0.5}}", "families.l1.l1_share", "families.l1.alpha"),
    ("families: {l2: {n_lambdas: 20}}", "families.l2.path.points", "families.l2.n_lambdas"),
]
OLD_VALUES = [
    ("selection: {rule: min}", "selection.rule: least_error", "selection.rule: min"),
    ("selection: {rule: one_se}", "selection.rule: one_standard_error", "selection.rule: one_se"),
]
OLD_WORDS = ("n_lambdas", "lambda_ratio", "alpha", "one_se")


def _one_paragraph(code: int, stderr: str) -> str:
    assert code == 2, stderr
    assert "Traceback" not in stderr
    assert stderr.count("penduel:") == 1 and "\n\n" not in stderr.strip(), stderr
    return " ".join(stderr.split())


@pytest.mark.parametrize("line,new,old", OLD_KEYS + OLD_VALUES, ids=[c[2] for c in OLD_KEYS + OLD_VALUES])
def test_each_old_name_is_refused_naming_the_new_one(line, new, old, tmp_path):
    (tmp_path / "old.yaml").write_text(BASE + line + "\n", encoding="utf-8")
    code, out, err = penduel(["validate", "old.yaml"], tmp_path)
    text = _one_paragraph(code, err)
    assert f"'{old}'" in text and f"'{new}'" in text, text
    assert out == ""                      # nothing printed as if the file were valid


def test_an_old_config_is_refused_whole_by_the_installed_command(tmp_path):
    """Every old name at once, through the installed command: one paragraph naming each new key."""
    old = (BASE + "families:\n  l1: {n_lambdas: 12, lambda_ratio: 0.02, alpha: 0.7}\n  l2: {n_lambdas: 12}\n"
           "selection: {rule: one_se}\n")
    (tmp_path / "old.yaml").write_text(old, encoding="utf-8")
    done = run_cli(["validate", "old.yaml"], tmp_path)
    text = _one_paragraph(done.returncode, done.stderr)
    for _, new, _ in OLD_KEYS + OLD_VALUES[1:]:     # the file says one_se, so one_standard_error
        assert new in text, new


def test_the_new_names_are_read_and_change_the_resolved_settings(tmp_path):
    (tmp_path / "new.yaml").write_text(
        BASE + "families:\n  l1: {path: {points: 12, smallest_share: 0.02}, l1_share: 0.7}\n"
        "  l2: {path: {points: 9}}\nselection: {rule: one_standard_error}\n", encoding="utf-8")
    code, out, err = penduel(["validate", "new.yaml"], tmp_path)
    assert code == 0, err
    resolved = yaml.safe_load(out)
    assert resolved["families"]["l1"]["path"] == {"points": 12, "smallest_share": 0.02}
    assert resolved["families"]["l1"]["l1_share"] == 0.7
    assert resolved["families"]["l2"]["path"] == {"points": 9}
    assert resolved["selection"]["rule"] == "one_standard_error"


def _words(text: str) -> set[str]:
    return set(re.findall(r"[A-Za-z_]+", text))


def test_validate_of_the_demo_shows_none_of_the_old_names():
    code, out, err = penduel(["validate", "configs/demo.yaml"], ROOT)
    assert code == 0, err
    assert not _words(out) & set(OLD_WORDS), _words(out) & set(OLD_WORDS)


@pytest.mark.parametrize("path", sorted(p.relative_to(ROOT) for p in [*ROOT.glob("configs/*.yaml"),
                                                                       *ROOT.glob("tests/configs/*.yaml")]),
                         ids=str)
def test_shipped_configs_use_the_new_names(path):
    text = (ROOT / path).read_text(encoding="utf-8")
    assert not _words(text) & {"n_lambdas", "lambda_ratio", "alpha", "one_se", "min"}
    code, _, err = penduel(["validate", str(path)], ROOT)
    assert code == 0, err


def test_readme_and_starter_use_the_new_names(tmp_path):
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert not _words(readme) & {"n_lambdas", "lambda_ratio", "one_se"}
    assert "families.l1.path.points" in readme and "families.l1.l1_share" in readme
    (tmp_path / "table.csv").write_text("a,b,y\n" + "".join(f"{i},{i % 3},{i * 0.5}\n" for i in range(30)))
    code, _, err = penduel(["init", "--data", "table.csv", "--target", "y"], tmp_path)
    assert code == 0, err
    starter = (tmp_path / "penduel.yaml").read_text(encoding="utf-8")
    assert not _words(starter) & set(OLD_WORDS)
    assert "smallest_share" in starter and "least_error" in starter and "one_standard_error" in starter
