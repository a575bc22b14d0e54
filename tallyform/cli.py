"""The command line: a thin shell over the core and the report.

    tallyform demo [NAME] [--out DIR]      full analysis of a synthetic demo scenario
    tallyform report --counts F --samples F --group COL [--units COL] [--spec F] --out DIR
    tallyform lab [--dir DIR]              JupyterLab on the walkthrough notebooks

Messages from the core name Python keywords (``units=False``); the shell says them as its
own options (``--no-units``), or as a key of the ``--spec`` JSON where it has no option.
"""
from __future__ import annotations

import argparse
import os
import re
import shutil
import sys
import time
from pathlib import Path

import pandas as pd

from . import __version__
from .core.abundance import ABUNDANCE
from .core.errors import Cancelled, InputError, TallyformError
from .core.scenarios import demo_names
from .core.table import EMPTY_POLICIES


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


def _print_table_overview(tab, group: str | None, units=None) -> None:
    from .render.wording import totals_heading, units_headline
    print(repr(tab))
    if units is not None and units.plan is not None:
        print(units_headline(tab.n_samples, units.plan))
    print()
    facts = tab.summary().map(lambda v: f"{v:,.4g}" if isinstance(v, float) else v)
    print(facts.to_string())
    if group:
        print()
        print(totals_heading(tab, group) + ":")
        with pd.option_context("display.float_format", "{:,.1f}".format,
                               "display.width", 120):
            print(tab.totals_by(group).to_string())
        if tab.effort is not None:
            print()
            print(f"Totals per unit of effort ({tab.effort_name}) by {group}:")
            with pd.option_context("display.float_format", "{:,.2f}".format,
                                   "display.width", 120):
                print(tab.totals_by(group, per_effort=True).to_string())
    if units is not None and units.terms:
        from .render.wording import units_paragraph
        print()
        print(cli_words(units_paragraph(units, cli=True)))
    for note in tab.notes:
        print(f"note: {cli_words(note)}")


# Python keywords in messages -> this command line's options (or --spec keys)
_CLI_WORDS = [
    (r"\bunits=False\b", "--no-units"),
    (r"\bunits=(?:\.\.\.|'[^']*'|\[[^\]]*\])", "--units COLUMN"),
    (r"\babundance='(relative|absolute)'", r"--abundance \1"),
    (r"\bload=(?:'[^']*'|\.\.\.)?", "--load COLUMN"),
    (r"\bspike_in=(?:\{[^}]*\}|\.\.\.)?", "--spike-in TAXON --spike-added COLUMN"),
    (r"\beffort=(?:'[^']*'|\.\.\.)?", "--effort COLUMN"),
    (r"\brows='(samples|taxa)'", r"--rows \1"),
    (r"\bencoding='([^']*)'", r"--encoding \1"),
    (r"\bsep=(?:'([^']*)'|\.\.\.)", r"--sep SEPARATOR"),
    (r"\bdecimal='([^']*)'", r"--decimal '\1'"),
    (r"\bthousands='([^']*)'", r"--thousands '\1'"),
    (r"\bheader_row=(\w+)", r"--header-row \1"),
    (r"\bempty='(\w+)'", r"--empty \1"),
    (r"\bmethod='(\w+)'", r'"size_method": "\1" in --spec'),
]


def cli_words(text: str) -> str:
    """A core message as the command line says it: its options instead of Python keywords,
    and ``"key": value in --spec`` for a spec key the command line has no option for."""
    from .core.spec import AnalysisSpec
    for pattern, repl in _CLI_WORDS:
        text = re.sub(pattern, repl, text)
    keys = set(AnalysisSpec.__dataclass_fields__)

    def spec_key(m):
        key, value = m.group(1), m.group(2)
        if key not in keys:
            return m.group(0)
        value = f'"{value[1:-1]}"' if value.startswith("'") else value
        value = {"True": "true", "False": "false", "None": "null"}.get(value, value)
        return f'"{key}": {value} in --spec'
    return re.sub(r"\b([a-z_]+)=('[^']*'|[\w.]+)", spec_key, text)


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
        print(f"\n{cli_words(c.reading)}")
    if a is not None:
        print(f"\n{cli_words(a.reading)}")
    for step, why in results.skipped.items():
        print(f"\nnot run: {step}: {cli_words(why)}")


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


def _units_option(args):
    """The spec's ``units`` from --units (repeatable, or a comma list) and --no-units."""
    if getattr(args, "no_units", False):
        if args.units:
            raise InputError("--units and --no-units contradict each other; keep one.")
        return False
    if not args.units:
        return None
    names = [u.strip() for item in args.units for u in item.split(",") if u.strip()]
    return names[0] if len(names) == 1 else tuple(names)


def _with_units(spec, args):
    units = _units_option(args)
    return spec if units is None and not args.units else spec.replace(units=units)


def _resolved_units(spec, tab):
    """The units the run will use (None when the spec does not fit the table: the run then
    says why)."""
    from .core.errors import DesignError
    from .core.steps import resolve_spec_units
    try:
        spec.validate(tab)
        return resolve_spec_units(spec, tab)
    except (InputError, DesignError):
        return None


