"""Differential tester benchmark: case evaluations per second per engine over the bundled
corpora, one statement per batch beside one statement per case (medians, side by side), then
the whole bundled corpus as `rexpr diff` runs it on the embedded engines, with 1 and 2 jobs.

    .venv/bin/python bench/bench_differential.py [--repeat 3] [--servers] [--skip-campaign]

Lowering is done once up front and timed on its own; the statement columns time only the
engine (load the table, run, map back, bisect failing rows): every case of a batch in one
statement, the runner's batches (one statement for the cases the reference says raise on no
row, one each for the others), and one statement per case. A case evaluation is one
expression over all rows of its corpus.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from common import median_time, print_table  # noqa: E402

from rexpr.backends import get_backend  # noqa: E402
from rexpr.differential.campaign import CampaignSpec, corpus_batches, merge_shards, run_campaign  # noqa: E402
from rexpr.differential.runner import _evaluate_batch, close_engines, evaluate_isolating, open_engines  # noqa: E402
from rexpr.errors import NotPushable  # noqa: E402
from rexpr.values import RowError  # noqa: E402

EMBEDDED = ("duckdb", "sqlite")
SERVERS = ("postgres", "mariadb")


def local_rate(name: str, batches, repeat: int) -> list[str]:
    cases = sum(len(b.cases) for b in batches)
    prepared = [(b.table, [get_backend(name)(c.tree) for c in b.cases]) for b in batches]

    def run() -> None:
        for table, runs in prepared:
            for evaluate in runs:
                evaluate(table)

    seconds = median_time(run, repeat=repeat)
    return [name, "local", str(cases), "-", f"{cases / seconds:,.0f}", "-", "-", "-"]


def sql_rates(name: str, lowering: str, batches, repeat: int) -> list[str] | None:
    from rexpr.engines.base import SqlItem
    from rexpr.sql.lowering import lower

    states = open_engines([name])
    state = states[name]
    if state.unavailable:
        print(f"{name}: unavailable ({state.unavailable})")
        return None
    try:
        start = time.perf_counter()
        work = []
        for b in batches:
            items, raising = [], []
            for c in b.cases:
                try:
                    items.append(SqlItem(c.case_id, lower(c.tree, name, lowering), c.tree.type))  # type: ignore[arg-type]
                except NotPushable:
                    continue
                values = get_backend("reference")(c.tree)(b.table).to_pylist()
                raising.append(any(isinstance(v, RowError) for v in values))
            work.append((b.table, items, raising))
        lowering_seconds = time.perf_counter() - start
        cases = sum(len(items) for _, items, _ in work)

        def one_statement() -> None:
            for table, items, _ in work:
                evaluate_isolating(state.runner, table, items)

        def runner_batches() -> None:  # what the differential runner sends
            for table, items, raising in work:
                _evaluate_batch(state.runner, table, items, raising)

        def per_case() -> None:
            for table, items, _ in work:
                for item in items:
                    evaluate_isolating(state.runner, table, [item])

        one = median_time(one_statement, repeat=repeat)
        split = median_time(runner_batches, repeat=repeat)
        each = median_time(per_case, repeat=repeat)
        return [name, lowering, str(cases), f"{cases / lowering_seconds:,.0f}", f"{cases / one:,.0f}",
                f"{cases / split:,.0f}", f"{cases / each:,.0f}", f"{each / split:.1f}x"]
    finally:
        close_engines(states)


def campaign_seconds(engines: tuple[str, ...], jobs: int) -> tuple[float, int, int]:
    batches = corpus_batches(None)
    folder = tempfile.mkdtemp(prefix="rexpr-bench-")
    try:
        spec = CampaignSpec(engines, ("faithful", "native"), None, 0, 1, folder)
        start = time.perf_counter()
        shards = run_campaign(spec, batches, jobs=jobs)
        seconds = time.perf_counter() - start
        results, repros, _, cases = merge_shards(shards)
        return seconds, cases, len(repros)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--servers", action="store_true", help="also PostgreSQL and MariaDB")
    parser.add_argument("--skip-campaign", action="store_true")
    args = parser.parse_args()
    batches = corpus_batches(None)
    rows = [local_rate(name, batches, args.repeat) for name in ("arrow", "numpy")]
    for name in EMBEDDED + (SERVERS if args.servers else ()):
        for lowering in ("faithful", "native"):
            row = sql_rates(name, lowering, batches, args.repeat)
            if row:
                rows.append(row)
    print(f"{len(batches)} corpus batches, {sum(len(b.cases) for b in batches)} cases; case evaluations per second "
          f"(median of {args.repeat})")
    print_table(["engine", "lowering", "cases", "lowered/s", "one statement/s", "runner batches/s", "per-case/s",
                 "runner vs per-case"], rows)
    if args.skip_campaign:
        return
    engines = ("reference", "arrow", "numpy") + EMBEDDED
    print("\nwhole bundled corpus, both lowerings, shrinking included (rexpr diff --engines "
          f"{','.join(engines)}):")
    table = []
    for jobs in (1, 2):
        seconds, cases, repros = campaign_seconds(engines, jobs)
        table.append([str(jobs), f"{seconds:.1f} s", str(cases), str(repros)])
    print_table(["jobs", "wall time", "cases", "repros shrunk"], table)


if __name__ == "__main__":
    main()
