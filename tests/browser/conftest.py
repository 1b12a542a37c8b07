"""Real-browser harness: headless Debian Chromium driven by Playwright, against a Voila or
JupyterLab server started on 127.0.0.1 inside the test.

Recipe: ../shared/BROWSER-TESTING.md (beside the repository). Pieces:

- ``browser`` (session): one ``sync_playwright()`` per process (a second one fails).
  A missing /usr/bin/chromium or Playwright FAILS the test with a clear message: a silent
  skip would hide that the interactive notebook was never checked.
- ``servers``: ``servers.voila(notebook)`` / ``servers.lab(notebook_dir)`` start a
  server (``sys.executable -m voila`` / ``-m jupyterlab``, so this venv's packages) on a
  free 127.0.0.1 port with a token and every Jupyter config/runtime/data/settings/
  workspace dir in the test's tmp folder, wait until it is ready (Voila: a TCP connect,
  since a GET would run the notebook; Lab: ``/api/status``), and stop it at teardown.
- ``probe``: a fresh page whose every request not to 127.0.0.1 is intercepted, recorded
  and aborted (the Voila template's CDN icon stylesheets are answered with an empty
  stylesheet instead), and whose console errors and page errors are collected.
  ``probe.assert_clean()`` checks that nothing left 127.0.0.1 and nothing went wrong.
"""

from __future__ import annotations

import json
import os
import re
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import pytest

# Debian's package; overridable only so the "missing browser" failure can itself be checked.
CHROMIUM = os.environ.get("SAXSNB_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--no-sandbox",  # CI runs as root, where Chromium's sandbox refuses to start
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
]
# Any http(s) or ws(s) URL whose host is not 127.0.0.1.
EXTERNAL = re.compile(r"^(https?|wss?)://(?!127\.0\.0\.1[:/])")
EXTERNAL_HTTP = re.compile(r"^https?://(?!127\.0\.0\.1[:/])")
EXTERNAL_WS = re.compile(r"^wss?://(?!127\.0\.0\.1[:/])")
# Voila's page template links icon-font stylesheets from a CDN; the page works without them.
CDN_STYLESHEET = re.compile(r"^https://cdn(js)?\.(cloudflare|jsdelivr)\.(com|net)/.*\.css(\?.*)?$")

SERVER_START_TIMEOUT = 60.0


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _require_browser():
    if not (os.path.isfile(CHROMIUM) and os.access(CHROMIUM, os.X_OK)):
        pytest.fail(
            f"{CHROMIUM} not found: the browser tests need Debian's Chromium. "
            "Install it with `make browser-deps` (runs `apt-get install -y chromium`, as root). "
            "Never `playwright install`.",
            pytrace=False,
        )
    try:
        from playwright.sync_api import sync_playwright  # noqa: F401
    except ImportError as exc:  # pragma: no cover - the test extra installs it
        pytest.fail(f"Playwright is not importable ({exc}); install the test extra: "
                    "`pip install -e '.[test]'`", pytrace=False)


@pytest.fixture(scope="session")
def browser():
    """One headless Chromium for the whole session."""
    _require_browser()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)
        yield b
        b.close()


# ----------------------------------------------------------------------------- servers


