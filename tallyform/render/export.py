"""Saving figures: self-contained HTML always, PNG/SVG/PDF when a static exporter works.

Static images need kaleido (1.x) and a Chrome or Chromium already installed on the machine:
tallyform never downloads a browser. Kaleido finds a browser on the PATH (``chromium``,
``google-chrome``...) or at the path in the ``BROWSER_PATH`` environment variable. When no
exporter works, :func:`save` still writes the HTML and says why the images were skipped (a
warning, and ``skipped`` on the returned list).

Every file is written atomically: to a temporary file in the target folder, then renamed over
the target with :func:`os.replace`, so a failure leaves an existing file as it was and no
partial file behind.
"""
from __future__ import annotations

import contextlib
import os
import shutil
import signal
import subprocess
import sys
import warnings
from pathlib import Path

from ..core.errors import InputError
from ..core.fileio import atomic_write

__all__ = ["save", "static_export_available", "SavedFiles", "StaticExportWarning",
           "STATIC_FORMATS"]

STATIC_FORMATS = ("png", "svg", "pdf")
_FORMATS = ("html",) + STATIC_FORMATS
_BROWSER_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable",
                  "chrome")
_DEFAULT_SIZE = (1000, 650)     # layout pixels of a static image when the figure sets none
_PNG_SCALE = 2                  # PNGs at twice the layout size: sharp on a projector
_ATTEMPTS = 2                   # kaleido 1.x sometimes calls into a page not yet loaded
_probe_cache: dict = {}

_PROBE = """
import plotly.graph_objects as go, plotly.io as pio
b = pio.to_image(go.Figure(go.Scatter(x=[0, 1], y=[0, 1])), format="png", width=60, height=40)
assert b[:8] == b"\\x89PNG\\r\\n\\x1a\\n", "not a PNG"
print("ok")
"""


class StaticExportWarning(UserWarning):
    """A static image (PNG/SVG/PDF) was not written; the HTML was."""


class SavedFiles(list):
    """The paths written (a list of Path), plus ``skipped``: format -> reason it was not."""

    def __init__(self, paths=(), skipped=None):
        super().__init__(paths)
        self.skipped: dict[str, str] = dict(skipped or {})

    @property
    def message(self) -> str:
        written = ", ".join(p.name for p in self) or "nothing"
        text = f"wrote {written}"
        for fmt, why in self.skipped.items():
            text += f"; {fmt.upper()} skipped: {why}"
        return text


# ---------------------------------------------------------------------------- availability
def _find_browser() -> tuple[str | None, str]:
    """(executable, how it was found) or (None, why not). Never downloads anything."""
    env = os.environ.get("BROWSER_PATH")
    if env:
        if os.path.isfile(env) and os.access(env, os.X_OK):
            return env, f"BROWSER_PATH={env}"
        return None, (f"BROWSER_PATH is set to {env!r}, which is not an executable file; "
                      "point it at a Chrome or Chromium executable, or unset it")
    for name in _BROWSER_NAMES:
        found = shutil.which(name)
        if found:
            return found, found
    try:    # the browser search kaleido itself will use (typical install paths too)
        from choreographer.browsers.chromium import Chromium
        found = Chromium.find_browser(skip_local=False)
    except Exception:  # noqa: BLE001 - an optional helper; its absence is not an error
        found = None
    if found:
        return str(found), str(found)
    return None, ("no Chrome or Chromium browser was found: install one (on Debian: "
                  "apt-get install chromium) or set BROWSER_PATH to its executable; "
                  "tallyform never downloads a browser")


def _kill_group(proc: subprocess.Popen) -> None:
    """Stop a probe we started and everything it started (its own process group)."""
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError, AttributeError):
        proc.kill()
    proc.communicate()


def _probe(browser: str | None, timeout: float) -> tuple[bool, str]:
    """Render a tiny PNG in a separate process (a second try after a failure, none after
    a timeout)."""
    ok, why = _probe_once(browser, timeout)
    for _ in range(_ATTEMPTS - 1):
        if ok or "did not render" in why:
            break
        ok, why = _probe_once(browser, timeout)
    return ok, why


def _probe_once(browser: str | None, timeout: float) -> tuple[bool, str]:
    """Render a tiny PNG in a separate process that is killed if it takes too long."""
    env = dict(os.environ)
    if browser:
        env["BROWSER_PATH"] = browser
    kwargs = {"start_new_session": True} if os.name == "posix" else {}
    proc = subprocess.Popen([sys.executable, "-c", _PROBE], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env, **kwargs)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _kill_group(proc)
        return False, (f"the browser {browser or '(bundled)'} did not render a test image within "
                       f"{timeout:g} s")
    if proc.returncode == 0 and "ok" in out:
        return True, ""
    lines = [ln for ln in err.strip().splitlines() if ln.strip() and "unexpected operator"
             not in ln]
    last = lines[-1] if lines else f"exit status {proc.returncode}"
    return False, f"a test image could not be rendered with {browser}: {last}"


