"""Run the differential tester: corpora and generated expressions on every engine, both
lowerings, with minimal repros, reports (terminal, JSON, HTML, JUnit XML) and drift against a
baseline. Exit code 1 when a faithful lowering or a local backend disagrees with the
reference, the reference disagrees with a corpus, or a native divergence is new."""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

from rexpr.errors import InputProblem

DEFAULT_REPORT = "reports/latest"
BUNDLED_EVIDENCE = Path(__file__).resolve().parent.parent / "data" / "disagreements.json"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--corpora", metavar="DIR", help="corpus directory (default: the bundled corpora)")
    parser.add_argument("--categories", metavar="LIST", help="only these corpus files, by name (floats,nulls)")
    parser.add_argument("--no-corpora", action="store_true", help="run generated expressions only")
    parser.add_argument("--engines", metavar="LIST", help="comma-separated engines (default: all)")
    parser.add_argument("--lowering", choices=("faithful", "native", "both"), default="both")
    parser.add_argument("--generate", type=int, default=0, metavar="N", help="also run N generated expressions")
    parser.add_argument("--seed", type=int, default=1, help="seed for generated expressions (default 1)")
    parser.add_argument("--report", metavar="DIR", default=DEFAULT_REPORT,
                        help=f"report directory (default {DEFAULT_REPORT})")
    parser.add_argument("--baseline", metavar="FILE", help="earlier report.json to mark drift against")
    parser.add_argument("--update-baseline", action="store_true",
                        help="write this run as the new baseline (--baseline FILE, else <report>/baseline.json) "
                             "and refresh the planner's evidence")
    parser.add_argument("--evidence", metavar="FILE", default=str(BUNDLED_EVIDENCE),
                        help="evidence file --update-baseline refreshes (default: the one the planner ships with)")
    parser.add_argument("--jobs", type=int, default=1, metavar="N", help="local worker processes")
    parser.add_argument("--cluster", metavar="ADDRESS", help="Dask distributed scheduler address")
    parser.add_argument("--resume", action="store_true", help="keep the shards a killed run finished")
    parser.add_argument("--json", action="store_true", help="print the summary as one JSON object")


class _ProgressBar:
    """A one-line bar on stderr while shards finish; silent when stderr is not a terminal."""

    def __init__(self) -> None:
        self.start = time.monotonic()
        self.live = sys.stderr.isatty()

    def __call__(self, done: int, total: int) -> None:
        if not self.live:
            return
        width = 30
        filled = int(width * done / total) if total else width
        elapsed = time.monotonic() - self.start
        sys.stderr.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {done}/{total} shards, {elapsed:.0f} s")
        if done == total:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _read_json(path: Path, what: str) -> object:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputProblem(f"cannot read {what} {str(path)!r}: {exc}") from None


def run(args: argparse.Namespace) -> int:
    from rexpr.differential import campaign
    from rexpr.differential.render import junit_xml, terminal_summary
    from rexpr.differential.report_html import html_page
    from rexpr.differential.summary import alert, apply_baseline, build_document, evidence_from, read_document
    from rexpr.runs import parse_engine_list

    if args.generate < 0 or args.generate > 10_000_000:
        raise InputProblem("--generate must be between 0 and 10,000,000")
    if args.jobs < 1 or args.jobs > 256:
        raise InputProblem("--jobs must be between 1 and 256")
    if args.jobs > 1 and args.cluster:
        raise InputProblem("give --jobs or --cluster, not both")
    engines = parse_engine_list(args.engines)
    if "reference" not in engines:
        engines = ("reference",) + engines
    lowerings = ("faithful", "native") if args.lowering == "both" else (args.lowering,)
    categories = tuple(c.strip() for c in args.categories.split(",") if c.strip()) if args.categories else ()
    baseline = None
    if args.baseline and Path(args.baseline).is_file():
        baseline = read_document(_read_json(Path(args.baseline), "baseline"), args.baseline)
    elif args.baseline and not args.update_baseline:
        raise InputProblem(f"baseline {args.baseline!r} does not exist (use --update-baseline to create it)")

    spec = campaign.CampaignSpec(engines, lowerings, None if args.no_corpora else args.corpora, args.generate,
                                 args.seed, args.report, categories)
    started = campaign.now_iso()
    batches = [] if args.no_corpora else campaign.corpus_batches(args.corpora, categories)
    batches += campaign.generated_batches(args.generate, args.seed)
    if not batches:
        raise InputProblem("nothing to run: --no-corpora needs --generate N")
    shards = campaign.run_campaign(spec, batches, jobs=args.jobs, cluster=args.cluster, resume=args.resume,
                                   progress=_ProgressBar())
    results, repros, engine_info, cases = campaign.merge_shards(shards)
    document = build_document(results, engine_info, list(lowerings), repros, cases, started, args.seed, args.generate)
    document = apply_baseline(document, baseline, {r["key"]: r["outcome"] for r in results})
    red = alert(document)

    report = Path(args.report)
    campaign.atomic_write(report / "report.json", json.dumps(document, ensure_ascii=False, indent=1))
    campaign.atomic_write(report / "report.html", html_page(document, red))
    campaign.atomic_write(report / "junit.xml", junit_xml(document, results))
    if args.update_baseline:
        target = Path(args.baseline) if args.baseline else report / "baseline.json"
        campaign.atomic_write(target, json.dumps(document, ensure_ascii=False, indent=1))
        evidence = Path(args.evidence)
        previous = _read_json(evidence, "evidence file") if evidence.is_file() else None
        complete = not (args.corpora or args.no_corpora or categories)  # every bundled corpus ran
        campaign.atomic_write(evidence, json.dumps(evidence_from(document, previous, complete),  # type: ignore[arg-type]
                                                   indent=1) + "\n")

    if args.json:
        summary = {k: document[k] for k in ("engines", "cases", "outcomes", "faithful_disagreements",
                                            "native_divergences", "lowerings", "drift", "note")}
        summary.update(alert=red, report=str(report))
        print(json.dumps(summary, ensure_ascii=False))
    else:
        print(terminal_summary(document, colour=sys.stdout.isatty()))
        print(f"\nreports: {report / 'report.html'}, {report / 'report.json'}, {report / 'junit.xml'}")
    return 1 if red else 0
