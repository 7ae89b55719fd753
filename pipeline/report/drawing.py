"""Drawing in parallel: the report's figures split between two processes, and the whole report drawn in a
child process while the caller writes the tracking store. Linux forks (the children inherit everything
loaded, nothing is sent but the results); elsewhere everything is drawn in the calling process."""
from __future__ import annotations

import multiprocessing
import pathlib
import signal
import sys


def _as_drawing_child() -> None:
    """In a forked drawing process: the parent ends it when it is no longer needed (SIGTERM), and Ctrl-C is the
    parent's to handle. A fork inherits the parent's handler, which turns SIGTERM into an interrupt; here that
    printed a traceback on the user's terminal when the parent stopped a child that was already leaving."""
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _draw(wanted) -> dict:
    from . import plots   # matplotlib is loaded only by the processes that draw

    return {slot: getattr(plots, name)(*args) for slot, name, args in wanted}


def _draw_to(send, wanted) -> None:
    _as_drawing_child()
    try:
        send.send(_draw(wanted))
    except BaseException:   # the parent draws these itself and meets the error there
        send.send(None)


def draw_figures(wanted) -> dict:
    """The figures `wanted` ((slot, `plots` function, arguments), as `figures_wanted` lists them) as base64 PNG
    by slot. Where the platform forks, a second process draws every other figure (the figures are
    independent, and drawing them is most of a report's time)."""
    if not sys.platform.startswith("linux") or len(wanted) < 2:
        return _draw(wanted)
    from . import plots  # noqa: F401 -- loaded once, before the fork, so the helper does not load it again

    ctx = multiprocessing.get_context("fork")
    receive, send = ctx.Pipe(duplex=False)
    helper = ctx.Process(target=_draw_to, args=(send, wanted[1::2]), daemon=True, name="penduel-figures")
    helper.start()
    send.close()
    try:
        drawn = _draw(wanted[0::2])
        try:
            theirs = receive.recv()
        except EOFError:   # the helper ended without a word (killed)
            theirs = None
    finally:
        if helper.is_alive():
            helper.terminate()
        helper.join()
        receive.close()
    drawn.update(theirs if theirs is not None else _draw(wanted[1::2]))
    return drawn


def _draw_to_pipe(send, *args) -> None:
    _as_drawing_child()
    try:
        from . import write_report

        path, wall = write_report(*args)
        send.send(("written", (str(path), wall)))
    except BaseException as exc:   # reported to the parent, which draws the report again itself
        send.send(("failed", f"{type(exc).__name__}: {exc}"))


class ReportDrawing:
    """The report of an execution, drawn in a forked child process while the caller writes the tracking store:
    the figures are most of the report's time and need nothing from the store, and the fit stage's cores are
    idle by then. Where the platform does not fork, or the child fails, `result()` draws it in this process
    (so a failure is raised here as it would have been)."""

    def __init__(self, result, run_id: str, reports: pathlib.Path, started: float | None = None):
        self.args, self.child = (result, run_id, reports, started), None
        if sys.platform.startswith("linux"):   # fork is safe here; macOS and Windows draw in-process
            ctx = multiprocessing.get_context("fork")
            self.receive, send = ctx.Pipe(duplex=False)
            # not a daemon: it forks a helper of its own (draw_figures); `cancel` ends it in every case
            self.child = ctx.Process(target=_draw_to_pipe, args=(send, *self.args), name="penduel-report")
            self.child.start()
            send.close()

    def result(self) -> tuple[pathlib.Path, float]:
        """(report path, wall seconds from `started` to the report written), as `write_report` returns."""
        if self.child is not None:
            try:
                status, value = self.receive.recv()
            except EOFError:   # the child ended without a word (killed)
                status, value = "failed", None
            self.cancel()
            if status == "written":
                return pathlib.Path(value[0]), value[1]
        from . import write_report

        return write_report(*self.args)

    def cancel(self) -> None:
        if self.child is not None:
            if self.child.is_alive():
                self.child.terminate()
            self.child.join()
            self.receive.close()
            self.child = None
