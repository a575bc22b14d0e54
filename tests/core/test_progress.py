"""Progress by default where someone watches, one bar for nested work, an estimate before a
long run, and interruption turned into Cancelled with how far the call got."""
from __future__ import annotations

import subprocess
import sys

import pytest

from tallyform.core import progress as P
from tallyform.errors import Cancelled, InputError


@P.reports_progress("Counting", knob="n_steps")
def count(n_steps=10, *, progress=None, cancel=None, boom_at=None, inner=None):
    for i in range(n_steps):
        if boom_at is not None and i == boom_at:
            raise KeyboardInterrupt
        if cancel is not None and cancel():                  # the call checks cancel itself
            raise Cancelled(f"stopped after {i} of {n_steps} steps")
        if inner is not None:
            inner()
        progress(i + 1, n_steps)
    return n_steps


@pytest.fixture(autouse=True)
def _reset():
    yield
    P.set_progress(True)


def test_callable_false_and_session_default():
    seen = []
    assert count(3, progress=lambda d, t: seen.append((d, t))) == 3
    assert seen == [(1, 3), (2, 3), (3, 3)]
    assert count(3, progress=False) == 3
    P.set_progress(lambda d, t: seen.append(("default", d)))
    count(2)
    assert seen[-2:] == [("default", 1), ("default", 2)]
    with pytest.raises(InputError, match="`progress` must be"):
        P.set_progress("yes")
    with pytest.raises(InputError, match="`progress` must be"):
        count(2, progress="yes")


def test_nested_calls_report_once():
    seen = []
    inner_seen = []
    count(2, progress=lambda d, t: seen.append(d),
          inner=lambda: count(5, inner=None))                 # inner: progress=None
    assert seen == [1, 2]
    count(2, progress=lambda d, t: seen.append(d),
          inner=lambda: count(3, progress=lambda d, t: inner_seen.append(d)))
    assert inner_seen == [1, 2, 3] * 2                        # a callable is always honoured


def test_interrupt_and_cancel_say_how_far():
    with pytest.raises(Cancelled, match="Counting was interrupted after 4 of 10 steps"):
        count(10, progress=False, boom_at=4)
    calls = iter([False, False, True])
    with pytest.raises(Cancelled, match="stopped after 2 of 10 steps"):
        count(10, progress=False, cancel=lambda: next(calls))


def test_estimate_after_warmup_names_the_knob(monkeypatch):
    clock = iter(range(0, 10_000, 2))                        # every call: 2 s later
    monkeypatch.setattr(P.time, "monotonic", lambda: float(next(clock)))
    rep = P.Reporter("PERMANOVA", None, None, None, ("n_permutations", 9999))
    rep(10, 9999)           # first report at 2 s (set-up), then 2 s per 10 steps:
    rep(20, 9999)           # 2 + 2 * 9989 / 10 = about 2000 s in all
    assert rep.estimate_text.startswith("PERMANOVA: about 33 min in all")
    assert "n_permutations=999 would take about 3 min" in rep.estimate_text
    quick = P.Reporter("scan", None, None, None, None)
    quick(800, 1000)
    quick(900, 1000)
    assert quick.estimated and quick.estimate_text is None   # short runs say nothing


def test_terminal_line_and_silence_without_terminal(monkeypatch, capsys):
    monkeypatch.setattr(P, "_stderr_is_terminal", lambda: True)
    count(3, progress=True)
    assert capsys.readouterr().err == ""                    # quick calls leave no trace
    monkeypatch.setattr(P, "SHOW_AFTER", 0.0)
    count(3, progress=True)
    err = capsys.readouterr().err
    assert "Counting: 3/3 done in" in err
    # a script whose stderr is not a terminal prints nothing
    code = ("from tallyform.core.progress import reports_progress\n"
            "@reports_progress('x')\n"
            "def f(*, progress=None, cancel=None):\n"
            "    [progress(i + 1, 50) for i in range(50)]\n"
            "f()\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stderr == "" and out.stdout == ""


def test_format_seconds():
    assert [P.format_seconds(s) for s in (3, 89.4, 240, 7200)] == \
        ["3 s", "89 s", "4 min", "2.0 h"]


def test_estimate_counts_the_set_up_once(monkeypatch):
    # set-up 5 s, then 10 steps every 2 s: 5 + 2 * (1000 - 10) / 10 = 203 s (arithmetic)
    clock = iter([0.0, 5.0, 7.0])
    monkeypatch.setattr(P.time, "monotonic", lambda: next(clock))
    rep = P.Reporter("PERMANOVA", None, None, None, None)
    rep(10, 1000)
    rep(20, 1000)
    assert rep.projected == pytest.approx(203.0)
    assert rep.estimate_text == "PERMANOVA: about 3 min in all."


def test_knob_names_and_functions():
    import inspect

    def f(*, n_permutations=999, n_boot=0, method="a", progress=None, cancel=None):
        pass
    sig = inspect.signature(f)
    assert P._knob_of("n_boot", sig, {"n_boot": 5000}) == ("n_boot", 5000)
    assert P._knob_of(("n_permutations", "n_boot"), sig, {}) == ("n_permutations", 999)
    assert P._knob_of(("n_permutations", "n_boot"), sig, {"n_boot": 99}) is None  # both
    assert P._knob_of(lambda a: "n_boot" if a["method"] == "b" else None, sig,
                      {"method": "b"}) == ("n_boot", 0)
    assert P._knob_of(lambda a: None, sig, {}) is None


def test_every_looping_public_call_reports_progress():
    import tallyform as tly
    looping = ["permanova", "pairwise_permanova", "dispersion_test", "welch_permanova",
               "size_test", "size_shape", "scan", "compare_choices", "choice_adjusted",
               "audit", "taxon_contributions", "compare_groups", "constraint_test",
               "shape_test", "spread_test", "run", "nmds", "report"]
    for name in looping:
        fn = getattr(tly, name)
        assert hasattr(fn, "__wrapped__"), name               # wrapped by reports_progress
        params = __import__("inspect").signature(fn).parameters
        assert params["progress"].default is None and params["cancel"].default is None


def test_environment_variable_sets_the_starting_default():
    # common practice: an environment switch for output meant for logs or shared files
    import subprocess
    import sys
    code = "import tallyform as tly; print(tly.get_progress())"
    for value, want in (("0", "False"), ("off", "False"), ("", "True"), ("1", "True")):
        env = dict(__import__("os").environ, TALLYFORM_PROGRESS=value)
        out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                             text=True, check=True).stdout.strip()
        assert out == want, (value, out)


@P.reports_progress("Compiled")
def wrapped_interrupt(*, progress=None, cancel=None, other=False):
    # a compiled (numba) call interrupted while it loads wraps the KeyboardInterrupt in a
    # SystemError ("returned a result with an exception set"); seen on a loaded machine
    try:
        raise KeyboardInterrupt
    except KeyboardInterrupt as err:
        if other:
            raise SystemError("unrelated") from ValueError("x")
        raise SystemError("returned a result with an exception set") from err


def test_interrupt_wrapped_by_a_compiled_call_is_still_an_interruption():
    with pytest.raises(Cancelled, match="Compiled was interrupted"):
        wrapped_interrupt(progress=False)
    with pytest.raises(SystemError, match="unrelated"):
        wrapped_interrupt(progress=False, other=True)
