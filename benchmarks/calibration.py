"""The calibration table: does every p-value and interval tallyform prints hold its promise?

Run from the repository root:

    python benchmarks/calibration.py                 # every cell, full replicates
    python benchmarks/calibration.py --only units/   # cells whose id starts with 'units/'
    python benchmarks/calibration.py --reps 100      # quicker, noisier
    python benchmarks/calibration.py --jobs 2 --write  # in parallel; rewrite docs/calibration.*

Each cell simulates studies under a true null (the rejection rate at alpha must lie in its
band, [0.03, 0.07] at alpha = 0.05) or with a known truth (95 % intervals must cover in
[0.92, 0.98]); reference rows show what the unadjusted method does and are not checked. With
``--write`` the table goes to docs/calibration.md and docs/calibration.csv together with the
command that made it. Cells live in benchmarks/calibration_cells/ (one module per family);
the test suite runs a short version of each (tests/calibration/test_calibration.py).
"""
from __future__ import annotations

import argparse
import datetime as _dt
import os
import platform
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import pandas as pd  # noqa: E402

from benchmarks.calibration_cells import all_cells, run_cell  # noqa: E402
from benchmarks.calibration_cells.base import verdict  # noqa: E402


def _run(args):
    cell_id, reps = args
    cell = {c.id: c for c in all_cells()}[cell_id]
    return run_cell(cell, reps).row()


def markdown(frame: pd.DataFrame, command: str) -> str:
    lines = ["# Calibration table", "",
             "Every test and interval that tallyform prints, checked by simulation "
             "(synthetic data). Level rows: share of null studies with p <= alpha "
             "(band [0.6 alpha, 1.4 alpha]); coverage rows: share of 95 % intervals that "
             "covered the truth (band [0.92, 0.98] unless stated). Monte Carlo interval: "
             "95 % Clopper-Pearson. Reference rows show an unadjusted method and are not "
             "checked.", "",
             f"Made with `{command}` on {_dt.date.today().isoformat()} "
             f"({platform.machine()}, Python {platform.python_version()}).", "",
             "| family | method | design | kind | nominal | observed | MC interval | band "
             "| reps | verdict |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for r in frame.itertuples():
        lines.append(f"| {r.family} | {r.method} | {r.design} | {r.kind} | {r.nominal:g} | "
                     f"{r.observed:.3f} | {r.mc_low:.3f}-{r.mc_high:.3f} | "
                     f"{r.band_low:.2f}-{r.band_high:.2f} | {r.replicates} | {r.verdict} |")
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", action="append", default=[],
                    help="run cells whose id starts with this (repeatable)")
    ap.add_argument("--reps", type=int, default=None, help="replicates per cell")
    ap.add_argument("--jobs", type=int, default=1)
    ap.add_argument("--write", action="store_true",
                    help="write docs/calibration.md and docs/calibration.csv")
    ap.add_argument("--list", action="store_true", help="list the cells and stop")
    args = ap.parse_args(argv)
    cells = [c for c in all_cells()
             if not args.only or any(c.id.startswith(o) for o in args.only)]
    if args.list:
        for c in cells:
            print(f"{c.id:40s} {c.kind:8s} {c.method} | {c.design}")
        return 0
    jobs = [(c.id, args.reps) for c in cells]
    rows = []
    if args.jobs > 1:
        with ProcessPoolExecutor(args.jobs) as ex:
            for row in ex.map(_run, jobs):
                rows.append(row)
                _echo(row)
    else:
        for j in jobs:
            row = _run(j)
            rows.append(row)
            _echo(row)
    frame = pd.DataFrame(rows)
    bad = frame[(frame["checked"]) & (frame["verdict"] != "ok")]
    print(f"\n{len(frame)} cells, {int(frame['checked'].sum())} checked, {len(bad)} out of band")
    if args.write:
        command = "python benchmarks/calibration.py " + " ".join(argv or sys.argv[1:])
        (ROOT / "docs").mkdir(exist_ok=True)
        if args.only:
            # merge into the existing table: rows of other cells are kept
            old_path = ROOT / "docs" / "calibration.csv"
            if old_path.exists():
                old = pd.read_csv(old_path)
                old = old[~old["id"].isin(frame["id"])]
                frame = pd.concat([old, frame], ignore_index=True)
            order = {c.id: i for i, c in enumerate(all_cells())}
            frame = frame.sort_values("id", key=lambda s: s.map(order).fillna(1e9))
        frame["verdict"] = [verdict(bool(r.checked), r.kind, r.observed, r.band_low,
                                    r.band_high) for r in frame.itertuples()]
        frame.to_csv(ROOT / "docs" / "calibration.csv", index=False)
        (ROOT / "docs" / "calibration.md").write_text(markdown(frame, command.strip()))
    return 1 if len(bad) else 0


def _echo(row):
    print(f"{row['id']:42s} {row['kind']:8s} observed {row['observed']:.3f} "
          f"[{row['mc_low']:.3f}, {row['mc_high']:.3f}] band {row['band_low']:.2f}-"
          f"{row['band_high']:.2f}  {row['verdict']}  ({row['seconds']} s)", flush=True)


if __name__ == "__main__":
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    raise SystemExit(main())
