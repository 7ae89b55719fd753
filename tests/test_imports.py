"""`penduel --help` and `penduel validate` load none of the heavy libraries a run needs later.

Each check runs the command line in a fresh interpreter and reads `sys.modules` at the end, so an
import added anywhere on the path (cli, config, the registries) is caught.
"""
from __future__ import annotations

import json
import subprocess
import sys

import pytest

from .conftest import ROOT

TRACKING_AND_PLOTTING = ("mlflow", "matplotlib", "dask", "distributed")
SOLVERS = ("cvxpy", "osqp", "highspy")

PROBE = """
import json, sys
from pipeline.cli import main
try:
    code = main(sys.argv[1:])
except SystemExit as exc:   # --help exits from argparse
    code = exc.code
print(json.dumps({"code": code, "modules": sorted({m.split('.')[0] for m in sys.modules})}), file=sys.stderr)
"""


def loaded_after(*args) -> tuple[int, set[str]]:
    done = subprocess.run([sys.executable, "-c", PROBE, *args], cwd=ROOT, capture_output=True, text=True,
                          timeout=120)
    last = json.loads(done.stderr.strip().splitlines()[-1])
    return last["code"], set(last["modules"])


@pytest.fixture(scope="module")
def after_validate():
    code, modules = loaded_after("validate", "configs/demo.yaml")
    assert code == 0
    return modules


@pytest.fixture(scope="module")
def after_help():
    code, modules = loaded_after("--help")
    assert code == 0
    return modules


def test_help_loads_no_heavy_library(after_help):
    assert after_help.isdisjoint(TRACKING_AND_PLOTTING + SOLVERS + ("sklearn", "pandas"))
    assert "pipeline" in after_help   # the probe itself worked


def test_validate_loads_no_tracking_or_plotting_library(after_validate):
    assert after_validate.isdisjoint(TRACKING_AND_PLOTTING)
    assert "pydantic" in after_validate   # the config really was parsed


def test_validate_loads_no_solver_library(after_validate):
    assert after_validate.isdisjoint(SOLVERS)


def test_validate_of_rows_split_at_random_loads_no_scikit_learn(after_validate):
    # the demo's rows are split at random: its test rows and folds are drawn with numpy (the same rows as
    # scikit-learn's splitters, tests/test_selection.py); only stratified or grouped designs load them
    assert after_validate.isdisjoint(("sklearn", "pandas"))
    assert "numpy" in after_validate


def test_the_probe_sees_libraries_a_run_loads():
    # Guards the check itself: the same probe does report mlflow and matplotlib when they are loaded.
    done = subprocess.run([sys.executable, "-c", "import pipeline.tracking, pipeline.report.plots\n" + PROBE, "--help"],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    modules = set(json.loads(done.stderr.strip().splitlines()[-1])["modules"])
    assert {"mlflow", "matplotlib"} <= modules


def test_reading_a_config_loads_no_numerical_library_beyond_numpy():
    # the config, its registries (feature maps, losses, metrics, kernels, solvers) and the data package are
    # data: scikit-learn, pandas, scipy.stats and scipy.optimize load only when a split, a table or a fit needs
    # them.
    probe = ("import json, sys, pathlib\nfrom pipeline.config import load_config\n"
             "load_config(pathlib.Path('configs/demo.yaml'))\n"
             "print(json.dumps(sorted(sys.modules)), file=sys.stderr)")
    done = subprocess.run([sys.executable, "-c", probe], cwd=ROOT, capture_output=True, text=True, timeout=120)
    modules = set(json.loads(done.stderr.strip().splitlines()[-1]))
    assert "pipeline.config" in modules and "pipeline.features.maps" in modules
    heavy = {"sklearn", "pandas", "scipy.stats", "scipy.optimize", "pipeline.features.builder"}
    assert modules.isdisjoint(heavy), sorted(modules & heavy)
