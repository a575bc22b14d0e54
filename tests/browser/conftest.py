"""JupyterLab + headless Chromium, the way a user meets the dashboard.

A session fixture starts JupyterLab on 127.0.0.1 (free port, known token, a temporary copy
of the notebooks, isolated settings) in its own process group and stops it by its PID. The
browser is Debian's Chromium driven by Playwright (never a browser downloaded by a test
tool); every request that is not to the local server is aborted and counted: the dashboard
must work offline, so the count must stay zero. Outside CI a missing browser skips these
tests with a loud reason; with CI=true it fails them.
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SHOTS = Path(__file__).resolve().parent / "screenshots"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", "--disable-dev-shm-usage"]
TOKEN = "tallyform-browser-tests"
LOCAL_SCHEMES = ("data:", "blob:", "about:")


def _chromium() -> str | None:
    for cand in (os.environ.get("TALLYFORM_CHROMIUM"), "/usr/bin/chromium",
                 shutil.which("chromium"), shutil.which("chromium-browser")):
        if cand and Path(cand).exists():
            return cand
    return None


def _missing(reason: str):
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(f"browser tests cannot run in CI: {reason}", pytrace=False)
    pytest.skip(f"BROWSER TESTS SKIPPED: {reason}")


@pytest.fixture(scope="session")
def chromium_path():
    path = _chromium()
    if path is None:
        _missing("no Chromium found (install Debian's 'chromium' package, or set "
                 "TALLYFORM_CHROMIUM)")
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        _missing("the 'playwright' Python package is not installed (pip install -e '.[test]')")
    return path


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _stop(proc: subprocess.Popen) -> None:
    """Stop the server's process group (it and its kernels), by its PID."""
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=20)
    except ProcessLookupError:
        return
    except subprocess.TimeoutExpired:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        proc.wait(timeout=10)


@pytest.fixture(scope="session")
def lab(tmp_path_factory, chromium_path):
    """A running JupyterLab serving a temporary copy of the notebooks."""
    base = tmp_path_factory.mktemp("lab")
    root = base / "notebooks"
    shutil.copytree(ROOT / "notebooks", root,
                    ignore=shutil.ignore_patterns("outputs", ".ipynb_checkpoints"))
    settings = base / "settings"
    ext = settings / "@jupyterlab" / "apputils-extension"
    ext.mkdir(parents=True)
    # no news / update pop-up covering the page
    (ext / "notification.jupyterlab-settings").write_text(
        json.dumps({"fetchNews": "false", "checkForUpdates": False}))
    env = dict(os.environ, JUPYTERLAB_SETTINGS_DIR=str(settings),
               JUPYTERLAB_WORKSPACES_DIR=str(base / "workspaces"),
               JUPYTER_CONFIG_DIR=str(base / "config"),
               JUPYTER_RUNTIME_DIR=str(base / "runtime"),
               JUPYTER_DATA_DIR=str(base / "data"),
               IPYTHONDIR=str(base / "ipython"),
               # the kernel imports this checkout's tallyform
               PYTHONPATH=os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH"))
                                          if p),
               # no PNG copies of the notebook's static figures (a Chromium per figure in
               # the kernel; tests/render covers the exporter)
               TALLYFORM_STATIC_FIGURES="0")
    port = _free_port()
    cmd = [sys.executable, "-m", "jupyterlab", "--no-browser", "--allow-root",
           "--ip=127.0.0.1", f"--port={port}", "--port-retries=0",
           f"--IdentityProvider.token={TOKEN}", f"--ServerApp.root_dir={root}",
           "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
           "--LabApp.expose_app_in_browser=True", "--ServerApp.open_browser=False"]
    log_path = base / "lab.log"
    with open(log_path, "w") as log:
        proc = subprocess.Popen(cmd, cwd=root, env=env, stdout=log, stderr=subprocess.STDOUT,
                                stdin=subprocess.DEVNULL, start_new_session=True)
        url = f"http://127.0.0.1:{port}"
        try:
            deadline = time.monotonic() + 90
            while True:                     # poll the server until it answers
                if proc.poll() is not None:
                    raise RuntimeError(f"JupyterLab exited: {log_path.read_text()[-2000:]}")
                try:
                    with urllib.request.urlopen(f"{url}/api/status?token={TOKEN}", timeout=2):
                        break
                except OSError:
                    if time.monotonic() > deadline:
                        raise RuntimeError("JupyterLab did not answer within 90 s") from None
                    time.sleep(0.25)
            yield {"url": url, "root": root, "token": TOKEN, "log": log_path}
        finally:
            _stop(proc)


