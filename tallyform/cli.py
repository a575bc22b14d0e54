"""The command line: a thin shell over the core (and, later, the report)."""
from __future__ import annotations

import argparse
import sys

import pandas as pd

from . import __version__
from .core.errors import TallyformError


def _print_table_overview(tab, group: str | None) -> None:
    print(repr(tab))
    print()
    facts = tab.summary().map(lambda v: f"{v:,.4g}" if isinstance(v, float) else v)
    print(facts.to_string())
    if group:
        print()
        print(f"Sample totals (size) by {group}:")
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


def _cmd_demo(args) -> int:
    from .core.scenarios import SCENARIOS, demo
    tab = demo(args.name)
    print(f"Demo scenario '{args.name}': {SCENARIOS[args.name]}")
    print("All demo data are invented (synthetic); see demo_data/README.md.")
    print()
    _print_table_overview(tab, args.group or ("treatment" if args.name == "mesocosm"
                                              else "habitat"))
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="tallyform", description=(
        "Size and shape of community data: how much of the variation between samples a "
        "transformation and dissimilarity attribute to total abundance versus composition."))
    p.add_argument("--version", action="version", version=f"tallyform {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    d = sub.add_parser("demo", help="run tallyform on a bundled synthetic demo scenario")
    d.add_argument("name", nargs="?", default="mesocosm", choices=["mesocosm", "moths"])
    d.add_argument("--group", help="sample column to summarise totals by")
    d.set_defaults(func=_cmd_demo)
    return p


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except TallyformError as err:
        print(f"tallyform: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
