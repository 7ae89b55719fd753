"""Every bad input gets one paragraph naming the culprit, what was found and what is allowed, exit 2.

Each case runs the command's own entry point, `pipeline.cli.main`, in this process (fast);
the slow variant runs the same cases as a user would, `python -m pipeline.cli` in a subprocess.
"""
from __future__ import annotations

import io
import pathlib
import re
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pandas as pd
import pytest

from pipeline.cli import main
from pipeline.models.sparse import SOLVERS

SMALL = ("stability: {enabled: false}\nfamilies: {l1: {path: {points: 4}}, l2: {path: {points: 4}}}\n"
         "selection: {cv_folds: 3}\n")
SCENARIO = "data: {kind: scenario, name: spectral_bands, n_samples: 40, n_features: 8, n_informative: 2}\n"


def _frame(n=30, seed=0, **extra) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"a": rng.standard_normal(n), "b": rng.standard_normal(n), "y": rng.standard_normal(n)})
    for name, values in extra.items():
        frame[name] = values
    return frame


def _csv(frame: pd.DataFrame) -> str:
    return frame.to_csv(index=False)


def _with(frame, column, row, value):
    frame = frame.copy()
    frame[column] = frame[column].astype(object)
    frame.loc[row, column] = value
    return frame


def _file_config(path="data.csv", target="y", kind="csv", losses="[squared]"):
    return f"name: bad\ndata: {{kind: {kind}, path: {path}, target: {target}}}\nlosses: {losses}\n" + SMALL


def _weights_config(column="w"):
    return (f"name: bad\ndata: {{kind: csv, path: data.csv, target: y, weights: {column}}}\nlosses: [squared]\n"
            + SMALL.replace("selection: {cv_folds: 3}\n", ""))


