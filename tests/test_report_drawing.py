"""Work moved off a run's critical path still happens, unchanged: figures drawn by a second process are the
images the calling process would draw, a figure that fails there fails in the caller, and the stored models
written from one mlflow-saved folder each carry their own state and identity."""
from __future__ import annotations

import json
import pathlib

import pytest
import yaml

from pipeline.report import figures_wanted, plots
from pipeline.report.drawing import ReportDrawing, draw_figures

from .conftest import children_of, stored_payload


@pytest.fixture(scope="module")
def payload(store, tmp_path_factory):
    from mlflow.tracking import MlflowClient

    return stored_payload(MlflowClient(store["uri"]), store["runs"][0]["run_id"], tmp_path_factory.mktemp("data"))


def test_figures_drawn_in_two_processes_are_the_images_drawn_in_one(payload):
    wanted = figures_wanted(payload)[:3]   # the helper draws the second
    assert [slot[0] for slot, _, _ in wanted] == ["cv_plot", "df_plot", "path_plot"]
    in_one = {slot: getattr(plots, name)(*args) for slot, name, args in wanted}
    assert draw_figures(wanted) == in_one


def test_a_figure_that_fails_in_the_helper_fails_in_the_caller(payload):
    wanted = figures_wanted(payload)[:1] + [(("cv_plot", "nowhere"), "no_such_figure", ())]
    with pytest.raises(AttributeError, match="no_such_figure"):
        draw_figures(wanted)


def test_a_report_whose_child_fails_is_drawn_and_fails_in_the_caller(tmp_path):
    class Broken:   # a result the payload builder cannot read
        seconds = 0.0

    drawing = ReportDrawing(Broken(), "0" * 32, tmp_path, None)
    with pytest.raises(AttributeError):
        drawing.result()
    assert drawing.child is None   # the child was ended and collected


def test_every_stored_model_has_its_own_state_and_identity(store, tmp_path):
    from mlflow.tracking import MlflowClient

    client = MlflowClient(store["uri"])
    children = children_of(client, store["runs"][0]["run_id"])
    assert len(children) >= 2
    seen_uuids, seen_fits = set(), set()
    for child in children:
        folder = pathlib.Path(client.download_artifacts(child.info.run_id, "model", str(tmp_path / child.info.run_id)))
        mlmodel = yaml.safe_load((folder / "MLmodel").read_text(encoding="utf-8"))
        state = folder / mlmodel["flavors"]["python_function"]["artifacts"]["state"]["path"]
        meta = json.loads((state / "model.json").read_text(encoding="utf-8"))
        assert meta["run_id"] == child.info.run_id
        assert (meta["family"], meta["loss_label"]) == (child.data.tags["penduel.family"], child.data.tags["penduel.loss"])
        assert (folder / "model.pkl").is_file() and (folder / "input_example.json").is_file()
        assert mlmodel["signature"]["inputs"] and mlmodel["model_size_bytes"] > 0
        seen_uuids.add(mlmodel["model_uuid"])
        seen_fits.add((meta["family"], meta["loss_label"]))
    assert len(seen_uuids) == len(children) == len(seen_fits)
