"""The report document as one self-contained HTML page: no script, no network, inline style.

The matrix comes first (function rows, one column per engine and lowering, a coloured cell
per outcome, each disagreeing cell linked to its first repro card), then a card per repro,
the drift against the baseline, and the engines with their versions and session settings.
"""

from __future__ import annotations

import html
import json
from typing import Any

from rexpr.differential.render import LABELS, cell_counts, cell_status, columns
from rexpr.differential.runner import LOCAL

_CSS = """
*{box-sizing:border-box}
body{font:14px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif;margin:0;padding:20px 28px;color:#1d2330;
background:#f6f7fa}
h1{font-size:21px;margin:0 0 4px}h2{font-size:16px;margin:28px 0 8px}
.verdict{display:inline-block;padding:3px 10px;border-radius:4px;font-weight:600;color:#fff;margin-left:8px;
font-size:13px;vertical-align:middle}.verdict.red{background:#c0392b}.verdict.green{background:#2e8b57}
.meta{color:#4a5060;font-size:13px;margin:4px 0}
table.matrix{border-collapse:collapse;background:#fff}
.matrix th,.matrix td{border:1px solid #cfd4de;padding:3px 7px;text-align:center;font-size:12px;min-width:58px}
.matrix thead th{background:#eef0f5;font-weight:600}
.matrix th.fn{text-align:left;font:12px ui-monospace,"DejaVu Sans Mono",monospace;background:#fafbfc}
.matrix td a{color:inherit}
td.agree{background:#c7ebd0;color:#1e5c2e}td.disagree{background:#f4978e;color:#5c0d05;font-weight:700}
td.not_pushable{background:#fbe7a1;color:#6b5300}td.failed{background:#d7a9e3;color:#4a1459}
td.unavailable,td.none{background:#eceef2;color:#8a8f9c}
.legend span{display:inline-block;padding:2px 9px;margin-right:6px;border:1px solid #cfd4de;font-size:12px}
.cards{display:grid;grid-template-columns:repeat(auto-fill,minmax(440px,1fr));gap:12px}
.card{border:1px solid #cfd4de;border-left:5px solid #e06456;border-radius:5px;background:#fff;padding:10px 14px}
.card.native{border-left-color:#e0b84f}.card h3{font-size:14px;margin:0 0 6px}
.card pre{background:#f1f3f7;padding:6px 8px;margin:4px 0;overflow-x:auto;white-space:pre-wrap;
font:12px ui-monospace,"DejaVu Sans Mono",monospace}
.card code{font:12px ui-monospace,"DejaVu Sans Mono",monospace;background:#f1f3f7;padding:0 3px}
.tag{display:inline-block;font-size:11px;padding:0 6px;border-radius:3px;background:#e6e9f0;margin-left:4px}
.tag.new{background:#c0392b;color:#fff}.tag.still{background:#7f8c8d;color:#fff}
table.plain{border-collapse:collapse;background:#fff}.plain td,.plain th{border:1px solid #cfd4de;padding:3px 8px;
font-size:12px;text-align:left;vertical-align:top}
"""


def _status_class(status: str) -> str:
    return "none" if status == "-" else status


def _matrix(doc: dict[str, Any], anchors: dict[tuple[str, str, str], str]) -> str:
    esc = html.escape
    cols = columns(doc)
    spans: dict[str, int] = {}
    for engine, _ in cols:
        spans[engine] = spans.get(engine, 0) + 1
    top = "".join(f"<th colspan='{n}'>{esc(e)}</th>" for e, n in spans.items())
    sub = "".join(f"<th>{esc(lw)}</th>" for _, lw in cols)
    rows = []
    for function in doc["matrix"]:
        cells = [f"<th class='fn'>{esc(function)}</th>"]
        for engine, lw in cols:
            counts = cell_counts(doc, function, engine, lw)
            status = cell_status(doc["matrix"][function].get(engine), lw)
            title = ", ".join(f"{k}: {v}" for k, v in counts.items()) or \
                "no result counted here (a disagreement counts for the function its repro calls)"
            label = esc(LABELS[status])
            if status == "disagree":
                label = f"&#x2717; {counts['disagree']}"
                anchor = anchors.get((function, engine, lw))
                if anchor:
                    label = f"<a href='#{anchor}'>{label}</a>"
            cells.append(f"<td class='{_status_class(status)}' title='{esc(title)}'>{label}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return (f"<table class='matrix' id='matrix'><thead><tr><th class='fn' rowspan='2'>function</th>{top}</tr>"
            f"<tr>{sub}</tr></thead><tbody>{''.join(rows)}</tbody></table>")