# id: (files to write, config text, culprit texts the message must contain)
CASES = {
    "config file missing": ({}, None, ["not found", "nowhere.yaml"]),
    "yaml syntax error": ({}, "name: bad\ndata: {kind: scenario,\n  name: [spectral_bands\n", ["line 4, column 1"]),
    "data file missing": ({}, _file_config("absent.csv"), ["data.path", "absent.csv", "not found"]),
    "data path is a folder": ({"folder.csv/": ""}, _file_config("folder.csv"), ["data.path", "is a folder"]),
    "bytes that are not text": ({"data.csv": bytes(range(128, 256)) * 3}, _file_config(),
                                ["data.path", "cannot read", "codec"]),
    "empty file": ({"data.csv": ""}, _file_config(), ["data.path", "No columns"]),
    "header only": ({"data.csv": "a,b,y\n"}, _file_config(), ["holds no rows", "found 0 rows"]),
    "ragged CSV rows": ({"data.csv": "a,b,y\n1,2,3\n4,5,6,7,8\n"}, _file_config(),
                        ["data.path", "Expected 3 fields in line 3, saw 5", "well-formed CSV"]),
    "unclosed quote": ({"data.csv": 'a,b,y\n"1,2,3\n4,5,6\n'}, _file_config(), ["data.path", "EOF inside string"]),
    "parquet that is not parquet": ({"data.parquet": _csv(_frame())}, _file_config("data.parquet", kind="parquet"),
                                    ["data.path", "as PARQUET"]),
    "target column absent": ({"data.csv": _csv(_frame())}, _file_config(target="yy"),
                             ["data.target", "'yy'", "Did you mean 'y'?"]),
    "text column with too many levels": (
        {"data.csv": _csv(_frame(n=60, city=[f"town{i}" for i in range(60)]))}, _file_config(),
        ["column 'city'", "60 distinct values", "at most 50 levels"]),
    "NaN in a feature": ({"data.csv": _csv(_with(_frame(), "b", 7, np.nan))}, _file_config(),
                         ["feature column 'b'", "data row 8", "missing or infinite"]),
    "infinity in a feature": ({"data.csv": _csv(_with(_frame(), "a", 3, "-inf"))}, _file_config(),
                              ["feature column 'a'", "-inf at data row 4"]),
    "NaN in the target": ({"data.csv": _csv(_with(_frame(), "y", 5, np.nan))}, _file_config(),
                          ["column 'y'", "missing value", "data row 6"]),
    "infinity in the target": ({"data.csv": _csv(_with(_frame(), "y", 4, "inf"))}, _file_config(),
                               ["column 'y'", "inf at data row 5", "only finite"]),
    "values whose spread overflows": ({"data.csv": _csv(_with(_with(_frame(), "a", 0, 1e308), "a", 1, -1e308))},
                                      _file_config(), ["feature column 'a'", "1e+308", "rescale"]),
    "every feature constant": ({"data.csv": _csv(_frame(a=1.0, b=2.0))}, _file_config(),
                               ["every feature column", "constant"]),
    "constant target": ({"data.csv": _csv(_frame(y=5.0))}, _file_config(), ["column 'y'", "same value 5"]),
    "fewer rows than folds": ({"data.csv": _csv(_frame(n=3))}, _file_config(),
                              ["selection.cv_folds", "3 folds", "only 2 remain"]),
    "one class only": ({"data.csv": _csv(_frame(y="yes"))}, _file_config(losses="[logistic]"),
                       ["exactly two classes", "has 1 ('yes')"]),
    "regression loss on string labels": ({"data.csv": _csv(_frame(y=["cat", "dog"] * 15))}, _file_config(),
                                         ["numeric target", "'cat' at data row 1", "classification loss"]),
    "zero lambda ratio": ({}, "name: bad\n" + SCENARIO + SMALL.replace("l1: {path: {points: 4}}", "l1: {path: {smallest_share: 0}}"),
                          ["families.l1.path.smallest_share", "value 0", "greater than 0"]),
    "negative lambda ratio": ({}, "name: bad\n" + SCENARIO + SMALL.replace("l1: {path: {points: 4}}",
                                                                            "l1: {path: {smallest_share: -0.1}}"),
                              ["families.l1.path.smallest_share", "-0.1", "greater than 0"]),
    "grid of one lambda": ({}, "name: bad\n" + SCENARIO + SMALL.replace("l2: {path: {points: 4}}", "l2: {path: {points: 1}}"),
                           ["families.l2.path.points", "value 1", "greater than or equal to 2"]),
    "unknown loss": ({}, "name: bad\n" + SCENARIO + "losses: [hubber]\n", ["losses[1].name", "'hubber'",
                                                                          "Did you mean 'huber'?"]),
    "unknown kernel": ({}, "name: bad\n" + SCENARIO + "families: {l2: {kernel: gausian}}\n",
                       ["families.l2.kernel", "'gausian'", "'rbf'"]),
    "unknown feature map": ({}, "name: bad\n" + SCENARIO + "features: {maps: [{kind: polynomal}]}\n",
                            ["features.maps[1]", "'polynomal'", "Did you mean 'polynomial'?"]),
    "unknown solver": ({}, "name: bad\n" + SCENARIO + "families: {l1: {solver: clarabell}}\n",
                       ["families.l1.solver", "'clarabell'", "'active_set'"]),
    "feature map over the memory budget": (
        {}, "name: bad\n" + SCENARIO + SMALL + "features: {memory_budget_mib: 16, maps: [{kind: random_fourier, "
                                               "n_components: 100000}]}\n",
        ["features.maps", "100,000 columns", "memory_budget_mib = 16", "representer route"]),
    "Gram matrix over the memory budget": (
        {}, "name: bad\ndata: {kind: scenario, name: dense_effects, n_samples: 1400, n_features: 3, n_informative: 2}\n" + SMALL
        + "features: {memory_budget_mib: 16}\n",
        ["families.l2", "Gram matrix of 1,050 training rows", "memory_budget_mib = 16"]),
    "scenario over the memory budget": (
        {}, "name: bad\ndata: {kind: scenario, name: dense_effects, n_samples: 100000, n_features: 100000}\n",
        ["100000 rows × 100000 columns", "memory_budget_mib = 2048"]),
    "scenario of the wrong kind": ({}, "name: bad\n" + SCENARIO + "losses: [logistic]\n",
                                   ["data.name", "regression problem", "classification losses"]),
}


