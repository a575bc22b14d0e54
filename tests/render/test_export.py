"""save(): self-contained HTML, atomic writes, static images when an exporter works."""
from __future__ import annotations

import os
import re
import struct
import warnings

import plotly.graph_objects as go
import pytest

from tallyform.core.errors import InputError
from tallyform.render import export, plots


@pytest.fixture
def fig():
    return go.Figure(go.Scatter(x=[1, 2, 3], y=[3, 1, 2], name="synthetic"),
                     layout={"width": 400, "height": 300})


def _static_or_skip():
    ok, why = plots.static_export_available()
    if not ok:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(f"static export must work in CI, but: {why}")
        pytest.skip(f"NO STATIC IMAGE EXPORT ON THIS MACHINE: {why}")
    return why


def test_html_is_self_contained(tmp_path, fig):
    out = plots.save(fig, tmp_path / "fig.html", formats=["html"])
    assert out == [tmp_path / "fig.html"]
    html = out[0].read_text(encoding="utf-8")
    assert '<script src="http' not in html and "<script src='http" not in html
    assert not re.search(r"<script[^>]*\bsrc=", html)        # every script is inline
    assert "cdn.plot.ly/plotly" not in html                     # the library is embedded
    # the only mention of the CDN host is plotly.js's built-in default for geographic
    # map outlines (never used by tallyform's figures), inside the embedded library
    hosts = [html[m.start() - 60:m.end()] for m in re.finditer(r"cdn\.plot\.ly", html)]
    assert all("topojsonURL" in h for h in hosts), hosts
    assert "Plotly.newPlot" in html and "synthetic" in html


def test_html_always_written_and_formats_checked(tmp_path, fig, monkeypatch):
    monkeypatch.setattr(export, "static_export_available",
                        lambda **kw: (False, "no exporter (test)"))
    with pytest.warns(export.StaticExportWarning, match="no exporter"):
        out = plots.save(fig, tmp_path / "sub" / "fig.png")
    assert out == [tmp_path / "sub" / "fig.html"]
    assert out.skipped == {"png": "no exporter (test)"}
    assert "PNG skipped: no exporter" in out.message
    assert not (tmp_path / "sub" / "fig.png").exists()
    with pytest.raises(InputError, match="formats"):
        plots.save(fig, tmp_path / "x", formats=["gif"])
    with pytest.raises(InputError, match="plotly Figure"):
        plots.save({"data": []}, tmp_path / "x")


def _only(tmp_path):
    return sorted(p.name for p in tmp_path.iterdir())


def test_failed_html_write_keeps_old_file(tmp_path, fig, monkeypatch):
    target = tmp_path / "fig.html"
    target.write_text("OLD", encoding="utf-8")

    def broken_sync(fd):         # the data is in the temporary file when this fails
        raise OSError("disk full (simulated)")

    from tallyform.core import fileio        # the one atomic writer syncs before renaming
    monkeypatch.setattr(fileio.os, "fsync", broken_sync)
    with pytest.raises(OSError, match="simulated"):
        plots.save(fig, target, formats=["html"])
    assert target.read_text(encoding="utf-8") == "OLD"
    assert _only(tmp_path) == ["fig.html"]                   # no temporary file left


def test_failed_rename_keeps_old_file(tmp_path, fig, monkeypatch):
    target = tmp_path / "fig.html"
    target.write_text("OLD", encoding="utf-8")

    def broken_replace(src, dst):
        raise OSError("rename failed (simulated)")

    monkeypatch.setattr(export.os, "replace", broken_replace)
    with pytest.raises(OSError, match="simulated"):
        plots.save(fig, target, formats=["html"])
    assert target.read_text(encoding="utf-8") == "OLD"
    assert _only(tmp_path) == ["fig.html"]


def test_failed_static_write_keeps_old_image(tmp_path, fig, monkeypatch):
    import plotly.io as pio
    (tmp_path / "fig.png").write_bytes(b"OLD PNG")
    monkeypatch.setattr(export, "static_export_available", lambda **kw: (True, "test"))

    calls = []

    def half_written(figs, files, **kw):
        calls.append(files)
        with open(files[0], "wb") as fh:       # a partial image, then the exporter dies
            fh.write(b"\x89PNG partial")
        raise RuntimeError("browser crashed (simulated)")

    monkeypatch.setattr(pio, "write_images", half_written)
    with pytest.warns(export.StaticExportWarning, match="simulated"):
        out = plots.save(fig, tmp_path / "fig.png")
    assert (tmp_path / "fig.png").read_bytes() == b"OLD PNG"
    assert _only(tmp_path) == ["fig.html", "fig.png"]
    assert "browser crashed" in out.skipped["png"]
    assert len(calls) == export._ATTEMPTS             # tried again before giving up


def test_missing_browser_is_reported_without_probing(monkeypatch, tmp_path):
    monkeypatch.setenv("BROWSER_PATH", str(tmp_path / "no-such-browser"))

    def no_probe(*a, **k):
        raise AssertionError("must not start anything when the browser is missing")

    monkeypatch.setattr(export, "_probe", no_probe)
    ok, why = plots.static_export_available()
    assert not ok and "BROWSER_PATH" in why and "no-such-browser" in why


def test_hanging_probe_is_stopped(monkeypatch):
    monkeypatch.setattr(export, "_PROBE", "import time; time.sleep(60)")
    ok, why = export._probe(None, 1.0)
    assert not ok and "within 1 s" in why


def _png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


def test_png_and_svg_export(tmp_path, fig):
    _static_or_skip()
    with warnings.catch_warnings():
        warnings.simplefilter("error", export.StaticExportWarning)
        out = plots.save(fig, tmp_path / "fig", formats=["png", "svg"])
    assert [p.name for p in out] == ["fig.html", "fig.png", "fig.svg"]
    assert out.skipped == {}
    assert _png_size((tmp_path / "fig.png").read_bytes()) == (800, 600)   # 2 x layout
    svg = (tmp_path / "fig.svg").read_text(encoding="utf-8")
    assert svg.lstrip().startswith("<svg") and "<text" in svg
    assert _only(tmp_path) == ["fig.html", "fig.png", "fig.svg"]     # no temporary files


def test_one_atomic_writer_syncs_before_it_renames(tmp_path, monkeypatch):
    # the order a crash-safe write needs: data synced to disk, then the rename (common practice)
    from tallyform.core import fileio
    calls = []
    real_fsync, real_replace = fileio.os.fsync, fileio.os.replace
    monkeypatch.setattr(fileio.os, "fsync", lambda fd: (calls.append("fsync"), real_fsync(fd)))
    monkeypatch.setattr(fileio.os, "replace",
                        lambda a, b: (calls.append("replace"), real_replace(a, b)))
    fileio.write_text_atomic(tmp_path / "a.txt", "x")
    assert calls == ["fsync", "replace"]
    assert (tmp_path / "a.txt").read_text() == "x"