def _jupyter_env(root: Path) -> dict:
    """Environment with every Jupyter user dir inside ``root`` (nothing from ~ leaks in)."""
    dirs = {
        "JUPYTER_CONFIG_DIR": root / "config",
        "JUPYTER_RUNTIME_DIR": root / "runtime",
        "JUPYTERLAB_SETTINGS_DIR": root / "settings",
        "JUPYTERLAB_WORKSPACES_DIR": root / "workspaces",
        "JUPYTER_DATA_DIR": root / "data",  # notebook-signing key etc.; extensions stay in sys.prefix
        "IPYTHONDIR": root / "ipython",
    }
    for d in dirs.values():
        d.mkdir(parents=True, exist_ok=True)
    # No news / update pop-up covering the notebook.
    notif = dirs["JUPYTERLAB_SETTINGS_DIR"] / "@jupyterlab" / "apputils-extension"
    notif.mkdir(parents=True, exist_ok=True)
    (notif / "notification.jupyterlab-settings").write_text(
        json.dumps({"fetchNews": "false", "checkForUpdates": False})
    )
    # Start the notebook's own kernel without asking (else a "Select Kernel" dialog can
    # cover the page when Run All Cells races the session start-up).
    tracker = dirs["JUPYTERLAB_SETTINGS_DIR"] / "@jupyterlab" / "notebook-extension"
    tracker.mkdir(parents=True, exist_ok=True)
    (tracker / "tracker.jupyterlab-settings").write_text(json.dumps({"autoStartDefaultKernel": True}))
    env = dict(os.environ)
    env.update({k: str(v) for k, v in dirs.items()})
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    # The kernel must be this venv's Python (it has saxsnb installed).
    env["PATH"] = os.path.dirname(sys.executable) + os.pathsep + env.get("PATH", "")
    env.pop("JUPYTER_TOKEN", None)
    return env


@dataclass
class Server:
    kind: str
    url: str  # http://127.0.0.1:PORT
    token: str
    proc: subprocess.Popen
    log: Path
    notebook_dir: Path

    def log_tail(self, n: int = 40) -> str:
        try:
            return "\n".join(self.log.read_text(errors="replace").splitlines()[-n:])
        except OSError:
            return "(no log)"


def _stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


def _wait_ready(server: Server, check) -> None:
    deadline = time.monotonic() + SERVER_START_TIMEOUT
    while time.monotonic() < deadline:
        if server.proc.poll() is not None:
            raise RuntimeError(f"{server.kind} exited with {server.proc.returncode}:\n{server.log_tail()}")
        if check():
            return
        time.sleep(0.2)
    raise RuntimeError(f"{server.kind} not ready after {SERVER_START_TIMEOUT} s:\n{server.log_tail()}")


def _tcp_open(port: int) -> bool:
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=0.5):
            return True
    except OSError:
        return False


def _status_ok(url: str) -> bool:
    try:
        with urllib.request.urlopen(url, timeout=2) as r:
            return r.status == 200
    except (urllib.error.URLError, OSError):
        return False


class _Servers:
    """Starts servers for one test and stops all of them at teardown."""

    def __init__(self, tmp: Path):
        self.tmp = tmp
        self.running: list[Server] = []

    def _start(self, kind: str, args: list[str], nb_dir: Path, port: int, token: str) -> Server:
        root = self.tmp / f"{kind}-{port}"
        env = _jupyter_env(root)
        log = root / "server.log"
        fh = open(log, "wb")
        proc = subprocess.Popen(
            [sys.executable, "-m", kind, *args], cwd=nb_dir, env=env,
            stdout=fh, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
        )
        fh.close()
        server = Server(kind, f"http://127.0.0.1:{port}", token, proc, log, nb_dir)
        self.running.append(server)
        return server

    def voila(self, notebook: Path) -> Server:
        notebook = Path(notebook).resolve()
        port, token = free_port(), uuid.uuid4().hex
        server = self._start("voila", [
            notebook.name, "--no-browser", f"--port={port}", "--Voila.ip=127.0.0.1",
            "--Voila.port_retries=0", f"--Voila.token={token}",
            "--VoilaConfiguration.show_tracebacks=True",
        ], notebook.parent, port, token)
        # A TCP connect only: a GET / would already run the notebook.
        _wait_ready(server, lambda: _tcp_open(port))
        return server

    def lab(self, notebook_dir: Path) -> Server:
        notebook_dir = Path(notebook_dir).resolve()
        port, token = free_port(), uuid.uuid4().hex
        server = self._start("jupyterlab", [
            "--no-browser", "--ip=127.0.0.1", f"--port={port}", "--port-retries=0",
            f"--IdentityProvider.token={token}", f"--ServerApp.root_dir={notebook_dir}",
            "--ServerApp.allow_root=True", "--LabApp.news_url=None",
            "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
            "--LabApp.extension_manager=readonly",
        ], notebook_dir, port, token)
        _wait_ready(server, lambda: _status_ok(f"{server.url}/api/status?token={token}"))
        return server

    def stop_all(self) -> None:
        for s in self.running:
            _stop(s.proc)