def _parquet(frame: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    frame.to_parquet(buf, index=False)
    return buf.getvalue()


def _split_test_rows(n: int, test_fraction: float = 0.25, seed: int = 0) -> np.ndarray:
    """The held-out rows `penduel run` draws for n rows (the runner's own split, so the case is exact)."""
    from pipeline import seeds
    from sklearn.model_selection import train_test_split
    _, test = train_test_split(np.arange(n), test_size=max(1, int(round(test_fraction * n))),
                               random_state=seeds.int_seed(seed, "split"))
    return np.sort(test)


def _constant_on_training_rows(n=40) -> pd.DataFrame:
    frame = _frame(n=n)
    frame["y"] = 0.0
    frame.loc[_split_test_rows(n), "y"] = 1.0      # the target varies only on held-out rows
    return frame


ALIAS_BOMB = "name: bad\na: &a [1, 2, 3, 4, 5, 6, 7, 8, 9]\n" + "".join(
    f"{c}: &{c} [{', '.join(['*' + p] * 9)}]\n" for p, c in zip("abcdefgh", "bcdefghi")) + SCENARIO
STAB = "stability: {n_resamples: 4, %s}\nfamilies: {l1: {path: {points: 4}}, l2: {path: {points: 4}}}\nselection: {cv_folds: 3}\n"
PLAIN = "name: bad\n" + SCENARIO + SMALL


def _plain(extra: str) -> str:
    return PLAIN + extra


def _npz(matrix=None, **arrays) -> bytes:
    """A .npz file: a sparse matrix as scipy.sparse.save_npz writes it, or plain arrays as numpy.savez does."""
    import scipy.sparse as sp

    buf = io.BytesIO()
    if matrix is not None:
        sp.save_npz(buf, matrix)
    else:
        np.savez(buf, **arrays)
    return buf.getvalue()


def _npz_files(matrix=None, names=5, targets=6, **arrays) -> dict:
    return {"counts.npz": _npz(matrix, **arrays), "names.txt": "".join(f"g{j}\n" for j in range(names)),
            "target.txt": "".join(f"{v}\n" for v in np.arange(targets) % 3 + 0.5)}


def _sparse(with_nan=False):
    import scipy.sparse as sp

    m = sp.csc_matrix(np.eye(6, 5) * 2.0 + np.eye(6, 5, k=-1))
    if with_nan:
        m.data[3] = np.nan
    return m


NPZ_CONFIG = ("name: bad\ndata: {kind: npz, path: counts.npz, feature_names: names.txt, target_file: target.txt}\n"
              "losses: [squared]\n" + SMALL)


CASES.update({
    # ------------------------------------------------------------ data the loader must not accept silently
    "npz of plain arrays": (_npz_files(arr_0=np.zeros((6, 5))), NPZ_CONFIG,
                            ["data.path", "holds the arrays arr_0", "scipy.sparse.save_npz", "missing: format"]),
    "npz that is not a zip": ({"counts.npz": "a,b\n1,2\n", "names.txt": "a\n", "target.txt": "1\n"}, NPZ_CONFIG,
                              ["data.path", "cannot read", "as a .npz file"]),
    "npz names fewer than columns": (_npz_files(_sparse(), names=4), NPZ_CONFIG,
                                     ["data.feature_names", "has 4 name(s)", "has 5 columns"]),
    "npz target lines fewer than rows": (_npz_files(_sparse(), targets=4), NPZ_CONFIG,
                                         ["data.target_file", "has 4 line(s)", "has 6 rows"]),
    "npz with a NaN entry": (_npz_files(_sparse(with_nan=True)), NPZ_CONFIG,
                             ["data.path", "missing or infinite stored value", "nan at row"]),
    "sparse npz densified over the budget": (
        _npz_files(__import__("scipy.sparse").sparse.random(40, 60_000, density=0.05, format="csc",
                                                              random_state=0), names=60_000, targets=40),
        NPZ_CONFIG.replace("losses: [squared]\n", "losses: [squared]\nfeatures: {memory_budget_mib: 16}\n"
                           "families: {l2: {kernel: rbf}}\n").replace("families: {l1: {path: {points: 4}}, "
                                                                       "l2: {path: {points: 4}}}\n", ""),
        ["data: the 40 ×", "% nonzero) would have to be densified",
         "families.l2 (the rbf kernel reads dense rows",
         "memory_budget_mib = 16"]),
    "header repeats the target": ({"data.csv": "y,a,y\n" + "".join(f"{i},{i % 3},{i}\n" for i in range(30))},
                                  _file_config(), ["column 'y' twice", "columns 1 and 3"]),
    "header repeats a feature": ({"data.csv": "a,a,y\n" + "".join(f"{i % 5},{i % 3},{i}\n" for i in range(30))},
                                 _file_config(), ["column 'a' twice", "columns 1 and 2"]),
    "a copy of the target under another name": ({"data.csv": _csv(_frame(leak=_frame()["y"]))}, _file_config(),
                                                ["column 'leak'", "copy of the target 'y'"]),
    # a 0/1 target would read as class labels under data.task: auto; declared a quantity here
    "target constant on the training rows": ({"data.csv": _csv(_constant_on_training_rows())},
                                             _file_config().replace("target: y}", "target: y, task: regression}"),
                                             ["data.target", "same value 0", "training rows"]),
    "list-valued parquet column": ({"data.parquet": _parquet(_frame(tags=[[1, 2]] * 30))},
                                   _file_config("data.parquet", kind="parquet"),
                                   ["column 'tags'", "data row 1", "Flatten it"]),
    "text column with a missing value": ({"data.csv": _csv(_with(_frame(soil=["clay", "sand"] * 15), "soil", 4,
                                                                 np.nan))}, _file_config(),
                                         ["text column 'soil'", "data row 5"]),
    "numeric target with a logistic loss": ({"data.csv": _csv(_frame())}, _file_config(losses="[logistic]"),
                                            ["data.task", "30 distinct numbers", "classification"]),
    "a single class, numeric code": ({"data.csv": _csv(_frame(n=40, y=[1.0] * 40))},
                                     _file_config(losses="[logistic]").replace("target: y}",
                                                                               "target: y, task: classification}"),
                                     ["exactly two classes", "has 1 (1)"]),
    "class too small for the folds": ({"data.csv": _csv(_frame(n=40, y=["a"] * 38 + ["b"] * 2))},
                                      _file_config(losses="[logistic]"), ["selection.cv_folds", "smaller class"]),
    "one test row": ({"data.csv": _csv(_frame(n=40))}, _file_config() + "split: {test_fraction: 0.02}\n",
                     ["split.test_fraction", "1 test row(s)", "at least 5"]),
    # ------------------------------------------------------------ row weights (data.weights, class_weight)
    "negative row weight": ({"data.csv": _csv(_with(_frame(w=1.0), "w", 3, -1.0))}, _weights_config(),
                            ["data.weights", "column 'w'", "-1.0", "data row 4", "above 0"]),
    "missing row weight": ({"data.csv": _csv(_with(_frame(w=2.0), "w", 6, np.nan))}, _weights_config(),
                           ["data.weights", "a missing value", "data row 7"]),
    "zero row weight": ({"data.csv": _csv(_with(_frame(w=1.0), "w", 0, 0.0))}, _weights_config(),
                        ["data.weights", "0.0", "data row 1", "leave out of the file"]),
    "text row weight": ({"data.csv": _csv(_with(_frame(w=1.0), "w", 2, "heavy"))}, _weights_config(),
                        ["data.weights", "'heavy'", "data row 3"]),
    "row-weight column absent": ({"data.csv": _csv(_frame())}, _weights_config(), ["data.weights", "column 'w'",
                                                                                 "is not in"]),
    "row weights are the target": ({"data.csv": _csv(_frame())}, _weights_config("y"),
                                   ["data.weights", "is the target"]),
    "class balance on a regression loss": ({}, _plain("families: {l1: {class_weight: balanced}}\n"),
                                           ["families.l1.class_weight", "no classes to balance"]),
    "weighted metrics without row weights": ({}, _plain("verdict: {weighted_metrics: true}\n"),
                                             ["verdict.weighted_metrics", "data.weights names no column"]),
    "weighted metrics with four classes": (
        {"data.csv": _csv(_frame(n=40, w=1.0, y=[1, 2, 3, 4] * 10))},
        _weights_config().replace("target: y,", "target: y, task: classification,").replace(
            "losses: [squared]", "losses: [hinge]") + "verdict: {weighted_metrics: true}\n",
        ["verdict.weighted_metrics", "4 classes", "regression and two classes only"]),
    # ------------------------------------------------------------ numbers that are not numbers
    "huber delta infinite": ({}, _plain("losses: [{name: huber, delta: .inf}]\n"), ["losses[1].delta", "inf",
                                                                                   "only finite numbers"]),
    "scenario noise infinite": ({}, "name: bad\ndata: {kind: scenario, name: spectral_bands, n_samples: 40, "
                                    "n_features: 8, n_informative: 2, noise: .inf}\n" + SMALL,
                                ["data.noise", "inf", "only finite numbers"]),
    "bandwidth not a number": ({}, "name: bad\n" + SCENARIO + "families: {l2: {kernel: rbf, bandwidth: .nan}}\n",
                               ["families.l2.bandwidth", "nan"]),
    "false-selection target infinite": ({}, "name: bad\n" + SCENARIO + STAB % "target_false_selections: .inf",
                                        ["stability.target_false_selections", "inf"]),
    "lambda ratio not a number": ({}, "name: bad\n" + SCENARIO + "families: {l1: {path: {smallest_share: .NaN}}}\n",
                                  ["families.l1.path.smallest_share", "nan"]),
    "test fraction negative infinity": ({}, _plain("split: {test_fraction: -.inf}\n"), ["split.test_fraction",
                                                                                      "-inf"]),
    "feature-map setting infinite": ({}, _plain("features: {maps: [{kind: polynomial, degree: .inf}]}\n"),
                                     ["features.maps[1].degree", "inf"]),
    # ------------------------------------------------------------ degenerate or contradictory settings
    "subsample fraction of one": ({}, "name: bad\n" + SCENARIO + STAB % "fraction: 1.0",
                                  ["stability.fraction", "stability is 1 by construction"]),
    "subsample fraction leaving no rows": ({}, "name: bad\n" + SCENARIO + STAB % "fraction: 0.001",
                                           ["stability.fraction", "0 row(s) per subsample"]),
    "stability loss not listed": ({}, "name: bad\n" + SCENARIO + STAB % "losses: [absolute]",
                                  ["stability.losses", "'absolute'", "squared"]),
    "osqp solver with the huber loss": ({}, _plain("losses: [huber]\n").replace("l1: {path: {points: 4}}",
                                                                               "l1: {path: {points: 4}, solver: osqp}"),
                                        ["families.l1.solver", "'osqp'", "'huber_delta1'"]),
    "highs solver with the squared loss": ({}, PLAIN.replace("l1: {path: {points: 4}}", "l1: {path: {points: 4}, solver: highs}"),
                                           ["families.l1.solver", "'highs'", "'squared'"]),
    "both families disabled": ({}, "name: bad\n" + SCENARIO + "families: {l1: {enabled: false}, l2: {enabled: "
                                                              "false}}\n", ["both families are disabled"]),
    "losses of two kinds": ({}, _plain("losses: [squared, logistic]\n"), ["losses mix"]),
    "a loss listed twice": ({}, _plain("losses: [squared, squared]\n"), ["listed twice"]),
    "no losses": ({}, _plain("losses: []\n"), ["at least one loss"]),
    "one fold": ({}, "name: bad\n" + SCENARIO + "selection: {cv_folds: 1}\n", ["selection.cv_folds",
                                                                              "greater than or equal to 2"]),
    "odd complementary pairs": ({}, "name: bad\n" + SCENARIO + "stability: {scheme: complementary_pairs, "
                                                               "n_resamples: 5}\n", ["even n_resamples"]),
    "negative seed": ({}, _plain("seed: -1\n"), ["field 'seed'", "greater than or equal to 0"]),
    "unknown top-level setting": ({}, _plain("colour: blue\n"), ["field 'colour' is not a known setting"]),
    "name with spaces": ({}, PLAIN.replace("name: bad", "name: my run!"),
                         ["field 'name'", "'my run!'", "^[A-Za-z0-9][A-Za-z0-9_.-]*$"]),
    "name missing": ({}, "data: {kind: bundled, name: diabetes}\n", ["field 'name' is required"]),
    "unknown data kind": ({}, "name: bad\ndata: {kind: exel, path: x.xlsx, target: y}\n",
                          ["field 'data'", "'exel'"]),
    # ------------------------------------------------------------ files that are not what the config says
    "config is a folder": ({"experiment.yaml/": ""}, None, ["is a folder", "experiment file itself"]),
    "config is a list": ({}, "- name: bad\n- data: x\n", ["must hold a mapping"]),
    "YAML alias bomb": ({}, ALIAS_BOMB, ["expands to more than 20,000 values"]),
    "value that contains itself": ({}, "name: &n [*n]\n" + SCENARIO, ["contains itself"]),
    "huge value described shortly": ({}, "name: [" + ", ".join(["x"] * 50_000) + "]\n" + SCENARIO,
                                     ["expands to more than"]),
    "long list described shortly": ({}, "name: [" + ", ".join(["x"] * 500) + "]\n" + SCENARIO,
                                    ["field 'name'", "a list of 500 item(s)"]),
    # ------------------------------------------------------------ places a run writes to or talks to
    "store of an unknown kind": ({}, _plain("tracking: {uri: 'ftp://x'}\n"),
                                 ["tracking.uri", "'ftp://x'", "sqlite:///FILE"]),
    "store under /proc": ({}, _plain("tracking: {uri: 'sqlite:////proc/penduel/store.db'}\n"),
                          ["tracking.uri", "cannot write the SQLite store", "/proc/penduel"]),
    "store path is a folder": ({"storefolder/": ""}, _plain("tracking: {uri: 'sqlite:///storefolder'}\n"),
                               ["tracking.uri", "is a folder"]),
    "PostgreSQL server not answering": ({}, _plain("tracking: {uri: 'postgresql://u:p@127.0.0.1:9/db'}\n"),
                                        ["tracking.uri", "127.0.0.1:9", "does not answer within 3 s"]),
    "tracking server not answering": ({}, _plain("tracking: {uri: 'http://127.0.0.1:9'}\n"),
                                      ["tracking.uri", "does not answer"]),
    "database URL without a host": ({}, _plain("tracking: {uri: 'postgresql:///db'}\n"),
                                    ["tracking.uri", "names no host"]),
    "report folder is a file": ({"afile": "x"}, _plain("report: {directory: afile}\n"),
                                ["report.directory", "is a file, not a folder"]),
    "report folder not writable": ({}, _plain("report: {directory: /proc/penduel-reports}\n"),
                                   ["report.directory", "cannot write reports"]),
    "cache folder not writable": ({}, _plain("cache: {directory: /proc/penduel-cache}\n"),
                                  ["cache.directory", "cannot write finished fits"]),
    "cache folder is a file": ({"cachefile": "x"}, _plain("cache: {directory: cachefile}\n"),
                               ["cache.directory", "is a file"]),
    "Dask scheduler not answering": ({}, _plain("execution: {backend: dask, scheduler_address: "
                                                "'tcp://127.0.0.1:9'}\n"),
                                     ["execution.scheduler_address", "does not answer within 3 s"]),
})


def _write(folder: pathlib.Path, case: str) -> pathlib.Path:
    files, config, _ = CASES[case]
    for name, content in files.items():
        if name.endswith("/"):
            (folder / name).mkdir()
        elif isinstance(content, bytes):
            (folder / name).write_bytes(content)
        else:
            (folder / name).write_text(content, encoding="utf-8")
    path = folder / ("experiment.yaml" if config is not None or (folder / "experiment.yaml").is_dir()
                     else "nowhere.yaml")
    if config is not None:
        path.write_text(config, encoding="utf-8")
    return path


def _in_process(args) -> tuple[int, str]:
    err, out = io.StringIO(), io.StringIO()
    with redirect_stderr(err), redirect_stdout(out):
        code = main([str(a) for a in args])
    return code, err.getvalue()


def _check(case: str, code: int, stderr: str) -> None:
    assert code == 2, stderr
    assert "Traceback" not in stderr
    messages = [block for block in re.split(r"\n(?=penduel: )", stderr.strip())
                if not block.startswith("penduel: running")]
    assert len(messages) == 1, stderr
    paragraph = messages[0]
    assert "\n\n" not in paragraph                       # one paragraph
    flat = " ".join(paragraph.split())
    for text in CASES[case][2]:
        assert " ".join(text.split()) in flat, f"{case}: {text!r} not in {flat!r}"


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    return f"sqlite:///{tmp_path_factory.mktemp('store') / 'bad.db'}"


def _store_args(case: str, folder: pathlib.Path) -> list:
    config = CASES[case][1] or ""
    return [] if "tracking:" in config else ["--tracking-uri", f"sqlite:///{folder / 'case.db'}"]


def test_the_table_is_large_enough():
    assert len(CASES) >= 60


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_gets_one_clear_paragraph(case, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    config = _write(tmp_path, case)
    code, stderr = _in_process(["run", config, "--quiet", *_store_args(case, tmp_path)])
    _check(case, code, stderr)
    # refused before any tracking run was opened: the store was never even created
    assert not (tmp_path / "case.db").exists() and not (tmp_path / "mlflow.db").exists()


@pytest.mark.parametrize("case", list(CASES))
def test_validate_refuses_the_same_inputs(case, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, stderr = _in_process(["validate", _write(tmp_path, case)])
    _check(case, code, stderr)


@pytest.mark.slow
@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_through_the_installed_command(case, tmp_path, cli):
    config = _write(tmp_path, case)
    done = cli(["run", config, "--quiet", *_store_args(case, tmp_path)], tmp_path)
    _check(case, done.returncode, done.stderr)


def test_config_checks_run_without_data_in_validate(tmp_path):
    code, stderr = _in_process(["validate", _write(tmp_path, "unknown feature map")])
    _check("unknown feature map", code, stderr)


def test_config_solver_names_are_the_solvers_of_the_sparse_family():
    from pipeline.config import L1Spec
    assert L1Spec.model_fields["solver"].annotation.__args__ == SOLVERS


def test_categorical_encoded_and_constant_dropped_with_notes(tmp_path, store, monkeypatch):
    # The decisions: text columns of up to 50 levels are one-hot encoded, constant columns dropped,
    # each with a note on the terminal.
    monkeypatch.chdir(tmp_path)
    frame = _frame(n=40, soil=["clay", "sand", "loam", "clay"] * 10, batch=7.0)
    (tmp_path / "data.csv").write_text(_csv(frame), encoding="utf-8")
    (tmp_path / "experiment.yaml").write_text(_file_config(), encoding="utf-8")
    out = io.StringIO()
    with redirect_stdout(out), redirect_stderr(io.StringIO()):
        code = main(["run", "experiment.yaml", "--quiet", "--tracking-uri", store])
    assert code == 0
    text = out.getvalue()
    assert "note: text column 'soil' one-hot encoded into 2 column(s), reference level 'clay'" in text
    assert "note: dropped 1 constant column(s): batch" in text


def test_failed_solver_on_one_fit_is_recorded_and_the_run_goes_on(tmp_path, store, monkeypatch):
    import pipeline.models.sparse.path as l1
    from mlflow.tracking import MlflowClient
    monkeypatch.chdir(tmp_path)
    real_step = l1.PathFitter.step
    failing_lambda = {}

    def step(self, lam):
        failing_lambda.setdefault("lam", lam)   # λ_max, the first λ of every path, fails
        if lam >= failing_lambda["lam"]:
            raise RuntimeError("solver gave up (injected)")
        return real_step(self, lam)

    monkeypatch.setattr(l1.PathFitter, "step", step)
    (tmp_path / "data.csv").write_text(_csv(_frame(n=40)), encoding="utf-8")
    (tmp_path / "experiment.yaml").write_text(_file_config() + "cache: {enabled: false}\n", encoding="utf-8")
    out = io.StringIO()
    with redirect_stdout(out), redirect_stderr(io.StringIO()):
        code = main(["run", "experiment.yaml", "--quiet", "--tracking-uri", store])
    assert code == 0
    run_id = re.search(r"run id: ([0-9a-f]{32})", out.getvalue()).group(1)
    report = re.search(r"report: (\S+)", out.getvalue()).group(1)
    client = MlflowClient(tracking_uri=store)
    parent = client.get_run(run_id)
    (child,) = client.search_runs([parent.info.experiment_id], filter_string=(
        f"tags.mlflow.parentRunId = '{run_id}' and params.family = 'l1'"))
    assert child.data.metrics["n_not_converged"] >= 1
    table = pd.read_csv(client.download_artifacts(child.info.run_id, "cv_table.csv", str(tmp_path)))
    assert table["status"].str.contains("solver gave up (injected)", regex=False).any()
    assert "solver gave up (injected)" in pathlib.Path(report).read_text(encoding="utf-8")


# ---------------------------------------------------------------- hostile inputs
def test_yaml_tags_that_run_code_are_refused(tmp_path):
    marker = tmp_path / "pwned"
    config = tmp_path / "experiment.yaml"
    config.write_text(f"name: !!python/object/apply:os.system ['touch {marker}']\n", encoding="utf-8")
    code, stderr = _in_process(["validate", config])
    assert code == 2 and "Traceback" not in stderr and "line 1" in stderr
    assert not marker.exists()


class _Trap:
    """Unpickling this would create a file: proof that a cache file was unpickled."""
    def __init__(self, path):
        self.path = str(path)

    def __reduce__(self):
        return (pathlib.Path.touch, (pathlib.Path(self.path),))


def test_a_planted_pickle_in_the_cache_is_never_unpickled(tmp_path):
    from pipeline.cache import TaskCache
    from pipeline.fitting import FitOutcome
    marker = tmp_path / "unpickled"
    cache = TaskCache(tmp_path / "cache", FitOutcome)
    path = cache.path("ab" * 32)
    path.parent.mkdir(parents=True)
    np.savez(path, eval_loss=np.array([_Trap(marker)], dtype=object))   # np.savez pickles object arrays
    assert cache.get("ab" * 32) is None
    assert not marker.exists() and not path.exists()


def test_tracking_ui_binds_to_this_machine_unless_told(monkeypatch):
    import subprocess as sp
    calls = []

    class Server:                      # stands in for the mlflow server process
        pid = -1

        def __init__(self, cmd, **kwargs):
            calls.append(cmd)

        def wait(self, timeout=None):
            return 0

        def poll(self):
            return 0
    monkeypatch.setattr(sp, "Popen", Server)
    assert _in_process(["ui", "--tracking-uri", "sqlite:///x.db"])[0] == 0
    assert _in_process(["ui", "--tracking-uri", "sqlite:///x.db", "--host", "0.0.0.0"])[0] == 0
    hosts = [cmd[cmd.index("--host") + 1] for cmd in calls]
    assert hosts == ["127.0.0.1", "0.0.0.0"]


def test_report_escapes_user_strings(tmp_path, store, monkeypatch):
    monkeypatch.chdir(tmp_path)
    script = "<script>alert(1)</script>"
    frame = _frame(n=40).rename(columns={"a": f"a{script}", "y": "<b>y</b>"})
    frame["colour"] = ["<i>red</i>", "blue"] * 20
    (tmp_path / "data.csv").write_text(_csv(frame), encoding="utf-8")
    config = _file_config(target="'<b>y</b>'") + "description: '<img src=x onerror=alert(2)>'\n"
    (tmp_path / "experiment.yaml").write_text(config, encoding="utf-8")
    out = io.StringIO()
    with redirect_stdout(out), redirect_stderr(io.StringIO()):
        assert main(["run", "experiment.yaml", "--quiet", "--tracking-uri", store]) == 0
    html = pathlib.Path(re.search(r"report: (\S+)", out.getvalue()).group(1)).read_text(encoding="utf-8")
    for raw in (script, "<img src=x", "<b>y</b>", "<i>red</i>"):
        assert raw not in html
    assert "&lt;img src=x onerror=alert(2)&gt;" in html
    assert "&lt;b&gt;y&lt;/b&gt;" in html