def _oracle(d: dict[str, Any]) -> str:
    """What the expected value is: the reference's answer, or for the reference itself the
    answer the corpus publishes."""
    return "published" if d["engine"] == "reference" else "reference"


def _card(d: dict[str, Any], anchor: str, case_ids: list[str]) -> str:
    esc = html.escape
    repro = d.get("repro") or {}

    def show(value: object) -> str:
        return esc(json.dumps(value, ensure_ascii=False))

    drift = d.get("drift")
    parts = [f"<div class='card{' native' if d['lowering'] == 'native' else ''}' id='{anchor}'>",
             f"<h3>{esc(d['engine'])} &middot; {esc(d['lowering'])} &middot; <code>{esc(d['function'])}</code>"
             f"<span class='tag'>{esc(d['category'])}</span>"
             + (f"<span class='tag {esc(drift)}'>{esc(drift)}</span>" if drift else "") + "</h3>"]
    if repro:
        parts.append(f"<div>minimal expression{'' if repro.get('minimal', True) else ' (shrinking stopped early)'}:"
                     f"</div><pre>{esc(repro['expression'])}</pre>")
        parts.append(f"<div>row: <code>{show(repro.get('row', {}))}</code></div>")
        parts.append(f"<div>{_oracle(d)}: <code>{show(repro.get('expected'))}</code> &middot; {esc(d['engine'])}: "
                     f"<code>{show(repro.get('observed'))}</code></div>")
        if repro.get("source"):
            parts.append(f"<div>published answer: {esc(repro['source'])}</div>")
    else:
        first = (d.get("rows") or [{}])[0]
        parts.append("<div>not reduced (it did not reproduce on one row alone)</div>"
                     f"<div>row {esc(str(first.get('row')))}: {_oracle(d)} <code>{show(first.get('expected'))}</code>"
                     f" &middot; {esc(d['engine'])}: <code>{show(first.get('observed'))}</code></div>")
    sql = repro.get("sql") or d.get("sql")
    if sql:
        parts.append(f"<div>SQL to paste:</div><pre>{esc(sql)}</pre>")
    parts.append(f"<div class='meta'>from case {esc(d['case_id'])}: <code>{esc(d['expression'])}</code>"
                 + (f"; also {esc(', '.join(case_ids[1:]))}" if len(case_ids) > 1 else "") + "</div></div>")
    return "".join(parts)


def _drift(doc: dict[str, Any]) -> str:
    drift = doc.get("drift") or {}
    if not drift.get("baseline"):
        return "<p class='meta'>No baseline: every disagreement counts as new.</p>"
    esc = html.escape
    items = "".join(f"<li>{esc(f['engine'])} {esc(f['lowering'])} <code>{esc(f['function'])}</code> "
                    f"{esc(f['case_id'])}</li>" for f in drift["fixed"])
    return (f"<p>Against the baseline of {esc(str(drift['baseline']))}: <b>{drift['new']}</b> new, {drift['still']} "
            f"still, {len(drift['fixed'])} fixed, {len(drift['not_rerun'])} not rerun (not claimed fixed).</p>"
            + (f"<ul>{items}</ul>" if items else ""))


def _failures(doc: dict[str, Any]) -> str:
    failures = doc.get("failures") or []
    if not failures:
        return ""
    esc = html.escape
    rows = "".join(f"<tr><td>{esc(f['engine'])}</td><td>{esc(f['lowering'])}</td><td>{esc(f['case_id'])}</td>"
                   f"<td>{esc(f['reason'])}</td></tr>" for f in failures)
    return (f"<h2>Failed, not compared ({doc.get('outcomes', {}).get('failed', len(failures))})</h2>"
            "<table class='plain'><tr><th>engine</th><th>lowering</th><th>case</th><th>reason</th></tr>"
            f"{rows}</table>")


