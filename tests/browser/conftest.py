"""JupyterLab + headless Chromium, the way a user meets the dashboard.

A session fixture starts JupyterLab on 127.0.0.1 (free port, known token, a temporary copy
of the notebooks, isolated settings) in its own process group and stops it by its PID. The
browser is Debian's Chromium driven by Playwright; every request that is not to the local
server is aborted and counted (the dashboard must work offline). Outside CI a missing
browser skips these tests with a loud reason; with CI=true it fails them.
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


def _chromium() -> str | None:
    for cand in (os.environ.get("TALLYFORM_CHROMIUM"), "/usr/bin/chromium",
                 shutil.which("chromium"), shutil.which("chromium-browser")):
        if cand and Path(cand).exists():
            return cand
    return None


def _missing(reason: str):
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(f"browser tests cannot run in CI: {reason}")
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
    (ext / "notification.jupyterlab-settings").write_text(
        json.dumps({"fetchNews": "false", "checkForUpdates": False}))
    env = dict(os.environ, JUPYTERLAB_SETTINGS_DIR=str(settings),
               JUPYTERLAB_WORKSPACES_DIR=str(base / "workspaces"),
               JUPYTER_CONFIG_DIR=str(base / "config"),
               JUPYTER_RUNTIME_DIR=str(base / "runtime"),
               JUPYTER_DATA_DIR=str(Path(sys.prefix) / "share" / "jupyter"),
               PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    port = _free_port()
    cmd = [sys.executable, "-m", "jupyterlab", "--no-browser", "--allow-root",
           "--ip=127.0.0.1", f"--port={port}", "--port-retries=0",
           f"--IdentityProvider.token={TOKEN}", f"--ServerApp.root_dir={root}",
           "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
           "--LabApp.expose_app_in_browser=True", "--ServerApp.open_browser=False"]
    log = open(base / "lab.log", "w")
    proc = subprocess.Popen(cmd, cwd=root, env=env, stdout=log, stderr=subprocess.STDOUT,
                            start_new_session=True)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 90
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"JupyterLab exited: {(base / 'lab.log').read_text()[-2000:]}")
            try:
                with urllib.request.urlopen(f"{url}/api/status?token={TOKEN}", timeout=2):
                    break
            except OSError:
                if time.monotonic() > deadline:
                    raise RuntimeError("JupyterLab did not answer within 90 s")
                time.sleep(0.5)
        yield {"url": url, "root": root, "token": TOKEN, "log": base / "lab.log"}
    finally:
        try:
            os.killpg(proc.pid, signal.SIGTERM)
            proc.wait(timeout=20)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            try:
                os.killpg(proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
        log.close()


@pytest.fixture(scope="session")
def browser(chromium_path):
    from playwright.sync_api import sync_playwright
    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=chromium_path, headless=True,
                               args=CHROMIUM_ARGS)
        yield b
        b.close()


class Page:
    """A browser page that refuses (and counts) every request off the local machine."""

    def __init__(self, browser, allowed_prefixes):
        self.context = browser.new_context(viewport={"width": 1400, "height": 1000})
        self.page = self.context.new_page()
        self.blocked: list[str] = []
        self.console_errors: list[str] = []

        def route(r):
            u = r.request.url
            if u.startswith(tuple(allowed_prefixes)):
                r.continue_()
            else:
                self.blocked.append(u)
                r.abort()
        self.page.route("**/*", route)
        self.page.on("console", lambda m: self.console_errors.append(m.text)
                     if m.type == "error" else None)

    def shot(self, name: str):
        SHOTS.mkdir(exist_ok=True)
        self.page.screenshot(path=str(SHOTS / f"{name}.png"), full_page=False)

    def close(self):
        self.context.close()


@pytest.fixture
def page(browser, lab):
    p = Page(browser, [lab["url"], "data:", "blob:", "about:"])
    yield p
    p.close()
    assert p.blocked == [], f"requests left the machine: {p.blocked[:5]}"


@pytest.fixture
def file_page(browser):
    p = Page(browser, ["file://", "data:", "blob:", "about:"])
    yield p
    p.close()
