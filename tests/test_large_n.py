"""Large n: past families.l2.exact_max_rows the ridge-type family takes the low-rank route, the report says
how far it is from the exact route, and a budget too small even for that is refused in one paragraph."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from .conftest import penduel, run_cli


def _table(n, p=5, seed=0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(p)])
    frame["y"] = np.sin(X[:, 0]) + X[:, 1] ** 2 / 2 + 0.3 * rng.normal(size=n)
    return frame


def _config(extra_l2="", budget="", stability="stability: {n_resamples: 4}\n", losses="[squared]"):
    return ("name: big\ndata: {kind: csv, path: d.csv, target: y}\n"
            f"losses: {losses}\n"
            f"families: {{l1: {{path: {{points: 6}}}}, l2: {{kernel: rbf, path: {{points: 6}}{extra_l2}}}}}\n"
            "selection: {cv_folds: 3}\n" + stability + budget)


def test_low_rank_route_is_taken_past_the_configured_rows_and_its_gap_reported(tmp_path):
    _table(300).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text(_config(", exact_max_rows: 150, n_landmarks: 60, gap_rows: 120",
                                             losses="[squared, huber]"))
    code, out, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    assert "fitted by Nyström with m = 60 seeded landmarks" in out
    assert "low-rank (Nyström) route on 225 training rows with 60 landmarks" in out
    assert "subsample of 120 rows" in out and "from the exact route" in out
    html = open(out.split("report: ")[1].split()[0], encoding="utf-8").read()
    assert "low-rank (Nyström) route on 225 training rows" in html


def test_exact_route_below_the_configured_rows_says_nothing_of_low_rank(tmp_path):
    _table(120).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text(_config(stability="stability: {enabled: false}\n"))
    code, out, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    assert "Nyström" not in out


def test_a_budget_too_small_even_for_the_low_rank_route_is_refused(tmp_path):
    _table(3000, p=2).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text(_config(", exact_max_rows: 1000", "features: {memory_budget_mib: 16}\n"))
    code, _, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 2 and "Traceback" not in err
    err = " ".join(err.split())     # the message is wrapped at 100 columns
    for needle in ("families.l2", "2,250 training rows", "memory_budget_mib = 16", "already the low-rank route",
                   "families.l2.n_landmarks = 1000"):
        assert needle in err, err


def test_the_exact_route_over_budget_points_to_the_row_limit(tmp_path):
    _table(3000, p=2).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text(_config(budget="features: {memory_budget_mib: 16}\n"))
    code, _, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 2 and "lower families.l2.exact_max_rows (now 8000)" in " ".join(err.split()), err


@pytest.mark.slow
def test_twenty_thousand_rows_run_end_to_end_through_the_cli(tmp_path):
    # default settings of the low-rank route (8000 rows, 1000 landmarks, gap on 2000 rows)
    _table(20_000).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text(_config())
    done = run_cli(["run", "c.yaml", "--quiet", "--tracking-uri", f"sqlite:///{tmp_path / 'mlflow.db'}"],
                   tmp_path, timeout=1800)
    assert done.returncode == 0, done.stderr
    assert "fitted by Nyström with m = 1000 seeded landmarks" in done.stdout
    assert "low-rank (Nyström) route on 15000 training rows with 1000 landmarks" in done.stdout


def test_one_route_for_every_split_of_an_experiment():
    # a resample or CV fold smaller than the row limit still takes the route the whole training set took
    from pipeline.losses import get_loss
    from pipeline.models.ridge import RIDGE
    rng = np.random.default_rng(0)
    X, y = rng.normal(size=(100, 3)), rng.normal(size=100)
    options = {"kernel": "rbf", "kernel_params": (), "n_lambdas": 4, "max_exact_rows": 150, "n_landmarks": 30}
    lambdas = RIDGE.grid(X, y, get_loss("squared"), options)
    assert RIDGE.fit_path(X, y, get_loss("squared"), lambdas, options).solver == "representer"
    planned = RIDGE.for_training_rows(options, 225)
    assert RIDGE.fit_path(X, y, get_loss("squared"), lambdas, planned).solver == "nystrom"
