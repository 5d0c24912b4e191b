"""The report document as a terminal summary, a self-contained HTML page and JUnit XML."""

from __future__ import annotations

import html
import json
from typing import Any
from xml.etree import ElementTree as ET

_COLOURS = {"agree": "\033[32m", "disagree": "\033[31m", "not_pushable": "\033[33m", "unavailable": "\033[90m",
            "failed": "\033[35m"}
_RESET = "\033[0m"


def cell_status(counts: dict[str, dict[str, int]] | None, lowering: str) -> str:
    """One word for a matrix cell: disagree beats failed beats agree beats not_pushable."""
    if not counts or lowering not in counts:
        return "-"
    c = counts[lowering]
    for status in ("disagree", "failed", "agree", "not_pushable", "unavailable"):
        if c.get(status):
            return status
    return "-"


def terminal_summary(doc: dict[str, Any], colour: bool, lowering: str = "faithful") -> str:
    engines = [e["name"] for e in doc["engines"] if e["name"] != "reference"]
    lines = [f"rexpr diff: {doc['cases']} cases on {', '.join(engines)}; "
             f"{doc['faithful_disagreements']} faithful disagreement(s), "
             f"{len(doc['native_divergences'])} native divergence kind(s)"]
    width = max([len(f) for f in doc["matrix"]] + [8])
    for lw in [lw for lw in ("faithful", "native") if lw in doc["lowerings"]]:
        lines.append(f"\n{lw} lowering (local backends shown in every table)")
        lines.append(f"{'function':<{width}}  " + "  ".join(f"{e:<12}" for e in engines))
        for function, by_engine in doc["matrix"].items():
            cells = []
            for e in engines:
                status = cell_status(by_engine.get(e), lw if e in ("duckdb", "sqlite", "postgres", "mariadb") else "local")
                text = {"not_pushable": "refused", "unavailable": "n/a"}.get(status, status)
                cells.append((_COLOURS.get(status, "") + f"{text:<12}" + _RESET) if colour else f"{text:<12}")
            lines.append(f"{function:<{width}}  " + "  ".join(cells))
    for d in doc["disagreements"][:10]:
        repro = d.get("repro") or {}
        lines.append(f"\n[{d['lowering']}] {d['engine']} {d['function']}: {repro.get('expression', d['expression'])}"
                     f"\n    row {json.dumps(repro.get('row', {}), ensure_ascii=False)}: expected "
                     f"{json.dumps(repro.get('expected'))}, got {json.dumps(repro.get('observed'))}")
    lines.append("\n" + doc["note"])
    return "\n".join(lines)


_CSS = """
body{font:14px/1.4 system-ui,sans-serif;margin:24px;color:#1d2330;background:#fbfbfd}
h1{font-size:20px}h2{font-size:16px;margin-top:28px}
table.matrix{border-collapse:collapse;margin:8px 0}
.matrix th,.matrix td{border:1px solid #d5d9e2;padding:3px 8px;text-align:center;font-size:12px}
.matrix th.fn{text-align:left;font-family:ui-monospace,monospace}
td.agree{background:#d8f3dc}td.disagree{background:#ffb4a2;font-weight:bold}
td.not_pushable{background:#fff3b0}td.unavailable,td.none{background:#eceef2;color:#777}td.failed{background:#e0b1cb}
.card{border:1px solid #d5d9e2;border-radius:6px;background:#fff;padding:10px 14px;margin:10px 0}
.card pre{background:#f3f4f8;padding:6px;overflow-x:auto;white-space:pre-wrap}
.meta{color:#555;font-size:12px}.legend span{display:inline-block;padding:2px 8px;margin-right:6px}
"""


