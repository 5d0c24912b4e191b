"""The report document as a terminal summary and as JUnit XML (the HTML page is in
``report_html``). Both name the engine versions and session settings the run used."""

from __future__ import annotations

import json
import re
from typing import Any
from xml.etree import ElementTree as ET

from rexpr.differential.runner import LOCAL, SQL_ENGINES

_COLOURS = {"agree": "\033[32m", "disagree": "\033[1;31m", "not_pushable": "\033[33m", "unavailable": "\033[90m",
            "failed": "\033[35m"}
_RESET = "\033[0m"
LABELS = {"agree": "ok", "disagree": "DIFF", "not_pushable": "refused", "unavailable": "n/a", "failed": "failed",
          "-": ""}
# Characters XML 1.0 cannot hold (section 2.2, Char production), even escaped.
_NOT_XML = re.compile("[^\u0009\u000a\u000d\u0020-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


def columns(doc: dict[str, Any]) -> list[tuple[str, str]]:
    """(engine, lowering) matrix columns: each SQL engine once per lowering, local ones once."""
    out = []
    for e in doc["engines"]:
        name = e["name"]
        for lw in (doc["lowerings"] if name in SQL_ENGINES else [LOCAL]):
            out.append((name, lw))
    return out


def cell_status(counts: dict[str, dict[str, int]] | None, lowering: str) -> str:
    """One word for a matrix cell: disagree beats failed beats agree beats not_pushable."""
    c = (counts or {}).get(lowering)
    if not c:
        return "-"
    for status in ("disagree", "failed", "agree", "not_pushable", "unavailable"):
        if c.get(status):
            return status
    return "-"


def cell_counts(doc: dict[str, Any], function: str, engine: str, lowering: str) -> dict[str, int]:
    return ((doc["matrix"].get(function) or {}).get(engine) or {}).get(lowering) or {}


def engine_line(e: dict[str, Any]) -> str:
    if e.get("status") == "unavailable":
        return f"{e['name']}: unavailable ({e.get('reason', '')})"
    text = f"{e['name']}: {e.get('version', '?')}"
    if e.get("settings"):
        text += f"; settings {json.dumps(e['settings'], ensure_ascii=False, default=str)}"
    if e.get("failed_shards"):
        text += f"; FAILED in {e['failed_shards']} shard(s)"
    return text


def terminal_summary(doc: dict[str, Any], colour: bool, repros: int = 10) -> str:
    cols = columns(doc)
    outcomes = doc.get("outcomes", {})
    lines = [f"rexpr diff: {doc['cases']} cases; {doc['faithful_disagreements']} faithful disagreement(s), "
             f"{len(doc['native_divergences'])} native divergence kind(s); "
             + ", ".join(f"{v} {k}" for k, v in outcomes.items() if v)]
    lines += ["engines:"] + [f"  {engine_line(e)}" for e in doc["engines"]]
    heads = [f"{e}/{lw[0]}" if lw != LOCAL else e for e, lw in cols]
    width = max([len(f) for f in doc["matrix"]] + [8])
    widths = [max(len(h), 7) for h in heads]
    lines.append("")
    lines.append(f"{'function':<{width}}  " + "  ".join(f"{h:<{w}}" for h, w in zip(heads, widths)))
    for function, by_engine in doc["matrix"].items():
        cells = []
        for (engine, lw), w in zip(cols, widths):
            status = cell_status(by_engine.get(engine), lw)
            text = f"{LABELS[status]:<{w}}"
            cells.append(_COLOURS[status] + text + _RESET if colour and status in _COLOURS else text)
        lines.append(f"{function:<{width}}  " + "  ".join(cells))
    lines.append("(/f = faithful lowering, /n = native lowering)")
    drift = doc.get("drift") or {}
    if drift.get("baseline"):
        lines.append(f"\nagainst the baseline of {drift['baseline']}: {drift['new']} new, {drift['still']} still, "
                     f"{len(drift['fixed'])} fixed, {len(drift['not_rerun'])} not rerun")
    for d in doc["disagreements"][:repros]:
        repro = d.get("repro") or {}
        oracle = "published" if d["engine"] == "reference" else "reference"
        head = f"\n[{d['lowering']}] {d['engine']} {d['function']} ({d['case_id']}" \
               f"{', ' + d['drift'] if d.get('drift') else ''}): "
        if repro:
            lines.append(head + repro["expression"] +
                         f"\n    row {json.dumps(repro.get('row', {}), ensure_ascii=False)}: {oracle} "
                         f"{json.dumps(repro.get('expected'), ensure_ascii=False)}, {d['engine']} "
                         f"{json.dumps(repro.get('observed'), ensure_ascii=False)}")
        else:
            first = (d.get("rows") or [{}])[0]
            lines.append(head + d["expression"] + "\n    not reduced (it does not reproduce on one row alone); "
                         f"row {first.get('row')}: {oracle} {json.dumps(first.get('expected'), ensure_ascii=False)}, "
                         f"{d['engine']} {json.dumps(first.get('observed'), ensure_ascii=False)}")
        if repro.get("sql"):
            lines.append("    " + repro["sql"].replace("\n", "\n    "))
    if len(doc["disagreements"]) > repros:
        lines.append(f"\n... and {len(doc['disagreements']) - repros} more disagreement(s) in the report")
    if doc.get("failures"):
        lines.append(f"\n{outcomes.get('failed', len(doc['failures']))} result(s) failed (not compared), e.g.:")
        lines += [f"  {f['engine']}/{f['lowering']} {f['case_id']}: {f['reason'].splitlines()[0][:160]}"
                  for f in doc["failures"][:5]]
    lines.append("\n" + doc["note"])
    return "\n".join(lines)


def _xml_text(text: object) -> str:
    return _NOT_XML.sub(lambda m: f"\\u{ord(m[0]):04x}", str(text))


def junit_xml(doc: dict[str, Any], results: list[dict[str, Any]]) -> str:
    """One suite per engine and lowering, one test case per expression. A failure is what the
    exit code alerts on: a disagreement where the semantics must hold, or a native divergence
    the baseline did not have; a known native divergence is reported in system-out."""
    alerting = {f"{d['engine']}|{d['lowering']}|{d['case_id']}" for d in doc["disagreements"]
                if d["lowering"] != "native" or d.get("drift", "new") == "new"}
    suites = ET.Element("testsuites", name="rexpr-diff")
    by_suite: dict[str, list[dict[str, Any]]] = {}
    for r in results:
        by_suite.setdefault(f"{r['engine']}.{r['lowering']}", []).append(r)
    engines = {e["name"]: e for e in doc["engines"]}
    for name, items in sorted(by_suite.items()):
        failures = sum(1 for r in items if r["outcome"] == "disagree" and r["key"] in alerting)
        errors = sum(1 for r in items if r["outcome"] == "failed")
        skipped = sum(1 for r in items if r["outcome"] in ("not_pushable", "unavailable"))
        suite = ET.SubElement(suites, "testsuite", name=name, tests=str(len(items)), failures=str(failures),
                              errors=str(errors), skipped=str(skipped), timestamp=doc["started"])
        properties = ET.SubElement(suite, "properties")
        engine = engines.get(items[0]["engine"], {})
        for key in ("version", "settings", "status", "reason"):
            if engine.get(key):
                value = engine[key] if isinstance(engine[key], str) else json.dumps(engine[key], default=str)
                ET.SubElement(properties, "property", name=key, value=_xml_text(value))
        for r in items:
            case = ET.SubElement(suite, "testcase", classname=f"{name}.{r['category']}", name=_xml_text(r["case_id"]))
            detail = _xml_text(f"{r['text']}\n{json.dumps(r['diffs'][:3], ensure_ascii=False)}")
            if r["outcome"] == "disagree" and r["key"] in alerting:
                ET.SubElement(case, "failure", message="disagrees with the reference").text = detail
            elif r["outcome"] == "disagree":
                ET.SubElement(case, "system-out").text = "known native divergence: " + detail
            elif r["outcome"] in ("not_pushable", "unavailable"):
                ET.SubElement(case, "skipped", message=_xml_text(r.get("reason", ""))[:500])
            elif r["outcome"] == "failed":
                ET.SubElement(case, "error", message=_xml_text(r.get("reason", ""))[:500])
    return ET.tostring(suites, encoding="unicode", xml_declaration=True)
