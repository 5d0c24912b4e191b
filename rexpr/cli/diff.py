"""Run the differential tester: corpora and generated expressions on every engine, both
lowerings, with minimal repros, reports (terminal, JSON, HTML, JUnit XML) and drift against a
baseline. Exit code 1 when a faithful lowering disagrees or a new native divergence appears."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from rexpr.errors import InputProblem

DEFAULT_REPORT = "reports/latest"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--corpora", metavar="DIR", help="corpus directory (default: the bundled corpora)")
    parser.add_argument("--categories", metavar="LIST", help="only these corpus categories")
    parser.add_argument("--engines", metavar="LIST", help="comma-separated engines (default: all)")
    parser.add_argument("--lowering", choices=("faithful", "native", "both"), default="both")
    parser.add_argument("--generate", type=int, default=0, metavar="N", help="also run N generated expressions")
    parser.add_argument("--seed", type=int, default=1, help="seed for generated expressions (default 1)")
    parser.add_argument("--report", metavar="DIR", default=DEFAULT_REPORT, help=f"report directory (default {DEFAULT_REPORT})")
    parser.add_argument("--baseline", metavar="FILE", help="earlier report.json to mark drift against")
    parser.add_argument("--update-baseline", action="store_true",
                        help="write this run as the new baseline (--baseline FILE) and refresh the planner's evidence")
    parser.add_argument("--jobs", type=int, default=1, metavar="N", help="local worker processes")
    parser.add_argument("--cluster", metavar="ADDRESS", help="Dask distributed scheduler address")
    parser.add_argument("--resume", action="store_true", help="keep shards already in the report directory")
    parser.add_argument("--json", action="store_true", help="print the summary as one JSON object")


def _progress(done: int, total: int) -> None:
    if not sys.stderr.isatty():
        return
    width = 30
    filled = int(width * done / total) if total else width
    sys.stderr.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {done}/{total} shards")
    if done == total:
        sys.stderr.write("\n")
    sys.stderr.flush()


def run(args: argparse.Namespace) -> int:
    from rexpr.differential import campaign
    from rexpr.differential.render import html_page, junit_xml, terminal_summary
    from rexpr.differential.summary import alert, apply_baseline, build_document, evidence_from
    from rexpr.runs import parse_engine_list

    if args.generate < 0 or args.generate > 10_000_000:
        raise InputProblem("--generate must be between 0 and 10,000,000")
    if args.jobs < 1 or args.jobs > 256:
        raise InputProblem("--jobs must be between 1 and 256")
    engines = parse_engine_list(args.engines)
    if "reference" not in engines:
        engines = ("reference",) + engines
    lowerings = ("faithful", "native") if args.lowering == "both" else (args.lowering,)
    categories = tuple(c.strip() for c in args.categories.split(",")) if args.categories else ()
    baseline = None
    if args.baseline and Path(args.baseline).is_file():
        try:
            baseline = json.loads(Path(args.baseline).read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError) as exc:
            raise InputProblem(f"cannot read baseline {args.baseline!r}: {exc}") from None
    elif args.baseline and not args.update_baseline:
        raise InputProblem(f"baseline {args.baseline!r} does not exist (use --update-baseline to create it)")

    spec = campaign.CampaignSpec(engines, lowerings, args.corpora, args.generate, args.seed, args.report, categories)
    started = campaign.now_iso()
    batches = campaign.corpus_batches(args.corpora, categories) + campaign.generated_batches(args.generate, args.seed)
    shards = campaign.run_campaign(spec, batches, jobs=args.jobs, cluster=args.cluster, resume=args.resume,
                                   progress=_progress)
    results, repros, engine_info, cases = campaign.merge_shards(shards)
    document = build_document(results, engine_info, list(lowerings), repros, cases, started, args.seed, args.generate)
    document = apply_baseline(document, baseline)

    report = Path(args.report)
    campaign._atomic_write(report / "report.json", json.dumps(document, ensure_ascii=False, indent=1))
    campaign._atomic_write(report / "report.html", html_page(document))
    campaign._atomic_write(report / "junit.xml", junit_xml(document, results))
    if args.update_baseline:
        target = Path(args.baseline) if args.baseline else report / "baseline.json"
        campaign._atomic_write(target, json.dumps(document, ensure_ascii=False, indent=1))
        evidence = Path(__file__).resolve().parent.parent / "data" / "disagreements.json"
        campaign._atomic_write(evidence, json.dumps(evidence_from(document), indent=1) + "\n")

    if args.json:
        summary = {k: document[k] for k in ("engines", "cases", "faithful_disagreements", "native_divergences",
                                            "lowerings", "drift", "note")}
        summary["report"] = str(report)
        print(json.dumps(summary, ensure_ascii=False))
    else:
        print(terminal_summary(document, colour=sys.stdout.isatty()))
        print(f"\nreports: {report / 'report.html'}, {report / 'report.json'}, {report / 'junit.xml'}")
    return 1 if alert(document) else 0
