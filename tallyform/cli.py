"""The command line: a thin shell over the core and the report.

    tallyform demo [NAME] [--out DIR]      full analysis of a synthetic demo scenario
    tallyform report --counts F --samples F --group COL [--spec F] --out DIR
    tallyform lab [--dir DIR]              JupyterLab on the walkthrough notebooks
"""
from __future__ import annotations

import argparse
import os
import shutil
import sys
import time
from pathlib import Path

import pandas as pd

from . import __version__
from .core.errors import Cancelled, InputError, TallyformError


class Progress:
    """A one-line progress bar on stderr (the core reports, the shell draws)."""

    def __init__(self, label: str, stream=None, width: int = 30):
        self.label, self.stream, self.width = label, stream or sys.stderr, width
        self.start = time.perf_counter()
        self.last = -1

    def __call__(self, done, total):
        frac = 0.0 if total <= 0 else min(1.0, done / total)
        pct = int(100 * frac)
        if pct == self.last:
            return
        self.last = pct
        bar = "#" * int(self.width * frac)
        self.stream.write(f"\r{self.label} [{bar:<{self.width}}] {pct:3d}%")
        self.stream.flush()

    def close(self):
        self.stream.write(f"  ({time.perf_counter() - self.start:.1f} s)\n")
        self.stream.flush()


def _print_table_overview(tab, group: str | None) -> None:
    print(repr(tab))
    print()
    facts = tab.summary().map(lambda v: f"{v:,.4g}" if isinstance(v, float) else v)
    print(facts.to_string())
    if group:
        from .core.abundance import totals_meaning
        print()
        what = "size" if tab.abundance == "absolute" else totals_meaning(tab, short=True)
        print(f"Sample totals ({what}) by {group}:")
        with pd.option_context("display.float_format", "{:,.1f}".format,
                               "display.width", 120):
            print(tab.totals_by(group).to_string())
        if tab.effort is not None:
            print()
            print(f"Totals per unit of effort ({tab.effort_name}) by {group}:")
            with pd.option_context("display.float_format", "{:,.2f}".format,
                                   "display.width", 120):
                print(tab.totals_by(group, per_effort=True).to_string())
    for note in tab.notes:
        print(f"note: {note}")


def _print_findings(results) -> None:
    s, c, a = results.size_shape, results.comparison, results.audit
    print()
    if s is not None:
        fr = s.fractions
        name = f"{s.transform} + {s.measure}" if s.transform else s.measure
        print(f"Size and shape of {name}: size only {100 * fr['size_only']:.1f} %, shared "
              f"{100 * fr['shared']:.1f} %, shape only {100 * fr['shape_only']:.1f} %, "
              f"residual {100 * fr['residual']:.1f} %")
    if results.scan is not None:
        piv = results.scan.pivot("size_only")
        with pd.option_context("display.float_format", "{:.1%}".format, "display.width", 120):
            print("\nSize-only share by measure (rows) and transformation (columns):")
            print(piv.to_string())
    if c is not None:
        print(f"\n{c.reading}")
    if a is not None:
        print(f"\n{a.reading}")
    for step, why in results.skipped.items():
        print(f"\nnot run: {step}: {why}")


def _analyse(spec, tab):
    """tly.run with a progress bar, then the findings printed."""
    from .core.analysis import run
    bar = Progress("analysis")
    try:
        results = run(spec, tab, progress=bar)
    finally:
        bar.close()
    _print_findings(results)
    return results


def _write_all(results, out: Path, *, notebook: bool, title: str) -> None:
    from .render.report import write_outputs
    written = write_outputs(results, out, title=title)
    print(f"\nWrote {written['report']}")
    print(f"      {out / 'tables'}/ ({len(written['tables'])} files, CSV + tables.xlsx)")
    print(f"      {written['spec']}, {written['methods']}")
    if notebook:
        from .render.notebooks import execute_walkthrough
        bar = Progress("walkthrough notebook")
        try:
            nb = execute_walkthrough(out, progress=bar)
        finally:
            bar.close()
        print(f"      {nb}")


def _cmd_demo(args) -> int:
    from .core.scenarios import SCENARIOS, demo
    from .core.spec import AnalysisSpec
    tab = demo(args.name)
    print(f"Demo scenario '{args.name}': {SCENARIOS[args.name]}")
    print("All demo data are invented (synthetic); see demo_data/README.md.")
    print()
    group = args.group or {"mesocosm": "treatment", "moths": "habitat",
                           "soil": "land_use"}[args.name]
    _print_table_overview(tab, group)
    if args.summary_only:
        return 0
    if args.name == "mesocosm":
        spec = AnalysisSpec(group=group, terms=(group, "week"), blocks="tank_block",
                            contrast=("control", "nutrient_high"))
    elif args.name == "soil":
        spec = AnalysisSpec(group=group, size_method="welch", contrast=("forest", "pasture"),
                            **AnalysisSpec.options_of(tab))
    else:
        spec = AnalysisSpec(group=group, size="log_total_per_effort",
                            size_method="negbin", contrast=("woodland", "arable"))
    if args.spec:
        spec = AnalysisSpec.from_json(args.spec)
    results = _analyse(spec, tab)
    _write_all(results, Path(args.out), notebook=not args.no_notebook,
               title=f"tallyform report: {args.name} demo (synthetic data)")
    return 0


