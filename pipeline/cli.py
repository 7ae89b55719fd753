"""Command line: parse, call the runner, print. User mistakes exit 2 with one paragraph."""
from __future__ import annotations

import argparse
import atexit
import os
import pathlib
import sys
import textwrap
import time
import warnings

from .processes import Terminated, leave_now, sigterm_as_interrupt

# Verbs import what they use inside their functions, so `penduel --help` and `penduel validate` load
# neither the tracking library nor the plotting or solver libraries (tests/test_imports.py checks).
EXIT_USER_ERROR = 2


def _fail(message: str) -> int:
    print(textwrap.fill(f"penduel: {message}", width=100, break_long_words=False, break_on_hyphens=False),
          file=sys.stderr)
    return EXIT_USER_ERROR


def _prepared(args, uri: str | None = None):
    """The config, checked against its data and the places it writes to: (spec, folder, inputs, store URI).
    Every user mistake is raised here, before any fit and before a tracking run is opened."""
    from .config import load_config
    from .preflight import anchored_uri, check_places
    from .runner import prepare

    spec, base_dir = load_config(args.config)
    uri = uri or anchored_uri(spec.tracking.uri, base_dir)
    check_places(spec, base_dir, uri)
    return spec, base_dir, prepare(spec, base_dir), uri


def cmd_validate(args) -> int:
    import yaml

    spec, _, inputs, _ = _prepared(args)
    for note in inputs.notes + inputs.dataset.notes:   # on stderr: stdout stays the resolved YAML
        print(f"note: {note}", file=sys.stderr)
    print(f"# {args.config}: valid; data read ({inputs.dataset.n_samples} rows, {inputs.dataset.n_features} "
          f"feature columns). Resolved settings (defaults filled in):")
    print(yaml.safe_dump(spec.resolved(), sort_keys=False, allow_unicode=True), end="")
    return 0


def _summary_table(result) -> str:
    """Per (loss, family): the loss's own decision metric with its interval, then one verdict line per loss."""
    ev = result.evaluation
    head = (f"{'loss':18s} {'family':16s} {'λ chosen':>10s} {'decision metric':>32s} {'held-out [interval]':>26s} "
            f"{'nonzero':>8s} {'df':>7s}")
    lines = [f"every interval: {ev.level:.0%}; differences are the sparse family's advantage (positive = sparse better)",
             head, "-" * len(head)]
    for r in result.results:
        d = ev.decisions[r.loss_label]
        lo, hi = r.intervals.get(d.metric, (float("nan"), float("nan")))
        cell = f"{r.metrics[d.metric]:.4g} [{lo:.3g}, {hi:.3g}]"
        name = d.title + (f" ({d.unit})" if d.unit else "")
        nnz = str(r.n_nonzero) if r.n_nonzero is not None else "all"
        lines.append(f"{r.loss_label:18s} {r.title:16s} {r.lambda_chosen:10.3g} {name[:32]:>32s} {cell:>26s} "
                     f"{nnz:>8s} {r.effective_df:7.1f}")
    for v in ev.verdicts:
        lines.append(f"verdict ({v['loss']}): {v['sentence']}" + (f" {v['reconcile']}" if v.get("reconcile") else ""))
    return "\n".join(lines)


def cmd_run(args) -> int:
    from .preflight import anchored
    from .report.drawing import ReportDrawing
    from .runner import run_experiment
    from .tracking import ExecutionLog

    started = time.perf_counter()   # the one wall time runs from here to the report written
    spec, base_dir, inputs, uri = _prepared(args, args.tracking_uri)
    if not args.quiet:
        print(f"penduel: running '{spec.name}' — {len(spec.losses)} loss(es), "
              f"{spec.selection.cv_folds}-fold CV, tracking store {uri}", file=sys.stderr)

    def status(text):
        if not args.quiet:
            print(f"penduel: {text} (at {time.perf_counter() - started:.1f} s)", file=sys.stderr, flush=True)

    with ExecutionLog(spec, uri) as log:
        status(f"tracking run {log.run_id} opened")
        result = run_experiment(spec, base_dir, progress=not args.quiet, inputs=inputs)
        status("fits done; drawing the report while logging runs to the tracking store")
        report = ReportDrawing(result, log.run_id, anchored(spec.report.directory, base_dir), started)
        try:
            log.log_results(result)
            path, wall = report.result()
        finally:
            report.cancel()
        log.log_report(path)
        log.log_wall_time(wall, result)
    for note in result.notes:
        print(f"note: {note}")
    print(_summary_table(result))
    if not args.quiet:
        reused = (f"; {result.tasks_reused} of {result.tasks_total} fits reused from the cache, which originally "
                  f"took {result.fit_seconds_total:.1f} s of fitting" if result.tasks_reused else "")
        print(f"\nwall time {wall:.1f} s (start to report written){reused}")
    print(f"report: {path}")
    print(f"run id: {log.run_id}")
    return 0


