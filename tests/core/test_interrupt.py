"""Ctrl-C (SIGINT, a notebook's stop button) during a long call: the call stops within a
second with Cancelled saying how far it got, and nothing is written.

Each call runs in a child process on the synthetic demo data. The child's signal handler
notes when the signal arrived and then does what Python's default handler does (raises
KeyboardInterrupt), so the delay measured is the library's, not the process start-up's.
"""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

pytestmark = pytest.mark.skipif(os.name != "posix", reason="SIGINT to a child: POSIX only")

CHILD = r'''
import json, signal, sys, time
import tallyform as tly
from tallyform.errors import Cancelled
got = {}
def on_sigint(signum, frame):
    got["at"] = time.perf_counter()
    raise KeyboardInterrupt
signal.signal(signal.SIGINT, on_sigint)
started = []
def started_marker():                       # polled by the loops: the work has begun
    if not started:
        started.append(1)
        print("STARTED", flush=True)
    return False
tab = tly.demo()
what = sys.argv[1]
try:
    if what == "permanova":
        d = tly.dissimilarity(tab, "bray_curtis")
        tly.permanova(d, tab.samples, "treatment", units=False, n_permutations=2_000_000,
                      rng=1, cancel=started_marker)
    elif what == "audit":
        tly.audit(tab, "treatment", n_sim=5000, rng=1, cancel=started_marker)
    elif what == "report":
        tly.report(tab, {"group": "treatment"}, "out/report.html", cancel=started_marker)
    print(json.dumps({"finished": True}), flush=True)
except Cancelled as err:
    print(json.dumps({"cancelled": str(err),
                      "delay": time.perf_counter() - got["at"]}), flush=True)
'''


def _snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


@pytest.mark.parametrize("what,label", [("permanova", "PERMANOVA"), ("audit", "Audit"),
                                        ("report", "Report")])
def test_sigint_stops_within_a_second_and_writes_nothing(what, label, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "report.html").write_text("an earlier report\n")       # must survive untouched
    (tmp_path / "child.py").write_text(CHILD)
    before = _snapshot(tmp_path)
    env = dict(os.environ, OMP_NUM_THREADS="1")
    child = subprocess.Popen([sys.executable, "child.py", what], cwd=tmp_path, env=env,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        line = child.stdout.readline()
        assert line.strip() == "STARTED", line + child.stderr.read()
        time.sleep(0.5)                                    # well inside the work
        child.send_signal(signal.SIGINT)
        stdout, stderr = child.communicate(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
    lines = stdout.strip().splitlines()
    assert lines, stderr                                   # the child's traceback, if any
    report = json.loads(lines[-1])
    assert "cancelled" in report, (stdout, stderr)
    assert report["cancelled"].startswith(f"{label} was interrupted")
    assert "no result was kept" in report["cancelled"]
    assert report["delay"] < 1.0                          # the promise: within 1 s
    assert child.returncode == 0 and stderr == ""          # no traceback, no bar (a pipe)
    assert _snapshot(tmp_path) == before                   # no partial or temporary file