def html_page(doc: dict[str, Any]) -> str:
    esc = html.escape
    engines = [e["name"] for e in doc["engines"] if e["name"] != "reference"]
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>rexpr differential report</title>"
             f"<style>{_CSS}</style></head><body>",
             f"<h1>rexpr differential report</h1><p class='meta'>{esc(doc['started'])} to {esc(doc['finished'])}; "
             f"{doc['cases']} cases; seed {esc(str(doc.get('seed')))}; "
             f"<b>{doc['faithful_disagreements']}</b> faithful disagreement(s); "
             f"{len(doc['native_divergences'])} native divergence kind(s).</p>",
             f"<p>{esc(doc['note'])}</p>",
             "<p class='legend'><span class='agree' style='background:#d8f3dc'>agree</span>"
             "<span style='background:#ffb4a2'>disagree</span><span style='background:#fff3b0'>refused "
             "(not pushable)</span><span style='background:#eceef2'>not run</span></p>"]
    for lw in [lw for lw in ("faithful", "native") if lw in doc["lowerings"]]:
        parts.append(f"<h2>{esc(lw)} lowering</h2><table class='matrix' id='matrix-{esc(lw)}'><thead><tr>"
                     "<th class='fn'>function</th>" + "".join(f"<th>{esc(e)}</th>" for e in engines) + "</tr></thead><tbody>")
        for function, by_engine in doc["matrix"].items():
            row = [f"<th class='fn'>{esc(function)}</th>"]
            for e in engines:
                status = cell_status(by_engine.get(e), lw if e in ("duckdb", "sqlite", "postgres", "mariadb") else "local")
                counts = (by_engine.get(e) or {}).get(lw if e in ("duckdb", "sqlite", "postgres", "mariadb") else "local", {})
                title = ", ".join(f"{k}: {v}" for k, v in counts.items())
                label = {"not_pushable": "refused", "unavailable": "n/a", "-": ""}.get(status, status)
                row.append(f"<td class='{'none' if status == '-' else esc(status)}' title='{esc(title)}'>{esc(label)}</td>")
            parts.append("<tr>" + "".join(row) + "</tr>")
        parts.append("</tbody></table>")
    parts.append("<h2>Minimal reproductions</h2>")
    if not doc["disagreements"]:
        parts.append("<p>None: every engine agreed with the reference on every case it ran.</p>")
    for d in doc["disagreements"]:
        repro = d.get("repro") or {}
        parts.append(
            "<div class='card'>"
            f"<b>{esc(d['engine'])}</b> · {esc(d['lowering'])} · <code>{esc(d['function'])}</code> · "
            f"{esc(d['category'])} · {esc(d.get('drift', ''))}"
            f"<pre>{esc(repro.get('expression', d['expression']))}</pre>"
            f"<div>row: <code>{esc(json.dumps(repro.get('row', {}), ensure_ascii=False))}</code></div>"
            f"<div>reference: <code>{esc(json.dumps(repro.get('expected'), ensure_ascii=False))}</code> · "
            f"{esc(d['engine'])}: <code>{esc(json.dumps(repro.get('observed'), ensure_ascii=False))}</code></div>"
            + (f"<div>SQL to paste:</div><pre>{esc(repro.get('sql') or d.get('sql') or '')}</pre>"
               if (repro.get('sql') or d.get('sql')) else "") + "</div>")
    parts.append("<h2>Engines</h2><table class='matrix'><tr><th>engine</th><th>version</th><th>settings</th></tr>")
    for e in doc["engines"]:
        settings = e.get("settings") or e.get("session_settings") or ""
        parts.append(f"<tr><td>{esc(e['name'])}</td><td>{esc(str(e.get('version', '')))}</td>"
                     f"<td style='text-align:left'>{esc(json.dumps(settings, ensure_ascii=False))}</td></tr>")
    parts.append("</table></body></html>")
    return "".join(parts)


def junit_xml(doc: dict[str, Any], results: list[dict[str, Any]]) -> str:
    suites = ET.Element("testsuites", name="rexpr-diff")
    by_suite: dict[str, list[dict[str, Any]]] = {}
    for r in results:
        by_suite.setdefault(f"{r['engine']}.{r['lowering']}", []).append(r)
    for name, items in sorted(by_suite.items()):
        failures = sum(1 for r in items if r["outcome"] == "disagree" and r["lowering"] != "native")
        skipped = sum(1 for r in items if r["outcome"] in ("not_pushable", "unavailable"))
        suite = ET.SubElement(suites, "testsuite", name=name, tests=str(len(items)), failures=str(failures),
                              skipped=str(skipped))
        for r in items:
            case = ET.SubElement(suite, "testcase", classname=f"{name}.{r['category']}", name=r["case_id"])
            if r["outcome"] == "disagree":
                tag = "failure" if r["lowering"] != "native" else "system-out"
                node = ET.SubElement(case, tag, **({"message": "disagrees with the reference"} if tag == "failure" else {}))
                node.text = f"{r['text']}\n{json.dumps(r['diffs'][:3], ensure_ascii=False)}"
            elif r["outcome"] in ("not_pushable", "unavailable"):
                ET.SubElement(case, "skipped", message=r.get("reason", "")[:500])
            elif r["outcome"] == "failed":
                ET.SubElement(case, "error", message=r.get("reason", "")[:500])
    properties = ET.SubElement(suites, "properties")
    for e in doc["engines"]:
        ET.SubElement(properties, "property", name=f"engine.{e['name']}", value=str(e.get("version", "")))
    return ET.tostring(suites, encoding="unicode", xml_declaration=True)