def _store_uri(args) -> str:
    """--tracking-uri, else the store named in --config (relative to its folder), else the default SQLite file."""
    from .config import load_config
    from .preflight import anchored_uri, check_store

    if args.tracking_uri:
        uri = args.tracking_uri
    elif args.config:
        spec, base_dir = load_config(args.config)
        uri = anchored_uri(spec.tracking.uri, base_dir)
    else:
        uri = "sqlite:///mlflow.db"
    check_store(uri, "--tracking-uri" if args.tracking_uri else "tracking.uri")
    return uri


def _reports_folder(args) -> pathlib.Path:
    """The local reports folder: --config's report.directory (relative to its folder), else ./reports.
    Never a folder read from the store."""
    from .config import load_config
    from .preflight import anchored

    if args.config:
        spec, base_dir = load_config(args.config)
        return anchored(spec.report.directory, base_dir)
    return pathlib.Path.cwd() / "reports"




def cmd_report(args) -> int:
    from .report import write_payload_report
    from .stored_runs import StoreError, execution_runs, latest_execution, open_store, read_payload

    if bool(args.run_id) == bool(args.latest):
        return _fail("report: give either a RUN_ID or --latest (the newest finished execution).")
    client = open_store(_store_uri(args))
    try:
        run = execution_runs(client, run_ids=(args.run_id,))[0] if args.run_id else \
            latest_execution(client, args.experiment)
        run_id = run.info.run_id
        payload = read_payload(client, run_id)
    except StoreError as exc:
        return _fail(str(exc))
    path = write_payload_report(payload, run_id, _reports_folder(args))
    print(f"report: {path}")
    print(f"run id: {run_id}")
    return 0


def cmd_compare(args) -> int:
    from .compare import comparison_payload, gather
    from .report.comparison import write_comparison
    from .stored_runs import StoreError, open_store

    if args.last is not None and args.last < 1:
        return _fail(f"compare: --last must be 1 or more, found {args.last}.")
    last = None if args.runs else (args.last or 5)
    try:
        executions = gather(open_store(_store_uri(args)), args.experiment, tuple(args.runs or ()), last)
    except StoreError as exc:
        return _fail(str(exc))
    reports = _reports_folder(args)
    path = write_comparison(comparison_payload(executions), reports.parent, reports.name)
    for i, e in enumerate(executions):
        print(f"E{i + 1}: {e['run_id']}  {e['name']}")
    print(f"comparison: {path}")
    return 0


def cmd_init(args) -> int:
    from .starter import write_starter

    path = write_starter(args.data, args.target, args.output, force=args.force)
    print(f"penduel: wrote {path}; run it with `penduel run {path}`", file=sys.stderr)
    return 0


def cmd_ui(args) -> int:
    import subprocess

    uri = _store_uri(args)
    print(f"penduel: tracking UI for {uri} at http://{args.host}:{args.port} (Ctrl-C stops it)", file=sys.stderr)
    if args.config:   # the runs table of the config's experiment
        from .config import load_config
        from .stored_runs import open_store

        spec, _ = load_config(args.config)
        name = spec.tracking.experiment_name or spec.name
        exp = open_store(uri).get_experiment_by_name(name)
        if exp is not None:
            print(f"penduel: runs of '{name}': http://{args.host}:{args.port}/#/experiments/{exp.experiment_id}/runs"
                  f"?workflowType=machine_learning", file=sys.stderr)
    cmd = [sys.executable, "-m", "mlflow", "server", "--backend-store-uri", uri, "--host", args.host,
           "--port", str(args.port), "--workers", str(args.workers),
           "--uvicorn-opts", "--log-level warning --no-access-log"]   # no per-request lines
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    # its own process group, so stopping the UI stops the server, its job runner and its workers together
    server = subprocess.Popen(cmd, start_new_session=True, env=env)
    try:
        return server.wait()
    except KeyboardInterrupt as exc:
        return 143 if isinstance(exc, Terminated) else 0
    finally:
        from .processes import stop_group

        stop_group(server)


