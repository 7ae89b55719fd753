"""The path figures of the report read effective degrees of freedom along the horizontal axis and mark the
chosen model and every selection rule's pick; the tracking store and report carry the new names."""
from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.patches import Rectangle

from pipeline.report import plots
from pipeline.selection import RULE_TABLE, choose_lambda_index, cv_summary, rule_choices

from .conftest import children_of, stored_payload


def test_rule_choices_agree_with_choosing_from_the_table():
    rng = np.random.default_rng(5)
    for _ in range(200):
        table = rng.gamma(2.0, 1.0, size=(rng.integers(2, 6), rng.integers(2, 9)))
        table[rng.random(table.shape) < 0.05] = np.nan
        mean, se = cv_summary(table)
        if not np.isfinite(mean).any():
            continue
        picks = rule_choices(mean, se)
        assert set(picks) == set(RULE_TABLE)
        for name, index in picks.items():
            assert index == choose_lambda_index(table, name)


@pytest.fixture(scope="module")
def payload(store, tmp_path_factory):
    """The second execution's report data (4 folds, the one-standard-error rule, squared and huber), read
    from the tracking store: other tests may rewrite the report folder."""
    from mlflow.tracking import MlflowClient

    return stored_payload(MlflowClient(store["uri"]), store["runs"][1]["run_id"], tmp_path_factory.mktemp("data"))


def _marks(ax):
    """(x, y, marker, filled) of every single-point line drawn on the axes."""
    out = []
    for line in ax.get_lines():
        x, y = line.get_xdata(), line.get_ydata()
        if len(x) == 1:
            out.append((float(x[0]), float(y[0]), line.get_marker(), line.get_markerfacecolor() != "none"))
    return out


def test_cv_figure_has_degrees_of_freedom_across_and_every_pick_marked(payload):
    fams = [f for f in payload["families"] if f["loss_label"] == "squared"]
    fig = plots.cv_figure(fams, "squared")
    try:
        for ax, f in zip(fig.axes, fams):
            assert "effective degrees of freedom" in ax.get_xlabel() and ax.get_xscale() == "linear"
            curve = max(ax.get_lines(), key=lambda line: len(line.get_xdata()))
            np.testing.assert_array_equal(curve.get_xdata(), np.array(f["path_df"], dtype=float))
            marks = _marks(ax)
            k = f["chosen_index"]
            assert (f["path_df"][k], f["cv_mean"][k], plots.MARKERS[f["family"]], True) in marks
            picks = rule_choices(np.array(f["cv_mean"], float), np.array(f["cv_se"], float))
            for name, i in picks.items():
                assert (f["path_df"][i], f["cv_mean"][i], RULE_TABLE[name].marker, False) in marks
    finally:
        plt.close(fig)


def test_coefficient_map_rows_are_features_and_the_chosen_column_is_framed(payload):
    f = next(f for f in payload["families"] if f["loss_label"] == "squared" and f["coef_path"])
    fig = plots.coefficient_figure(f, top=5)
    try:
        ax = fig.axes[0]
        shown = min(5, len(f["coef_path"]["names"]))
        assert [t.get_text() for t in ax.get_yticklabels()] == [n[:36] for n in f["coef_path"]["names"][:shown]]
        assert "effective degrees of freedom" in ax.get_xlabel()
        ticks = [int(t) for t in ax.get_xticks()]
        assert [t.get_text() for t in ax.get_xticklabels()] == [f"{f['path_df'][i]:.3g}" for i in ticks]
        frames = [p for p in ax.patches if isinstance(p, Rectangle) and not p.get_fill()]
        solid = [p for p in frames if p.get_linestyle() in ("-", "solid")]
        assert [p.get_x() + 0.5 for p in solid] == [f["chosen_index"]]
    finally:
        plt.close(fig)


def test_store_and_report_use_the_new_names(store):
    from mlflow.tracking import MlflowClient

    second = store["runs"][1]
    client = MlflowClient(store["uri"])
    assert client.get_run(second["run_id"]).data.params["selection_rule"] == "one_standard_error"
    params = {c.data.params["family"]: c.data.params for c in children_of(client, second["run_id"])}
    for family in params.values():
        assert {"path_points", "lambda_largest", "lambda_smallest"} <= set(family)
        assert not {"n_lambdas", "lambda_min", "lambda_max"} & set(family)
    assert params["l1"]["l1_share"] == "1.0"
    assert "chosen by the one-standard-error rule" in second["html"]


def test_a_figure_saved_without_its_second_layout_pass_has_the_same_pixels(payload):
    # encode_png drops the placeholder engine tight_layout leaves behind (it only made savefig draw twice);
    # the image must be the one savefig gives with it
    import base64
    import io

    fams = [f for f in payload["families"] if f["loss_label"] == "squared"]
    reference = plots.cv_figure(fams, "squared")
    assert reference.get_layout_engine() is not None   # the case the shortcut is for
    buf = io.BytesIO()
    reference.savefig(buf, format="png", dpi=110)
    plt.close(reference)
    assert base64.b64decode(plots.encode_png(plots.cv_figure(fams, "squared"))) == buf.getvalue()