def _cmd_demo(args) -> int:
    from .core.scenarios import SCENARIOS, demo
    from .core.spec import AnalysisSpec
    tab = demo(args.name)
    print(f"Demo scenario '{args.name}': {SCENARIOS[args.name]}")
    print("All demo data are invented (synthetic); see demo_data/README.md.")
    print()
    group = args.group or {"mesocosm": "treatment", "moths": "habitat",
                           "soil": "land_use"}[args.name]
    if args.spec:
        spec = AnalysisSpec.from_json(args.spec)
    elif args.name == "mesocosm":
        spec = AnalysisSpec(group=group, terms=(group, "week"), blocks="tank_block",
                            contrast=("control", "nutrient_high"))
    elif args.name == "soil":
        spec = AnalysisSpec(group=group, size_method="welch", contrast=("forest", "pasture"),
                            **AnalysisSpec.options_of(tab))
    else:
        spec = AnalysisSpec(group=group, size="log_total_per_effort",
                            size_method="negbin", contrast=("woodland", "arable"))
    if args.group and args.group != spec.group:
        spec = spec.replace(group=args.group, terms=None, contrast=None)
    spec = _with_units(spec, args).replace(source={"demo": args.name})
    _print_table_overview(tab, spec.group, _resolved_units(spec, tab))
    if args.summary_only:
        return 0
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
    reader = {"counts": args.counts, "samples": args.samples, "rows": args.rows,
              "effort": args.effort, "sheet": args.sheet, "encoding": args.encoding,
              "sep": args.sep, "decimal": args.decimal, "thousands": args.thousands,
              "header_row": args.header_row, "empty": args.empty}
    reader = {k: v for k, v in reader.items() if v is not None}
    tab = read_counts(reader.pop("counts"), **reader, **spec.table_options())
    spec = spec.replace(source={"counts": args.counts, **reader})
    if args.group:
        spec = spec.replace(group=args.group)
    if args.measure:
        spec = spec.replace(measure=args.measure)
    if args.transform:
        spec = spec.replace(transform=args.transform)
    spec = _with_units(spec, args)
    _print_table_overview(tab, spec.group, _resolved_units(spec, tab))
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


def _unit_arguments(sub) -> None:
    sub.add_argument("--units", action="append", metavar="COLUMN",
                     help="sample column of the sampling units (tank, site, plot) whose "
                          "samples are not independent replicates; nested units coarsest "
                          "first, repeated or as a comma list (--units site,plot). Default: "
                          "found from the design")
    sub.add_argument("--no-units", action="store_true",
                     help="treat every sample as an independent replicate")


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="tallyform", description=(
        "Size and shape of community data: how much of the variation between samples a "
        "transformation and dissimilarity attribute to total abundance versus composition."))
    p.add_argument("--version", action="version", version=f"tallyform {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    d = sub.add_parser("demo", help="full analysis of a bundled synthetic demo scenario")
    d.add_argument("name", nargs="?", default="mesocosm", choices=demo_names())
    d.add_argument("--out", default="tallyform-demo",
                   help="folder for the report, tables and notebook (default: tallyform-demo)")
    d.add_argument("--group", help="sample column whose groups are compared")
    _unit_arguments(d)
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
    _unit_arguments(r)
    r.add_argument("--spec", help="analysis spec (JSON)")
    r.add_argument("--measure", help="dissimilarity under study (default bray_curtis)")
    r.add_argument("--transform", help="transformation (none, sqrt, fourth_root, log1p...)")
    r.add_argument("--effort", help="sampling-effort column of the sample table")
    r.add_argument("--rows", choices=["samples", "taxa"], help="what the rows of the counts are")
    r.add_argument("--abundance", choices=list(ABUNDANCE),
                   help="what the totals mean: absolute (counts of individuals, biomass; the "
                        "default) or relative (sequencing reads, percentages: size results "
                        "need --load or --spike-in)")
    r.add_argument("--load", help="sample column of absolute abundance per sample (qPCR "
                                  "copies, cell counts) for relative data")
    r.add_argument("--spike-in", help="taxon added in a known amount (relative data)")
    r.add_argument("--spike-added", help="sample column with the amount of spike-in added")
    r.add_argument("--sheet", help="spreadsheet sheet of the counts")
    r.add_argument("--encoding", help="text encoding of the files (default UTF-8)")
    r.add_argument("--sep", help="column separator of text files (default: detected)")
    r.add_argument("--decimal", help="decimal mark of the numbers (default '.')")
    r.add_argument("--thousands", help="thousands separator of the numbers (default none)")
    r.add_argument("--header-row", type=int, help="line of the header (default 1)")
    r.add_argument("--empty", choices=list(EMPTY_POLICIES),
                   help="samples or taxa with no counts: refuse (default), drop or keep them")
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
        print(f"\ntallyform: error: {cli_words(str(err))}", file=sys.stderr)
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