def cmd_predict(args) -> int:
    from .data import DataError
    from .data.loaders import read_table
    from .serving import predict_side_by_side
    from .starter import KINDS
    from .stored_runs import StoreError, latest_execution, open_store

    if bool(args.run_id) == bool(args.experiment):
        return _fail("predict: give either a RUN_ID (an execution or one of its fit runs) or --experiment NAME "
                     "(its newest finished execution).")
    data = pathlib.Path(args.data)
    if data.suffix.lower() not in KINDS:
        return _fail(f"--data: '{data}' should end in {', '.join(KINDS)} (found '{data.suffix or 'no suffix'}').")
    try:
        frame = read_table(data, KINDS[data.suffix.lower()])
    except DataError as exc:
        return _fail(str(exc).replace("data.path:", "--data:", 1))
    client = open_store(_store_uri(args))
    try:
        run_id = args.run_id or latest_execution(client, args.experiment).info.run_id
        table, used = predict_side_by_side(client, run_id, frame, f"--data {data}", args.unseen,
                                           args.family, args.loss)
    except StoreError as exc:
        return _fail(str(exc))
    for m in used:
        print(f"penduel: {m['family']}/{m['loss']}: {m['model']} (fit run {m['run_id']})", file=sys.stderr)
    if args.output:
        table.to_csv(args.output, index=False)
        print(f"predictions: {args.output} ({len(table)} rows, {len(used)} models)", file=sys.stderr)
    else:
        table.to_csv(sys.stdout, index=False)
    return 0


def cmd_scenarios(args) -> int:
    from .config import ScenarioSource
    from .data import SCENARIOS

    print("Synthetic scenarios (data.kind: scenario, data.name: ...):")
    for s in SCENARIOS.values():
        print(f"  {s.name} ({s.task}): {s.description}")
    for name, f in ScenarioSource.model_fields.items():
        if name not in ("kind", "name"):
            print(f"  {name:14s} default {f.default!r:8}  {f.description}")
    return 0


def _store_options(p) -> None:
    p.add_argument("--config", help="take the tracking store from this experiment file")
    p.add_argument("--tracking-uri", help="tracking store URI (default sqlite:///mlflow.db)")