@pytest.fixture
def servers(tmp_path):
    """Factory: ``servers.voila(nb_path)`` and ``servers.lab(nb_dir)`` -> Server."""
    s = _Servers(tmp_path / "servers")
    try:
        yield s
    finally:
        s.stop_all()


# ----------------------------------------------------------------------------- page probe


@dataclass
class Probe:
    page: object
    tmp_path: Path
    blocked: list = field(default_factory=list)  # external requests intercepted and aborted
    stubbed: list = field(default_factory=list)  # CDN stylesheets answered with an empty one
    seen_external: list = field(default_factory=list)  # every external request the page made
    escaped: list = field(default_factory=list)  # external requests that got a real response
    console_errors: list = field(default_factory=list)
    page_errors: list = field(default_factory=list)

    def screenshot(self, name: str, locator=None) -> Path:
        path = self.tmp_path / f"{name}.png"
        (locator or self.page).screenshot(path=str(path))
        return path

    # -- page helpers shared by the tests --------------------------------------------

    OUTPUT_PROBLEM = (
        '[data-mime-type="application/vnd.jupyter.stderr"], '
        '[data-mime-type="application/vnd.jupyter.error"]'
    )

    def wait_for_lines(self, n: int = 1, root: str = "body", timeout: float = 90_000) -> None:
        """Wait until ``n`` bqplot lines under ``root`` have a drawn path.

        Stops early, with the notebook's message, when the page shows an error or
        stderr output instead (a failing notebook would otherwise only time out).
        """
        self.page.wait_for_function(
            """([root, n, bad]) => {
                if (document.querySelector(bad)) return true;
                const ps = document.querySelectorAll(root + ' svg.svg-figure g.curve path.line');
                return [...ps].filter(p => /^M[-\\d.e]+,/.test(p.getAttribute('d') || '')).length >= n;
            }""",
            arg=[root, n, self.OUTPUT_PROBLEM], timeout=timeout,
        )
        shown = self.page.locator(self.OUTPUT_PROBLEM)
        if shown.count():
            raise AssertionError(f"the notebook wrote an error or stderr: {shown.first.inner_text()[:800]}")

    def wait_attr_changes(self, locator, attr: str, old: str | None, timeout: float = 30_000) -> str:
        """Wait until ``locator``'s attribute differs from ``old``; return the new value.

        The old value never goes into an assertion message: a path ``d`` is huge.
        """
        handle = locator.element_handle()
        self.page.wait_for_function(
            "([el, attr, old]) => el.getAttribute(attr) !== old", arg=[handle, attr, old],
            timeout=timeout,
        )
        return locator.get_attribute(attr)

    def drag(self, locator, x0: float, x1: float, y: float = 0.5, steps: int = 12) -> None:
        """Mouse drag across ``locator`` from fraction ``x0`` to ``x1`` of its width."""
        locator.scroll_into_view_if_needed()
        box = locator.bounding_box()
        assert box is not None, "drag target is not visible"
        yy = box["y"] + y * box["height"]
        m = self.page.mouse
        m.move(box["x"] + x0 * box["width"], yy)
        m.down()
        m.move(box["x"] + x1 * box["width"], yy, steps=steps)
        m.up()

    def open_in_lab(self, server: Server, notebook: str) -> None:
        """Open ``notebook`` in JupyterLab (fresh layout), wait for the kernel, Run All Cells."""
        page = self.page
        page.goto(f"{server.url}/lab/tree/{notebook}?token={server.token}&reset")
        page.locator('.jp-Notebook-ExecutionIndicator[data-status="idle"]').wait_for(timeout=90_000)
        started = page.locator(".jp-CodeCell .jp-InputPrompt", has_text=re.compile(r"\[(\*|\d+)\]"))
        for _attempt in range(4):
            # A click that lands while the menu is still opening is sometimes lost: retry
            # until a code cell shows it is queued or ran ("[*]:" or "[1]:").
            page.locator(".lm-MenuBar-item", has_text=re.compile(r"^Run$")).click()
            item = page.get_by_role("menuitem", name="Run All Cells", exact=True)
            item.wait_for(state="visible")
            item.hover()
            item.click()
            try:
                started.first.wait_for(timeout=5_000)
                return
            except Exception:  # noqa: BLE001 - playwright's TimeoutError; try again
                page.keyboard.press("Escape")
        raise AssertionError("JupyterLab did not start running the notebook after Run All Cells")

    def problems(self) -> list[str]:
        out = []
        intercepted = set(self.blocked) | set(self.stubbed)
        leaked = [u for u in self.seen_external if u not in intercepted]
        if leaked:
            out.append(f"external requests not intercepted: {leaked[:5]}")
        if self.escaped:
            out.append(f"external requests answered from outside 127.0.0.1: {self.escaped[:5]}")
        if self.blocked:
            out.append(f"the page tried to reach outside 127.0.0.1: {self.blocked[:5]}")
        # the notebook's own output: no traceback and no stderr text (warnings, progress
        # bars) on a page meant for people who do not read Python
        shown = self.page.locator(self.OUTPUT_PROBLEM)
        if shown.count():
            out.append(f"error/stderr output on the page: {shown.first.inner_text()[:300]!r}")
        errs = [m for m in self.console_errors if not _harmless(m, self)]
        if errs:
            out.append(f"console errors: {errs[:5]}")
        if self.page_errors:
            out.append(f"uncaught page errors: {self.page_errors[:5]}")
        return out

    def assert_clean(self) -> None:
        problems = self.problems()
        assert not problems, "\n".join(problems)