def static_export_available(*, probe: bool = True, timeout: float = 60.0) -> tuple[bool, str]:
    """Whether PNG/SVG/PDF export works here, and a sentence saying why (not).

    Parameters
    ----------
    probe : bool, default True
        Also render a tiny test image (in a separate process, once per browser and
        session) so that a browser that is present but cannot start is reported too. With
        ``probe=False`` only the installation is checked, which takes milliseconds.
    timeout : float, default 60
        Seconds the probe may take before it is stopped and export declared unavailable.

    Returns
    -------
    (bool, str)
        ``(True, 'kaleido 1.5.1 with /usr/bin/chromium')`` or ``(False, reason)``.
    """
    try:
        import kaleido
    except ImportError:
        return False, ("the kaleido package is not installed (pip install 'kaleido>=1'); "
                       "it also needs a Chrome or Chromium browser")
    version = getattr(kaleido, "__version__", None)
    if version is None:
        try:
            from importlib.metadata import version as _version
            version = _version("kaleido")
        except Exception:  # noqa: BLE001
            version = "?"
    major = str(version).split(".")[0]
    if major.isdigit() and int(major) < 1:
        browser, how = None, "kaleido's bundled browser"
    else:
        browser, how = _find_browser()
        if browser is None:
            return False, how
    info = f"kaleido {version} with {how}"
    if not probe:
        return True, info
    key = (browser, str(version))
    if key not in _probe_cache:
        _probe_cache[key] = _probe(browser, timeout)
    ok, why = _probe_cache[key]
    return (True, info) if ok else (False, why)


# ---------------------------------------------------------------------------- writing
def _write_static(fig, targets: dict) -> None:
    """Write every static format in one browser session, each atomically."""
    import plotly.io as pio
    layout = fig.layout
    width = layout.width or _DEFAULT_SIZE[0]
    height = layout.height or _DEFAULT_SIZE[1]
    with contextlib.ExitStack() as stack:      # every file appears, or none does
        temps = {fmt: stack.enter_context(atomic_write(path, "path", suffix=f".tmp.{fmt}"))
                 for fmt, path in targets.items()}
        fmts = list(temps)
        scales = [_PNG_SCALE if f == "png" else 1 for f in fmts]
        for attempt in range(_ATTEMPTS):
            try:
                if hasattr(pio, "write_images"):      # plotly >= 6.1: one browser for all
                    pio.write_images([fig] * len(fmts), [str(temps[f]) for f in fmts],
                                     format=fmts, width=width, height=height, scale=scales)
                else:
                    for f, s in zip(fmts, scales):
                        pio.write_image(fig, str(temps[f]), format=f, width=width,
                                        height=height, scale=s)
                break
            except Exception:  # noqa: BLE001 - one more try, then the caller reports it
                if attempt + 1 == _ATTEMPTS:
                    raise
        for f in fmts:
            if temps[f].stat().st_size == 0:
                raise RuntimeError(f"the exporter wrote an empty {f.upper()} file")


def _targets(path, formats) -> tuple[Path, list[str]]:
    p = Path(path).expanduser()
    suffix = p.suffix.lower().lstrip(".")
    if suffix == "htm":
        suffix = "html"
    stem = p.with_suffix("") if suffix in _FORMATS else p
    if formats is None:
        formats = ("html", suffix) if suffix in STATIC_FORMATS else ("html", "png", "svg")
    elif isinstance(formats, str):
        formats = (formats,)
    fmts = []
    for f in formats:
        f = str(f).lower().lstrip(".")
        if f not in _FORMATS:
            raise InputError(f"`formats` may hold {list(_FORMATS)}; got {f!r}.")
        if f not in fmts:
            fmts.append(f)
    if "html" not in fmts:
        fmts.insert(0, "html")
    return stem, fmts


def save(fig, path, *, formats=None) -> list[Path]:
    """Write a figure as self-contained HTML, and as PNG/SVG/PDF when an exporter works.

    Parameters
    ----------
    fig : plotly.graph_objects.Figure
    path : str or Path
        Target file; its stem names every format (``out/bars`` or ``out/bars.html`` give
        ``out/bars.html``, ``out/bars.png``...). The folder is created if missing.
    formats : sequence of {'html', 'png', 'svg', 'pdf'}, optional
        Default: HTML plus the format of ``path``'s suffix when it is a static one, else
        HTML, PNG and SVG. HTML is always written.

    Returns
    -------
    SavedFiles (a list of Path)
        The files written; ``.skipped`` maps each static format that was not written to
        the reason, and ``.message`` says it in one line.

    Warns
    -----
    StaticExportWarning
        When static images were asked for but no exporter works (the reason is given).

    Notes
    -----
    The HTML embeds plotly.js (no network needed to open it). PNGs are rendered at twice
    the figure's layout size (1000 x 650 layout pixels when the figure sets none). Each file
    is written to a temporary file in the target folder and renamed over the target.
    """
    import plotly.graph_objects as go
    if not isinstance(fig, go.Figure):
        raise InputError(f"`fig` must be a plotly Figure; got {type(fig).__name__}.")
    stem, fmts = _targets(path, formats)
    stem.parent.mkdir(parents=True, exist_ok=True)
    written = SavedFiles()
    html_path = stem.with_name(stem.name + ".html")
    config = {"displaylogo": False, "responsive": True,
              "toImageButtonOptions": {"format": "png", "scale": _PNG_SCALE}}
    with atomic_write(html_path, "w") as fh:
        fig.write_html(fh, include_plotlyjs=True, full_html=True, include_mathjax=False,
                       config=config)
    written.append(html_path)
    static = [f for f in fmts if f in STATIC_FORMATS]
    if not static:
        return written
    targets = {f: stem.with_name(f"{stem.name}.{f}") for f in static}
    ok, why = static_export_available()
    if ok:
        try:
            _write_static(fig, targets)
        except Exception as err:  # noqa: BLE001 - reported, the HTML is already written
            ok, why = False, f"the exporter failed: {type(err).__name__}: {err}"
    if not ok:
        for f in static:
            written.skipped[f] = why
        warnings.warn(f"{', '.join(f.upper() for f in static)} of {stem.name!r} not written: "
                      f"{why}. The HTML was written ({html_path}).", StaticExportWarning,
                      stacklevel=2)
        return written
    written.extend(targets[f] for f in static)
    return written