def _version() -> str:
    from importlib import metadata

    try:
        return metadata.version("penduel")
    except metadata.PackageNotFoundError:
        return "unknown"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="penduel", description="Compare sparse (L1) and ridge-type (L2) "
                                     "penalised models on identical splits, log them and write a report.")
    parser.add_argument("--version", action="version", version=f"penduel {_version()}")
    sub = parser.add_subparsers(dest="verb", required=True)
    p = sub.add_parser("run", help="run one experiment file")
    p.add_argument("config")
    p.add_argument("--tracking-uri", help="override tracking.uri of the config")
    p.add_argument("--quiet", action="store_true", help="print only the results table and the paths")
    p.set_defaults(func=cmd_run)
    p = sub.add_parser("validate", help="check an experiment file and print it with defaults filled in")
    p.add_argument("config")
    p.set_defaults(func=cmd_validate)
    p = sub.add_parser("report", help="write an execution's report again from the tracking store alone")
    p.add_argument("run_id", nargs="?", help="the execution's (parent) run id")
    p.add_argument("--latest", action="store_true", help="the newest finished execution")
    p.add_argument("--experiment", help="with --latest: the newest of this tracking experiment")
    _store_options(p)
    p.set_defaults(func=cmd_report)
    p = sub.add_parser("compare", help="compare executions from the tracking store in one HTML file")
    p.add_argument("--runs", nargs="+", metavar="RUN_ID", help="these executions, in this order")
    p.add_argument("--last", type=int, help="the newest N finished executions (default 5)")
    p.add_argument("--experiment", help="only executions of this tracking experiment")
    _store_options(p)
    p.set_defaults(func=cmd_compare)
    p = sub.add_parser("init", help="write a commented starter config for your own CSV or Parquet file")
    p.add_argument("--data", required=True, help="the CSV or Parquet file")
    p.add_argument("--target", required=True, help="the column to predict")
    p.add_argument("--output", default="penduel.yaml", help="config file to write (default penduel.yaml)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.set_defaults(func=cmd_init)
    p = sub.add_parser("ui", help="open the tracking UI on this machine")
    _store_options(p)
    p.add_argument("--host", default="127.0.0.1", help="address to bind (default 127.0.0.1, this machine only)")
    p.add_argument("--port", type=int, default=5000, help="port to listen on (default 5000)")
    p.add_argument("--workers", type=int, default=1, help="server worker processes (default 1: one user)")
    p.set_defaults(func=cmd_ui)
    p = sub.add_parser("predict", help="apply an execution's stored models to new rows, families side by side")
    p.add_argument("run_id", nargs="?", help="an execution's run id, or one fit run of it")
    p.add_argument("--experiment", help="instead of RUN_ID: the newest finished execution of this experiment")
    p.add_argument("--data", required=True, help="CSV or Parquet file of new rows (the training input columns)")
    p.add_argument("--output", help="CSV file to write (default: standard output)")
    p.add_argument("--family", nargs="+", help="only these families (keys, e.g. l1)")
    p.add_argument("--loss", nargs="+", help="only these loss labels")
    p.add_argument("--unseen", choices=("refuse", "reference"), default="refuse",
                   help="a text value not seen in training: refuse the file (default) or encode it as the "
                        "reference level")
    _store_options(p)
    p.set_defaults(func=cmd_predict)
    p = sub.add_parser("scenarios", help="list the synthetic scenarios and their settings")
    p.set_defaults(func=cmd_scenarios)
    return parser


def console() -> None:
    """The `penduel` command. Once the verb is done and Python's exit handlers have run (threads joined, worker
    pools stopped, temporary folders removed, logs flushed), the process ends without the interpreter's teardown
    of every loaded module: about a second once the tracking, plotting and solver libraries are loaded, and of
    no use at the end of a command."""
    status = [1]
    atexit.register(lambda: leave_now(status[0]))   # the first handler registered is the last to run
    try:
        status[0] = main()
    except SystemExit as exc:   # argparse's --help and usage errors
        status[0] = 0 if exc.code is None else exc.code if isinstance(exc.code, int) else 1
        raise
    except KeyboardInterrupt:
        status[0] = 130
        raise
    sys.exit(status[0])


def main(argv: list[str] | None = None) -> int:
    warnings.filterwarnings("ignore", category=FutureWarning)
    os.environ.setdefault("PYTHONWARNINGS", "ignore::FutureWarning")
    # the tracking library's usage reports go to its makers' servers: a local store sends nothing unless the
    # user sets MLFLOW_DISABLE_TELEMETRY=false (the library's own switch; its UI server inherits it)
    os.environ.setdefault("MLFLOW_DISABLE_TELEMETRY", "true")
    args = build_parser().parse_args(argv)
    # SIGTERM (e.g. a job scheduler's stop) closes the run as KILLED, like Ctrl-C.
    with sigterm_as_interrupt():
        return _dispatch(args)


def _dispatch(args) -> int:
    from .config import ConfigError
    from .data import DataError

    try:
        return args.func(args)
    except (ConfigError, DataError) as exc:
        return _fail(str(exc))
    except MemoryError as exc:
        return _fail(f"ran out of memory ({exc or 'no detail'}). Use fewer rows, features (features.maps) or "
                     f"λ values, lower features.memory_budget_mib so the size check refuses it before "
                     f"starting, or run on a larger machine; finished fits are kept in the cache.")
    except Exception as exc:
        execution = sys.modules.get("pipeline.execution")
        if execution is None or not isinstance(exc, execution.TaskFailed):
            raise
        print(textwrap.fill(f"penduel: {exc.paragraph()}", width=100, break_long_words=False), file=sys.stderr)
        return 1
    except KeyboardInterrupt as exc:
        print("penduel: interrupted; the tracking run is marked KILLED.", file=sys.stderr)
        return 143 if isinstance(exc, Terminated) else 130


if __name__ == "__main__":
    console()
