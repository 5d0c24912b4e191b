"""Run the demo: a few realistic filters from an invented harbour-logistics scenario, checked
on every embedded engine against the reference semantics."""

from __future__ import annotations

import argparse

from rexpr.cli import check


DEMO_FIELDS = ["vessel:string", "berth:int64", "draft_m:float64", "tonnage:int64", "eta:timestamp", "cargo:string"]
DEMO_FILTERS = [
    "trim(vessel) = 'Kestrel' and draft_m * 2 > 11.5",
    "substring(cargo, 1, 3) = 'FRZ' or tonnage between 1000 and 5000",
    "coalesce(draft_m, 0) < 9.5 and year(eta) = 2026",
]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--engines", metavar="LIST", default="reference,arrow,numpy",
                        help="engines to check on (default: the in-process ones)")


def run(args: argparse.Namespace) -> int:
    worst = 0
    for text in DEMO_FILTERS:
        namespace = argparse.Namespace(expression=text, field=DEMO_FIELDS, schema=None, rows=None,
                                       engines=args.engines, lowering="faithful", json=False)
        worst = max(worst, check.run(namespace))
        print("-" * 72)
    return worst
