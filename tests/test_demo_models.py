"""After the demo run (`make run`): every stored model reproduces its held-out predictions in a fresh
process, and the tracking UI (`penduel ui`, as `make ui` starts it) opens the demo experiment on its runs
table, seen in headless Chromium (Debian's package) with a screenshot in reports/screenshots/."""
from __future__ import annotations

import re
import time

import pytest

from .conftest import _Server, run_demo_copy
from .test_browser import SCREENSHOTS, Page, chromium_binary
from .test_models import fresh_process_check, scenario_rows

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo():
    cwd, config, code, out, err = run_demo_copy()
    assert code == 0, err
    return {"cwd": cwd, "uri": f"sqlite:///{cwd / 'mlflow.db'}", "config": config,
            "run_id": re.search(r"run id: ([0-9a-f]{32})", out).group(1)}


def test_demo_models_reproduce_the_held_out_predictions_in_a_fresh_process(demo):
    found = fresh_process_check(demo["uri"], demo["run_id"], scenario_rows(demo["config"], demo["cwd"]), demo["cwd"])
    assert sorted(f["fit"].split("/")[0] for f in found) == ["l1"] * 3 + ["l2"] * 3   # three losses each
    assert all(f["exact"] and f["sklearn_exact"] for f in found), found


@pytest.mark.skipif(chromium_binary() is None, reason="chromium is not installed (Debian: apt-get install chromium)")
def test_ui_opens_the_demo_experiment_on_its_runs_table(demo):
    from mlflow.tracking import MlflowClient

    exp = MlflowClient(demo["uri"]).get_experiment_by_name(demo["config"]["name"])
    server = _Server(demo["uri"], demo["cwd"])     # `penduel ui` on a free loopback port
    try:
        base = server.wait_until_up()
        with Page(chromium_binary(), timeout=120) as page:
            # the experiment's own address, no tab named, in the UI's model-training view (the address
            # `penduel ui --config` prints): it lands on the runs table
            page.open(f"{base}/#/experiments/{exp.experiment_id}?workflowType=machine_learning")
            deadline = time.monotonic() + 90
            text = ""
            while time.monotonic() < deadline:
                text = page.evaluate("document.body ? document.body.innerText : ''") or ""
                if "Run Name" in text and re.search(r"(^|\n)[1-9]\d* matching runs?", text):   # the runs loaded
                    break
                time.sleep(1)
            page.evaluate("new Promise(r => setTimeout(r, 1500))")   # let the table finish drawing
            page.screenshot(SCREENSHOTS / "ui-demo-runs.png")
            where = page.evaluate("location.hash")
            grid = page.evaluate("document.querySelectorAll('[role=grid], table').length")
    finally:
        server.stop()
    assert where.split("?")[0].endswith(f"/experiments/{exp.experiment_id}/runs"), where
    assert grid > 0
    # the runs table: its header and the demo's execution (child runs fold under it)
    assert "Run Name" in text and re.search(r"(^|\n)[1-9]\d* matching runs?", text), text[:2000]
    assert text.count("vineyard-sugar") >= 3, text[:2000]   # breadcrumb, sidebar and the execution's row