@pytest.fixture(scope="session")
def browser(chromium_path):
    from playwright.sync_api import expect, sync_playwright
    expect.set_options(timeout=60_000)      # conditions, not sleeps: a busy machine is slow
    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=chromium_path, headless=True,
                               args=CHROMIUM_ARGS)
        yield b
        b.close()


_OPEN: list["Page"] = []       # pages open now (screenshots of them when a test fails)


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item, call):
    outcome = yield
    rep = outcome.get_result()
    if rep.failed and "browser" in item.keywords:
        SHOTS.mkdir(exist_ok=True)
        for i, p in enumerate(list(_OPEN)):
            name = f"FAILED_{item.name}_{rep.when}_{i}"
            try:
                p.shot(name)
            except Exception:                  # the page may be gone: the report says why
                pass
            try:                               # the dashboard's DOM, for the post-mortem
                dom = p.page.evaluate("() => { const d = document.querySelector("
                                      "'.tf-dashboard'); return d ? d.outerHTML : ''; }")
            except Exception as err:
                dom = f"(no DOM: {err})"
            (SHOTS / f"{name}.txt").write_text("\n".join(
                ["console errors:", *p.console_errors, "page errors:", *p.page_errors,
                 "blocked:", *p.blocked, "dashboard DOM:", dom[:50_000]]))


class Page:
    """A browser page that refuses (and counts) every request off the local machine."""

    def __init__(self, browser, allowed_prefixes):
        _OPEN.append(self)
        self.context = browser.new_context(viewport={"width": 1400, "height": 1000})
        self.context.set_default_timeout(60_000)
        self.page = self.context.new_page()
        self.allowed = tuple(allowed_prefixes)
        self.blocked: list[str] = []
        self.console_errors: list[str] = []
        self.page_errors: list[str] = []
        self.context.route("**/*", self._route)
        self.page.on("console", lambda m: self.console_errors.append(m.text)
                     if m.type == "error" else None)
        self.page.on("pageerror", lambda e: self.page_errors.append(str(e)))

    def _route(self, route):
        url = route.request.url
        if url.startswith(self.allowed):
            route.continue_()
        else:
            self.blocked.append(url)
            route.abort()

    def shot(self, name: str) -> Path:
        SHOTS.mkdir(exist_ok=True)
        path = SHOTS / f"{name}.png"
        self.page.screenshot(path=str(path), full_page=False)
        return path

    def close(self):
        if self in _OPEN:
            _OPEN.remove(self)
        self.context.close()


@pytest.fixture(scope="module")
def open_page(browser, lab):
    """Factory of pages on the lab server (closed, and checked for blocked requests, at the
    end of the module)."""
    pages: list[Page] = []

    def make() -> Page:
        p = Page(browser, (lab["url"] + "/", *LOCAL_SCHEMES))
        pages.append(p)
        return p
    yield make
    for p in pages:
        p.close()
    blocked = [u for p in pages for u in p.blocked]
    assert blocked == [], f"requests left the machine: {blocked[:5]}"


@pytest.fixture
def page(open_page):
    return open_page()


@pytest.fixture
def file_page(browser):
    p = Page(browser, ("file://", *LOCAL_SCHEMES))
    yield p
    p.close()