def _harmless(message: str, probe: Probe) -> bool:
    """Console noise that says nothing about our page.

    - "Failed to load resource" for a URL we blocked or stubbed ourselves: that error is
      the interception working (the request itself is reported separately above).
    - favicon 404: browsers ask for /favicon.ico on their own; the servers have none.
    """
    if "Failed to load resource" in message:
        if "favicon" in message:
            return True
        return any(u in message for u in probe.blocked + probe.stubbed)
    return False


@pytest.fixture
def probe(browser, tmp_path):
    """A fresh page: external requests blocked and recorded, console errors collected."""
    context = browser.new_context(viewport={"width": 1400, "height": 1000}, service_workers="block")
    page = context.new_page()
    pr = Probe(page, tmp_path)

    def on_external(route):
        url = route.request.url
        if CDN_STYLESHEET.match(url):
            pr.stubbed.append(url)
            route.fulfill(status=200, content_type="text/css", body="")
        else:
            pr.blocked.append(url)
            route.abort("blockedbyclient")

    def on_external_ws(ws):
        pr.blocked.append(ws.url)
        ws.close()

    page.route(EXTERNAL_HTTP, on_external)
    page.route_web_socket(EXTERNAL_WS, on_external_ws)

    def on_request(req):
        if EXTERNAL.match(req.url):
            pr.seen_external.append(req.url)

    def on_response(resp):
        # A fulfilled stub has no server address; anything else external escaped.
        if EXTERNAL.match(resp.url) and resp.url not in pr.stubbed:
            pr.escaped.append(resp.url)

    def on_console(msg):
        if msg.type == "error":
            loc = msg.location.get("url", "") if isinstance(msg.location, dict) else ""
            pr.console_errors.append(f"{msg.text} [{loc}]")

    page.on("request", on_request)
    page.on("response", on_response)
    page.on("console", on_console)
    page.on("pageerror", lambda exc: pr.page_errors.append(str(exc)))
    context.set_default_timeout(60_000)
    try:
        yield pr
    finally:
        try:  # the last state of the page, for looking at after a failure
            page.screenshot(path=str(tmp_path / "zz-last-state.png"))
        except Exception:  # noqa: BLE001 - a screenshot must not mask the test's own error
            pass
        context.close()


@pytest.fixture(autouse=True)
def _browser_marker(request):
    # Every test in tests/browser drives Chromium; make sure it carries the marker.
    if request.node.get_closest_marker("browser") is None:
        pytest.fail("tests in tests/browser must be marked @pytest.mark.browser", pytrace=False)