def _cmd_report(args) -> int:
    from .core.io import read_counts
    from .core.spec import AnalysisSpec
    spec = AnalysisSpec.from_json(args.spec) if args.spec else AnalysisSpec()
    if args.spike_in or args.spike_added:
        if not (args.spike_in and args.spike_added):
            raise InputError("--spike-in (the spike-in taxon) and --spike-added (the sample "
                             "column with the amount added) go together.")
        spec = spec.replace(spike_in={"taxon": args.spike_in, "added": args.spike_added},
                            load=None, abundance=args.abundance or "relative")
    if args.load:
        spec = spec.replace(load=args.load, spike_in=None,
                            abundance=args.abundance or "relative")
    if args.abundance:
        spec = spec.replace(abundance=args.abundance)
    tab = read_counts(args.counts, args.samples, rows=args.rows, effort=args.effort,
                      sheet=args.sheet, encoding=args.encoding, **spec.table_options())
    if args.group:
        spec = spec.replace(group=args.group)
    if args.measure:
        spec = spec.replace(measure=args.measure)
    if args.transform:
        spec = spec.replace(transform=args.transform)
    _print_table_overview(tab, spec.group)
    results = _analyse(spec, tab)
    _write_all(results, Path(args.out), notebook=False,
               title=f"tallyform report: {Path(args.counts).name}")
    return 0


def _cmd_lab(args) -> int:
    from .render.notebooks import notebook_dir
    folder = Path(args.dir) if args.dir else notebook_dir()
    exe = shutil.which("jupyter-lab") or shutil.which("jupyter")
    if exe is None:
        print("tallyform: error: JupyterLab is not installed (pip install jupyterlab).",
              file=sys.stderr)
        return 2
    cmd = [exe] + (["lab"] if exe.endswith("jupyter") else []) + [str(folder)]
    print("Starting:", " ".join(cmd))
    os.execv(exe, cmd)          # hand the terminal over to JupyterLab
    return 0                    # pragma: no cover


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="tallyform", description=(
        "Size and shape of community data: how much of the variation between samples a "
        "transformation and dissimilarity attribute to total abundance versus composition."))
    p.add_argument("--version", action="version", version=f"tallyform {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    d = sub.add_parser("demo", help="full analysis of a bundled synthetic demo scenario")
    d.add_argument("name", nargs="?", default="mesocosm", choices=["mesocosm", "moths", "soil"])
    d.add_argument("--out", default="tallyform-demo",
                   help="folder for the report, tables and notebook (default: tallyform-demo)")
    d.add_argument("--group", help="sample column whose groups are compared")
    d.add_argument("--spec", help="analysis spec (JSON) to use instead of the default")
    d.add_argument("--summary-only", action="store_true",
                   help="print the table summary and totals by group, write nothing")
    d.add_argument("--no-notebook", action="store_true",
                   help="do not execute the walkthrough notebook")
    d.set_defaults(func=_cmd_demo)
    r = sub.add_parser("report", help="full analysis of your own files")
    r.add_argument("--counts", required=True, help="counts table (CSV, TSV or XLSX)")
    r.add_argument("--samples", help="sample information table")
    r.add_argument("--group", help="sample column whose groups are compared")
    r.add_argument("--spec", help="analysis spec (JSON)")
    r.add_argument("--measure", help="dissimilarity under study (default bray_curtis)")
    r.add_argument("--transform", help="transformation (none, sqrt, fourth_root, log1p...)")
    r.add_argument("--effort", help="sampling-effort column of the sample table")
    r.add_argument("--rows", choices=["samples", "taxa"], help="what the rows of the counts are")
    r.add_argument("--abundance", choices=["absolute", "relative"],
                   help="what the totals mean: absolute (counts of individuals, biomass; the "
                        "default) or relative (sequencing reads, percentages: size results "
                        "need --load or --spike-in)")
    r.add_argument("--load", help="sample column of absolute abundance per sample (qPCR "
                                  "copies, cell counts) for relative data")
    r.add_argument("--spike-in", help="taxon added in a known amount (relative data)")
    r.add_argument("--spike-added", help="sample column with the amount of spike-in added")
    r.add_argument("--sheet", help="spreadsheet sheet of the counts")
    r.add_argument("--encoding", help="text encoding of the files (default UTF-8)")
    r.add_argument("--out", required=True, help="output folder")
    r.set_defaults(func=_cmd_report)
    lab = sub.add_parser("lab", help="open JupyterLab on the walkthrough notebooks")
    lab.add_argument("--dir", help="folder to open (default: the bundled notebooks)")
    lab.set_defaults(func=_cmd_lab)
    return p


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except TallyformError as err:
        print(f"\ntallyform: error: {err}", file=sys.stderr)
        return 2
    except Cancelled as err:
        print(f"\ntallyform: stopped: {err}", file=sys.stderr)
        return 130
    except KeyboardInterrupt:
        print("\ntallyform: interrupted; nothing half-written was kept.", file=sys.stderr)
        return 130
    except BrokenPipeError:          # e.g. `tallyform demo | head`
        return 0


if __name__ == "__main__":
    sys.exit(main())