def _engine_note(engine: dict[str, Any]) -> str:
    if engine.get("failed_shards"):
        return f"failed in {engine['failed_shards']} shard(s): {engine.get('failed', engine.get('reason', ''))}"
    return str(engine.get("reason", ""))


def html_page(doc: dict[str, Any], red: bool) -> str:
    esc = html.escape
    anchors: dict[tuple[str, str, str], str] = {}
    groups: dict[tuple, list[dict[str, Any]]] = {}
    for d in doc["disagreements"]:  # one card per distinct repro, naming every case that shrank to it
        repro = d.get("repro") or {}
        key = (d["engine"], d["lowering"], repro.get("expression", d["case_id"]),
               json.dumps(repro.get("row"), sort_keys=True), json.dumps(repro.get("observed"), sort_keys=True))
        groups.setdefault(key, []).append(d)
    cards = []
    for n, same in enumerate(groups.values()):
        anchor = f"repro-{n}"
        for d in same:
            anchors.setdefault((d["function"], d["engine"], d["lowering"]), anchor)
        cards.append(_card(same[0], anchor, [d["case_id"] for d in same]))
    outcomes = ", ".join(f"{v} {esc(k)}" for k, v in doc.get("outcomes", {}).items() if v)
    engines = "".join(
        f"<tr><td>{esc(e['name'])}</td><td>{esc(str(e.get('status', '')))}</td>"
        f"<td>{esc(str(e.get('version', '')))}</td>"
        f"<td>{esc(json.dumps(e.get('settings') or {}, ensure_ascii=False, default=str))}</td>"
        f"<td>{esc(_engine_note(e))}</td></tr>" for e in doc["engines"])
    return "".join([
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width,initial-scale=1'>",
        f"<title>rexpr differential report {esc(doc['started'])}</title><style>{_CSS}</style></head><body>",
        f"<h1>rexpr differential report<span class='verdict {'red' if red else 'green'}'>"
        f"{'RED' if red else 'GREEN'}</span></h1>",
        f"<p class='meta'>{esc(doc['started'])} to {esc(doc['finished'])} &middot; {doc['cases']} cases "
        f"({doc['generated_cases']} generated, seed {esc(str(doc.get('seed')))}) &middot; "
        f"<b>{doc['faithful_disagreements']}</b> faithful disagreement(s) &middot; "
        f"{len(doc['native_divergences'])} native divergence kind(s) &middot; {outcomes}</p>",
        f"<p class='meta'>{esc(doc['note'])}</p>",
        "<p class='legend'>" + "".join(f"<span class='{c}' style='background:{b}'>{esc(t)}</span>" for c, b, t in (
            ("agree", "#c7ebd0", "ok: agrees"), ("disagree", "#f4978e", "\u2717 n: disagreements"),
            ("not_pushable", "#fbe7a1", "refused: not pushable"), ("failed", "#d7a9e3", "failed"),
            ("none", "#eceef2", "n/a: not run"))) + "</p>",
        _matrix(doc, anchors),
        f"<p class='meta'>{esc(LOCAL)}: in-process backend; faithful: SQL that reproduces the semantics; "
        "native: the plain SQL mapping, expected to diverge.</p>",
        "<h2>Drift</h2>", _drift(doc),
        f"<h2>Minimal reproductions ({len(cards)} distinct, from {len(doc['disagreements'])} disagreements)</h2>",
        "<div class='cards'>" + "".join(cards) + "</div>" if cards else
        "<p>None: every engine agreed with the reference on every case it ran.</p>",
        _failures(doc),
        "<h2>Engines</h2><table class='plain'><tr><th>engine</th><th>status</th><th>version</th><th>session settings</th>"
        f"<th>notes</th></tr>{engines}</table>",
        "</body></html>",
    ])
