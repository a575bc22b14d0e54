"""The README's quick start: exactly two commands, and CI runs the second verbatim."""
from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [c.strip() for c in re.findall(r"```bash\n(.*?)```", section, re.S)]


def test_two_commands_and_ci_runs_the_test_command():
    cmds = quick_start_commands()
    assert len(cmds) == 2 and all("\n" not in c for c in cmds), cmds
    assert "tallyform demo" in cmds[0]
    assert "pytest" in cmds[1]
    ci = (ROOT / ".ci" / "run").read_text().splitlines()
    assert cmds[1] in ci, "'.ci/run' must run the README's test command verbatim"


def test_readme_opens_with_the_job():
    first = (ROOT / "README.md").read_text().split("\n\n")[1]
    for word in ("ecologists", "size", "shape", "dissimilarity"):
        assert word in first


def test_using_it_block_is_python_and_shows_this_rounds_calls():
    text = (ROOT / "README.md").read_text()
    block = text.split("## Using it", 1)[1].split("```python", 1)[1].split("```", 1)[0]
    compile(block, "README Using it", "exec")                  # valid Python
    for call in ('units="tank"', "tly.compare_choices(", "tly.constraint_test(",
                 "tly.welch_permanova(", "spec.code()", "tly.run(spec, tab)"):
        assert call in block, call
    import tallyform as tly                                    # every tly.<name> exists
    for name in re.findall(r"\btly\.([a-z_]+)\(", block):
        assert callable(getattr(tly, name)), name


def test_changelog_lists_this_round():
    log = (ROOT / "README.md").read_text().split("## Changelog", 1)[1]
    for words in ("Sampling units", "order-free", "Welch's ANOVA of log totals is the default",
                  "welch_permanova", "sqrt(n_g / (n_g - 1))", "dispersion per group",
                  "Monte Carlo test", "compare_choices", "jackknife-t", "Ellipses say what",
                  "constraint_test", "relative", "notebook 05", "Sparse kernels",
                  "calibration table"):
        assert words in log, words
