"""Reports opened in a real headless Chromium (Debian's package), driven over the DevTools protocol
with websocket-client: no console errors, no network requests, no script from user strings."""
from __future__ import annotations

import base64
import json
import os
import pathlib
import shutil
import signal
import subprocess
import tempfile
import time
import urllib.request

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--remote-debugging-port=0", "--window-size=1200,900"]
LOCAL_SCHEMES = ("file:", "data:", "about:", "chrome:", "devtools:")


def chromium_binary() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


class Page:
    """One browser, one tab. Use as a context manager; the browser's process group is ended on exit."""

    def __init__(self, binary: str, timeout: float = 60.0):
        self.timeout = timeout
        self.profile = tempfile.mkdtemp(prefix="penduel-chromium-")
        self.proc = subprocess.Popen([binary, *CHROMIUM_FLAGS, f"--user-data-dir={self.profile}", "about:blank"],
                                     stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
        self.events: list[dict] = []
        self._id = 0

    def __enter__(self) -> "Page":
        import websocket

        port_file = pathlib.Path(self.profile) / "DevToolsActivePort"
        deadline = time.monotonic() + self.timeout
        while not port_file.is_file() or len(port_file.read_text().splitlines()) < 2:
            if time.monotonic() > deadline or self.proc.poll() is not None:
                self.__exit__(None, None, None)
                raise RuntimeError("chromium did not open its DevTools port")
            time.sleep(0.1)
        port = int(port_file.read_text().splitlines()[0])
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as r:
            target = next(t for t in json.load(r) if t["type"] == "page")
        self.ws = websocket.create_connection(target["webSocketDebuggerUrl"], timeout=self.timeout,
                                              suppress_origin=True)
        for domain in ("Runtime", "Log", "Network", "Page"):
            self.call(f"{domain}.enable")
        return self

    def __exit__(self, *exc) -> None:
        if getattr(self, "ws", None) is not None:
            self.ws.close()
        try:
            os.killpg(self.proc.pid, signal.SIGTERM)
            self.proc.wait(timeout=10)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            os.killpg(self.proc.pid, signal.SIGKILL)
        shutil.rmtree(self.profile, ignore_errors=True)

    def call(self, method: str, **params) -> dict:
        self._id += 1
        self.ws.send(json.dumps({"id": self._id, "method": method, "params": params}))
        while True:
            msg = json.loads(self.ws.recv())
            if msg.get("id") == self._id:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            self.events.append(msg)

    def wait_for(self, method: str, since: int = 0) -> dict:
        for ev in self.events[since:]:
            if ev.get("method") == method:
                return ev
        while True:
            msg = json.loads(self.ws.recv())
            self.events.append(msg)
            if msg.get("method") == method:
                return msg

    def open(self, url: str) -> None:
        self.events.clear()
        self.call("Page.navigate", url=url)
        self.wait_for("Page.loadEventFired")
        self.evaluate("new Promise(r => setTimeout(r, 300))")   # let late console messages arrive

    def evaluate(self, expression: str):
        out = self.call("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in out:
            raise RuntimeError(f"page script failed: {out['exceptionDetails']}")
        return out["result"].get("value")

    # -------------------------------------------------------------- what the page did
    def console_errors(self) -> list[str]:
        out = []
        for ev in self.events:
            m, p = ev.get("method"), ev.get("params", {})
            if m == "Runtime.exceptionThrown":
                out.append(f"exception: {p['exceptionDetails'].get('text')}")
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append(f"console.{p['type']}: {[a.get('value') for a in p.get('args', [])]}")
            elif m == "Log.entryAdded" and p["entry"]["level"] == "error":
                out.append(f"log: {p['entry']['text']}")
        return out

    def network_requests(self) -> list[str]:
        """Every request the page made to anything but its own file and inline data."""
        urls = [ev["params"]["request"]["url"] for ev in self.events if ev.get("method") == "Network.requestWillBeSent"]
        return [u for u in urls if not u.startswith(LOCAL_SCHEMES)]

    def screenshot(self, path: pathlib.Path) -> pathlib.Path:
        data = self.call("Page.captureScreenshot", format="png")["data"]
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(base64.b64decode(data))
        return path

    def pdf(self) -> bytes:
        return base64.b64decode(self.call("Page.printToPDF", printBackground=False)["data"])


# ====================================================================== the tests
import re  # noqa: E402

import pandas as pd  # noqa: E402
import pytest  # noqa: E402

from .conftest import ROOT, penduel, run_demo_copy, scratch_dir  # noqa: E402

SCREENSHOTS = ROOT / "reports" / "screenshots"
HOSTILE = "<script>window.__pwned = 1</script>"

needs_chromium = pytest.mark.skipif(chromium_binary() is None, reason=(
    "chromium is not installed (Debian: apt-get install -y chromium chromium-driver; .ci/run does this)"))
websocket = pytest.importorskip("websocket", reason="websocket-client is not installed")


def check_page(url: str, shot: str) -> dict:
    """Open `url`, return what the page did and what it shows; a screenshot lands in reports/screenshots/."""
    with Page(chromium_binary()) as page:
        page.open(url)
        found = {
            "errors": page.console_errors(), "requests": page.network_requests(),
            "scripts": page.evaluate("document.querySelectorAll('script').length"),
            "pwned": page.evaluate("typeof window.__pwned"),
            "text": page.evaluate("document.body.innerText"),
            "images_without_alt": page.evaluate(
                "[...document.images].filter(i => !(i.alt || '').trim()).length"),
            "images_broken": page.evaluate("[...document.images].filter(i => !i.complete || !i.naturalWidth).length"),
            "tables_without_headers": page.evaluate(
                "[...document.querySelectorAll('table')].filter(t => !t.querySelector('th')).length"),
            "images": page.evaluate("document.images.length"),
        }
        page.screenshot(SCREENSHOTS / shot)
        found["pdf"] = page.pdf()
        # Printed on A4 (794 CSS px wide): nothing runs off the page's right edge.
        page.call("Emulation.setEmulatedMedia", media="print")
        page.call("Emulation.setDeviceMetricsOverride", width=794, height=1123, deviceScaleFactor=1, mobile=False)
        found["print_overflow"] = page.evaluate(
            "[...document.querySelectorAll('table, figure, img, pre')].filter(e => e.getBoundingClientRect().right"
            " > document.documentElement.clientWidth + 1).map(e => e.tagName).slice(0, 5)")
    return found


def assert_clean(found: dict) -> None:
    assert found["errors"] == []
    assert found["requests"] == []
    assert found["scripts"] == 0 and found["pwned"] == "undefined"
    assert found["images"] > 0 and found["images_without_alt"] == 0 and found["images_broken"] == 0
    assert found["tables_without_headers"] == 0
    assert found["pdf"].startswith(b"%PDF")
    assert found["print_overflow"] == []


@pytest.mark.slow   # with the other browser checks in make test-browser (CI runs it)
@needs_chromium
def test_execution_and_comparison_reports_load_clean(store):
    report = store["runs"][0]["report"]
    if not report.is_file():     # another test re-rendered into a fresh folder
        penduel(["report", store["runs"][0]["run_id"], "--tracking-uri", store["uri"]], store["cwd"])
    found = check_page(report.as_uri(), "tiny-report.png")
    assert_clean(found)
    assert "Verdict per loss" in found["text"]
    code, out, err = penduel(["compare", "--last", "2", "--tracking-uri", store["uri"]], store["cwd"])
    assert code == 0, err
    found = check_page(pathlib.Path(re.search(r"comparison: (\S+)", out).group(1)).as_uri(), "comparison.png")
    assert_clean(found)
    assert "selection.cv_folds" in found["text"]


@pytest.mark.slow
@needs_chromium
def test_markup_in_column_names_runs_no_script():
    cwd = scratch_dir("penduel-hostile-")
    rng = __import__("numpy").random.default_rng(0)
    X = rng.normal(size=(40, 4))
    frame = pd.DataFrame(X, columns=[HOSTILE, "<img src=x onerror=\"window.__pwned=2\">", "plain", "b&c"])
    frame["<b>target</b>"] = X[:, 0] * 2 + rng.normal(size=40)
    frame.to_csv(cwd / "hostile.csv", index=False)
    (cwd / "hostile.yaml").write_text(
        "name: hostile\ndescription: '<script>window.__pwned = 3</script> described'\n"
        "data: {kind: csv, path: hostile.csv, target: '<b>target</b>'}\n"
        "families: {l1: {path: {points: 6}}, l2: {path: {points: 6}}}\nselection: {cv_folds: 3}\n"
        "stability: {n_resamples: 4}\n")
    code, out, err = penduel(["run", "hostile.yaml", "--quiet"], cwd)
    assert code == 0, err
    found = check_page(pathlib.Path(re.search(r"report: (\S+)", out).group(1)).as_uri(), "hostile-report.png")
    assert_clean(found)
    # The markup is shown as text, so escaping (not only the page's script policy) did its job.
    assert HOSTILE in found["text"] and "<b>target</b>" in found["text"]
    run_id = re.search(r"run id: ([0-9a-f]{32})", out).group(1)
    code, out, err = penduel(["compare", "--runs", run_id, "--tracking-uri",
                              f"sqlite:///{cwd / 'mlflow.db'}"], cwd)
    assert code == 0, err
    found = check_page(pathlib.Path(re.search(r"comparison: (\S+)", out).group(1)).as_uri(), "hostile-comparison.png")
    assert_clean(found)
    assert "hostile" in found["text"]


@needs_chromium
@pytest.mark.slow
def test_demo_report_is_clean_and_small():
    cwd, _, code, out, err = run_demo_copy()
    assert code == 0, err
    report = pathlib.Path(re.search(r"report: (\S+)", out).group(1))
    assert report.stat().st_size < 5 * 2**20
    found = check_page(report.as_uri(), "demo-report.png")
    assert_clean(found)
    assert "vineyard-sugar" in found["text"]
