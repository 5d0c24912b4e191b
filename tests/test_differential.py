"""The differential tester end to end, on real engines: the runner over the corpora and
generated batches, the shrinker on real disagreements, the reports, baseline drift and exit
codes, sharding over processes and a Dask cluster, resume after a kill, and an engine that goes
away mid-run.

Oracles: the reference evaluator (the executable spec) and, for the reference itself, the
published answers in corpora/ (each names its standard). Disagreements that the tests need are
real: either an engine's native SQL lowering, or the reference evaluating a deliberately
different tree, or a corpus fixture whose published answer is wrong on purpose.
"""

from __future__ import annotations

import json
import math
import os
import re
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path
from xml.etree import ElementTree as ET

import pyarrow as pa
import pyarrow.compute as pc
import pytest

import rexpr
from rexpr.backends import get_backend
from rexpr.compare import same_result
from rexpr.differential import campaign, shrink as shrink_module
from rexpr.differential.cases import Batch, DiffCase
from rexpr.differential.campaign import CampaignSpec, corpus_batches, generated_batches, run_campaign, run_shard
from rexpr.differential.generator import random_expression, structure
from rexpr.differential.render import terminal_summary
from rexpr.differential.runner import LOCAL, SQL_ENGINES, lowerings_of, open_engines, close_engines, run_batch
from rexpr.differential.shrink import shrink
from rexpr.differential.summary import (REPORT_FORMAT, REPORT_VERSION, alert, build_document, evidence_from)
from rexpr.planner.evidence import load_evidence
from rexpr.runs import ALL_ENGINES
from rexpr.schema import Schema, to_arrow_type
from rexpr.typed import TCall, walk

LOWERINGS = ("faithful", "native")
REQUIRE_SERVERS = os.environ.get("REXPR_REQUIRE_SERVERS", "") == "1"


# ------------------------------------------------------------------------------ helpers
def _available() -> dict[str, dict]:
    states = open_engines(ALL_ENGINES)
    try:
        return {n: s.info for n, s in states.items() if not s.unavailable}
    finally:
        close_engines(states)


AVAILABLE = _available()
EMBEDDED_SQL = [e for e in ("duckdb", "sqlite") if e in AVAILABLE]


def _sql_engine() -> str:
    if not EMBEDDED_SQL:
        pytest.skip("no embedded SQL engine is available (the SQL lowering or runners are not installed)")
    return EMBEDDED_SQL[0]


def cli(*args: str, timeout: float = 300) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "rexpr.cli.main", *args], capture_output=True, text=True,
                          timeout=timeout)


def outcome_table(shards: list[dict]) -> list[tuple]:
    """Every result's key, outcome and differing rows: what two runs must share."""
    rows = []
    for shard in shards:
        for r in shard["results"]:
            rows.append((r["key"], r["outcome"], json.dumps(r["diffs"], sort_keys=True)))
    return sorted(rows)


def comparable(document: dict) -> dict:
    """A report without its timestamps."""
    out = {k: v for k, v in document.items() if k not in ("started", "finished")}
    out["drift"] = {k: v for k, v in document["drift"].items() if k != "baseline"}
    return out


def reference_probe(transform):
    """An 'engine' that is the reference evaluating ``transform(tree)``: a real disagreement
    wherever the transformed tree means something else, with nothing faked."""
    run = get_backend("reference")
    return lambda trees, table: [run(transform(t))(table).to_pylist() for t in trees]


def renamed(old: str, new: str):
    def transform(tree):
        if isinstance(tree, TCall):
            return TCall(new if tree.function == old else tree.function, tuple(transform(a) for a in tree.args),
                         tree.type, tree.span)
        return tree
    return transform


def eq_as_not_distinct(tree):
    """``a = b`` evaluated as ``not (a is distinct from b)``: NaN equals itself, null equals null."""
    if isinstance(tree, TCall):
        args = tuple(eq_as_not_distinct(a) for a in tree.args)
        if tree.function == "eq":
            inner = TCall("is_distinct_from", args, tree.type.with_nullable(False), tree.span)
            return TCall("not", (inner,), tree.type, tree.span)
        return TCall(tree.function, args, tree.type, tree.span)
    return tree


def nan_stored_as_null(trees, table: pa.Table) -> list[list[object]]:
    """An 'engine' that stores NaN as null (as SQLite REAL does) and then evaluates correctly."""
    columns = {n: pc.if_else(pc.is_nan(table[n]), pa.scalar(None, table[n].type), table[n])
               if pa.types.is_floating(table[n].type) else table[n] for n in table.column_names}
    return [get_backend("reference")(t)(pa.table(columns)).to_pylist() for t in trees]


SCHEMA = Schema.from_mapping({"s": "string", "i": "int64", "x": "float64", "y": "float64"})


def one_row(**values) -> pa.Table:
    row = {"s": None, "i": None, "x": None, "y": None, **values}
    return pa.Table.from_pylist([row], schema=SCHEMA.to_arrow())


# A corpus whose second answer is wrong on purpose: 2 + 1 is 3 (ISO/IEC 9075-2 6.27), not 4.
# The string column holds U+0001, which XML 1.0 cannot hold (XML 1.0 section 2.2).
WRONG_CORPUS = """
category = "deliberately wrong answers"
description = "A test fixture: one published answer is wrong on purpose."

[columns.i]
type = "int64"
values = [1, 2, { null = true }]

[columns.s]
type = "string"
values = ["a\\u0001", "b", "c"]

[[case]]
expression = "i + 1"
reason = "integer addition"
source = "ISO/IEC 9075-2 6.27; row 2 is wrong on purpose"
expected = [2, %s, { null = true }]

[[case]]
expression = "s = 'a\\u0001'"
reason = "a control character compares like any other code point"
source = "ISO/IEC 9075-2 8.2 <comparison predicate>"
expected = [true, false, false]
"""


def write_corpus(directory: Path, second_answer: int) -> Path:
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "wrong.toml").write_text(WRONG_CORPUS % second_answer, encoding="utf-8")
    return directory


# ------------------------------------------------------------------ runner on the corpora
LOCAL_ENGINES = ("reference", "arrow", "numpy")
# SQL engines run on the corpora that are quick there: a corpus of erroring rows costs a
# statement per failing (row, expression) pair. The nightly `rexpr diff` runs them all.
SQL_CORPORA = ("nulls", "whitespace", "text_length", "string_comparison")


@pytest.fixture(scope="module")
def local_shards() -> list[dict]:
    return [run_shard(batch, LOCAL_ENGINES, LOWERINGS) for batch in corpus_batches(None)]


@pytest.fixture(scope="module")
def sql_shards() -> list[dict]:
    return [run_shard(batch, ("reference",) + SQL_ENGINES, LOWERINGS) for batch in corpus_batches(None, SQL_CORPORA)]


def _one_result_each(shards: list[dict], engines: tuple[str, ...], categories=()) -> None:
    batches = {b.batch_id: b for b in corpus_batches(None, categories)}
    assert set(batches) == {s["batch"] for s in shards}
    for shard in shards:
        keys = [r["key"] for r in shard["results"]]
        assert len(keys) == len(set(keys))
        batch = batches[shard["batch"]]
        wanted = {f"{e}|{lw}|{c.case_id}" for e in engines for lw in lowerings_of(e, LOWERINGS)
                  for c in batch.cases if e != "reference" or c.expected is not None}
        assert set(keys) == wanted
        for r in shard["results"]:
            assert (r["outcome"] == "unavailable") == (r["engine"] not in AVAILABLE), r


def test_every_corpus_case_has_one_result_per_local_backend(local_shards):
    _one_result_each(local_shards, LOCAL_ENGINES)


def test_corpus_cases_have_one_result_per_sql_engine_and_lowering(sql_shards):
    _one_result_each(sql_shards, ("reference",) + SQL_ENGINES, SQL_CORPORA)


def test_the_reference_gives_every_published_answer(local_shards):
    # Oracle: the answers in corpora/, each from the standard its case names.
    reference = [r for s in local_shards for r in s["results"] if r["engine"] == "reference"]
    assert len(reference) >= 400
    assert [r for r in reference if r["outcome"] != "agree"] == []


def _unexplained(shards: list[dict]) -> list[tuple]:
    # A faithful disagreement is allowed only for a function x engine pair the planner's
    # evidence already lists, so the planner does not push it.
    known = load_evidence().disagreeing
    bad = []
    for shard in shards:
        for r in shard["results"]:
            if r["engine"] == "reference" or r["outcome"] not in ("disagree", "failed"):
                continue
            if r["lowering"] == LOCAL or (r["lowering"] == "faithful"
                                          and not set((f, r["engine"]) for f in r["functions"]) & known):
                bad.append((r["key"], r["outcome"], r["reason"], r["diffs"][:1]))
    return bad


def test_local_backends_agree_with_the_reference_on_the_corpora(local_shards):
    assert _unexplained(local_shards) == []  # oracle: the reference evaluator


def test_faithful_sql_agrees_with_the_reference_on_the_corpora(sql_shards):
    assert _unexplained(sql_shards) == []  # oracle: the reference evaluator


def test_sql_engines_get_one_statement_per_batch_and_lowering():
    # One evaluate call holds every case the reference says raises on no row; each case that
    # raises somewhere gets its own call (its rows are bisected by the runner).
    engine = _sql_engine()
    [batch] = corpus_batches(None, ["division"])
    raising = {c.case_id for c in batch.cases
               if any(isinstance(v, rexpr.RowError) for v in
                      get_backend("reference")(c.tree)(batch.table).to_pylist())}
    assert raising and len(raising) < len(batch.cases)
    states = open_engines([engine])
    real = states[engine].runner
    calls = []

    class Counting:  # the real runner, counting its calls (a spy, not a stand-in)
        def evaluate(self, table, items):
            calls.append(len(items))
            return real.evaluate(table, items)

        def close(self):
            real.close()

    states[engine].runner = Counting()
    try:
        results = run_batch(batch, states, LOWERINGS)
    finally:
        close_engines(states)
    wanted = []
    for lw in LOWERINGS:
        pushed = [r for r in results if r.lowering == lw and r.outcome != "not_pushable"]
        clean = sum(1 for r in pushed if r.case_id not in raising)
        wanted += ([clean] if clean else []) + [1] * (len(pushed) - clean)
    assert max(calls) == max(wanted)  # the one statement for all clean cases was sent
    if not any(r.outcome == "failed" for r in results):  # a refused statement is split to find the culprit
        assert sorted(calls) == sorted(wanted)


# ------------------------------------------------------------------------ generated cases
def test_a_generated_case_can_be_rebuilt_alone():
    batches = generated_batches(600, seed=7)
    assert [len(b.cases) for b in batches] == [250, 250, 100]
    case = batches[1].cases[17]
    assert case.case_id == "gen/7/267"
    assert structure(random_expression(7, 267, campaign.GENERATED_SCHEMA, campaign.GENERATED_DEPTH)) == \
        structure(case.tree)
    # The printed text compiles back to the same tree, so a report's expression can be pasted.
    assert structure(rexpr.compile(case.text, campaign.GENERATED_SCHEMA).tree) == structure(case.tree)


def test_generated_batches_run_on_every_engine():
    [batch] = generated_batches(40, seed=3, rows=8)
    states = open_engines(ALL_ENGINES)
    try:
        results = run_batch(batch, states, LOWERINGS)
    finally:
        close_engines(states)
    per_engine = {}
    for r in results:
        per_engine.setdefault((r.engine, r.lowering), []).append(r.outcome)
    for engine in ALL_ENGINES:
        if engine == "reference":
            continue  # generated cases have no published answer
        for lw in lowerings_of(engine, LOWERINGS):
            outcomes = per_engine[(engine, lw)]
            assert len(outcomes) == 40
            assert ("unavailable" in outcomes) == (engine not in AVAILABLE)


# ------------------------------------------------------------------------------ shrinker
def test_shrinks_to_the_smallest_expression_that_still_disagrees():
    # The 'engine' trims only the left (ltrim for trim). Python's str.strip(' ') and
    # str.lstrip(' ') differ only when a non-space character is followed by a space, so no
    # string shorter than 2 characters can show the difference, and one call is the least tree.
    tree = rexpr.compile("upper(concat(trim(s), 'x')) = 'ABX' and i + 1 > 0", SCHEMA).tree
    repro = shrink(tree, one_row(s=" ab ", i=3), 0, reference_probe(renamed("trim", "ltrim")), SCHEMA)
    assert repro is not None and repro.minimal
    calls = [n for n in walk(repro.tree) if isinstance(n, TCall)]
    assert [c.function for c in calls] == ["trim"]
    assert len(list(walk(repro.tree))) == 2
    [operand] = repro.tree.args
    text = repro.row["s"] if repro.row else operand.value
    assert len(text) == 2 and text.strip(" ") != text.lstrip(" ")
    assert (repro.expected, repro.observed) == (text.strip(" "), text.lstrip(" "))


def test_shrinks_to_a_three_node_comparison_of_nulls_or_nans():
    # The 'engine' treats = as "not distinct from". The two differ only where an operand is null
    # (ISO/IEC 9075-2 8.15: null is not distinct from null) or NaN (IEEE 754-2019 5.11:
    # NaN = NaN is false); = takes two operands, so three nodes is the least tree.
    tree = rexpr.compile("x + 1.0 = y * 2.0 or length(s) > i", SCHEMA).tree
    table = one_row(s="abcdef", i=9, x=math.nan, y=math.nan)
    repro = shrink(tree, table, 0, reference_probe(eq_as_not_distinct), SCHEMA)
    assert repro is not None and repro.minimal
    assert repro.tree.function == "eq" and len(list(walk(repro.tree))) == 3
    values = list(repro.row.values()) + [a.value for a in walk(repro.tree) if hasattr(a, "value")]
    assert any(v is None or (isinstance(v, float) and math.isnan(v)) for v in values)


def test_shrinks_the_input_row_to_the_one_value_the_engine_cannot_hold():
    # The 'engine' stores NaN as null. Only a column holding NaN can show it, and a literal NaN
    # is not stored, so the least repro reads that one column: the expression `x` on {x: NaN}.
    tree = rexpr.compile("coalesce(x, 0.0) < y or s = 'q'", SCHEMA).tree
    repro = shrink(tree, one_row(s="abc", i=9, x=math.nan, y=1.0), 0, nan_stored_as_null, SCHEMA)
    assert repro is not None and repro.minimal
    assert repro.text == "x" and list(repro.row) == ["x"] and math.isnan(repro.row["x"])
    assert math.isnan(repro.expected) and repro.observed is None


def test_every_repro_still_disagrees_when_run_again():
    tree = rexpr.compile("upper(concat(trim(s), 'x')) = 'ABX' and i + 1 > 0", SCHEMA).tree
    probe = reference_probe(renamed("trim", "ltrim"))
    repro = shrink(tree, one_row(s=" ab ", i=3), 0, probe, SCHEMA)
    compiled = rexpr.compile(repro.text, SCHEMA)  # the text as a user would paste it
    table = one_row(**repro.row)
    expected = compiled.evaluate(table, backend="reference").to_pylist()[0]
    assert not same_result(expected, probe([compiled.tree], table)[0][0])


def test_no_repro_when_the_row_agrees():
    tree = rexpr.compile("trim(s) = 'ab'", SCHEMA).tree
    assert shrink(tree, one_row(s="ab"), 0, reference_probe(renamed("trim", "ltrim")), SCHEMA) is None


def test_a_shrink_cut_short_by_its_budget_says_so(monkeypatch):
    monkeypatch.setattr(shrink_module, "MAX_STEPS", 2)
    tree = rexpr.compile("upper(concat(trim(s), 'x')) = 'ABX' and i + 1 > 0", SCHEMA).tree
    repro = shrink(tree, one_row(s=" ab ", i=3), 0, reference_probe(renamed("trim", "ltrim")), SCHEMA)
    assert repro is not None and not repro.minimal and repro.steps >= 2


def test_native_disagreements_on_an_embedded_engine_shrink_to_minimal_repros(sql_shards):
    engine = _sql_engine()
    repros = [(key, r) for s in sql_shards for key, r in s["repros"].items()
              if key.startswith(f"{engine}|native|")]
    if not repros:
        pytest.skip(f"{engine}'s native lowering agreed with the reference on every corpus case")
    for key, repro in repros:
        assert repro["minimal"], key
        assert repro["sql"] and repro["sql"].startswith(f"-- rexpr repro: {engine}, native lowering")
        assert not same_result(repro["expected"], repro["observed"]) or repro["expected"] != repro["observed"]
    # The SQL to paste runs as is on a fresh connection of the engine.
    key, repro = repros[0]
    statement = repro["sql"].split("\n", 1)[1]
    if engine == "duckdb":
        import duckdb

        run = lambda: duckdb.connect().sql(statement).fetchall()  # noqa: E731
    else:
        import sqlite3

        run = lambda: sqlite3.connect(":memory:").execute(statement).fetchall()  # noqa: E731
    if isinstance(repro["observed"], dict) and "error" in repro["observed"]:
        with pytest.raises(Exception):
            run()
    else:
        assert len(run()) == 1


# ---------------------------------------------------------------------------------- reports
@pytest.fixture(scope="module")
def wrong_run(tmp_path_factory) -> tuple[subprocess.CompletedProcess, Path]:
    root = tmp_path_factory.mktemp("wrong")
    corpora = write_corpus(root / "corpora", 4)
    report = root / "report"
    done = cli("diff", "--corpora", str(corpora), "--engines", "arrow", "--report", str(report))
    return done, report


def test_a_disagreement_makes_the_run_red_and_is_reported_everywhere(wrong_run):
    done, report = wrong_run
    assert done.returncode == 1, done.stderr
    doc = json.loads((report / "report.json").read_text(encoding="utf-8"))
    assert (doc["format"], doc["version"]) == (REPORT_FORMAT, REPORT_VERSION)
    [d] = doc["disagreements"]
    assert (d["engine"], d["lowering"], d["function"], d["case_id"]) == ("reference", LOCAL, "add", "wrong/1")
    assert d["repro"]["row"] == {"i": 2} and d["repro"]["expected"] == 4 and d["repro"]["observed"] == 3
    assert doc["faithful_disagreements"] == 1 and d["drift"] == "new"
    engines = {e["name"]: e for e in doc["engines"]}
    assert engines["arrow"]["version"] == f"pyarrow {pa.__version__}" and "settings" in engines["arrow"]
    assert "published: <code>4</code> &middot; reference: <code>3</code>" in \
        (report / "report.html").read_text(encoding="utf-8")
    assert "[local] reference add (wrong/1, new): i + 1" in done.stdout


def test_junit_xml_is_well_formed_and_counts_failures(wrong_run):
    _, report = wrong_run
    root = ET.parse(report / "junit.xml").getroot()  # raises on malformed XML (U+0001 included)
    suites = {s.get("name"): s for s in root.iter("testsuite")}
    assert suites["reference.local"].get("failures") == "1"
    assert suites["arrow.local"].get("failures") == "0"
    [failure] = [c for c in suites["reference.local"].iter("testcase") if c.find("failure") is not None]
    assert failure.get("name") == "wrong/1"
    props = {p.get("name"): p.get("value") for p in suites["arrow.local"].iter("property")}
    assert props["version"] == f"pyarrow {pa.__version__}"


def test_terminal_summary_is_coloured_only_for_a_terminal(wrong_run):
    _, report = wrong_run
    doc = json.loads((report / "report.json").read_text(encoding="utf-8"))
    plain, coloured = terminal_summary(doc, colour=False), terminal_summary(doc, colour=True)
    assert "\033[" not in plain and "\033[1;31mDIFF" in coloured
    row = next(line for line in plain.splitlines() if line.startswith("add "))
    assert row.split()[:3] == ["add", "DIFF", "ok"]
    assert f"arrow: pyarrow {pa.__version__}" in plain


def test_the_html_page_is_self_contained(wrong_run):
    _, report = wrong_run
    page = (report / "report.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and "<script" not in page
    for marker in ("http:", "https:", "//", "@import", "url("):
        assert marker not in page.replace("-- rexpr", ""), marker
    assert len(re.findall(r"<div class='card( native)?' id='repro-\d+'>", page)) == 1 and "id='matrix'" in page


# ------------------------------------------------------------------ baseline, drift, exit
def test_baseline_marks_still_fixed_and_not_rerun(tmp_path):
    corpora = write_corpus(tmp_path / "corpora", 4)
    baseline, evidence = tmp_path / "baseline.json", tmp_path / "evidence.json"
    common = ("--engines", "arrow", "--baseline", str(baseline), "--report", str(tmp_path / "r"))
    first = cli("diff", "--corpora", str(corpora), *common, "--update-baseline", "--evidence", str(evidence), "--json")
    assert first.returncode == 1 and baseline.is_file() and evidence.is_file()
    assert json.loads(first.stdout)["drift"]["new"] == 1

    again = cli("diff", "--corpora", str(corpora), *common, "--json")
    drift = json.loads(again.stdout)["drift"]
    assert again.returncode == 1 and (drift["new"], drift["still"]) == (0, 1)  # a faithful one stays red

    other = write_corpus(tmp_path / "other", 3)  # same file name, but another category is selected
    (other / "wrong.toml").rename(other / "right.toml")
    skipped = cli("diff", "--corpora", str(other), *common, "--json")
    drift = json.loads(skipped.stdout)["drift"]
    assert skipped.returncode == 0 and drift["fixed"] == [] and [d["case_id"] for d in drift["not_rerun"]] == ["wrong/1"]

    write_corpus(corpora, 3)  # the published answer corrected: 2 + 1 = 3
    fixed = cli("diff", "--corpora", str(corpora), *common, "--json")
    drift = json.loads(fixed.stdout)["drift"]
    assert fixed.returncode == 0 and [d["case_id"] for d in drift["fixed"]] == ["wrong/1"]


def test_a_native_divergence_is_red_only_while_new(tmp_path):
    engine = _sql_engine()
    baseline = tmp_path / "baseline.json"
    args = ("diff", "--categories", "whitespace,text_length", "--engines", engine, "--lowering", "native",
            "--baseline", str(baseline), "--report", str(tmp_path / "r"), "--json")
    first = cli(*args, "--update-baseline", "--evidence", str(tmp_path / "evidence.json"))
    summary = json.loads(first.stdout)
    if not summary["native_divergences"]:
        pytest.skip(f"{engine}'s native lowering agreed on these corpora")
    assert first.returncode == 1 and summary["faithful_disagreements"] == 0
    second = cli(*args)
    assert second.returncode == 0, second.stdout
    assert json.loads(second.stdout)["drift"]["new"] == 0


def test_evidence_keeps_pairs_of_engines_that_did_not_run():
    # Rule: an engine that was down is no evidence that it agrees (evidence_from's docstring).
    document = build_document([], {"duckdb": {"status": "available"}, "postgres": {"status": "unavailable"}},
                              ["faithful"], {}, 0, "now", None, 0)
    previous = {"faithful_disagreements": [{"function": "trim", "engine": "postgres"},
                                           {"function": "trim", "engine": "duckdb"}]}
    assert evidence_from(document, previous)["faithful_disagreements"] == [{"function": "trim", "engine": "postgres"}]
    # A run over some corpora only is no evidence that the pairs it did not see agree.
    assert evidence_from(document, previous, complete=False)["faithful_disagreements"] == \
        sorted(previous["faithful_disagreements"], key=lambda p: (p["function"], p["engine"]))
    assert not alert(document)


def test_update_baseline_refreshes_the_file_the_planner_reads():
    from rexpr.cli.diff import BUNDLED_EVIDENCE
    from importlib import resources

    assert Path(str(resources.files("rexpr.data").joinpath("disagreements.json"))).resolve() == BUNDLED_EVIDENCE


def test_json_summary_has_the_documented_keys(tmp_path):
    done = cli("diff", "--categories", "whitespace,string_comparison", "--report", str(tmp_path), "--json")
    assert done.returncode in (0, 1), done.stderr
    summary = json.loads(done.stdout)
    assert {"engines", "cases", "faithful_disagreements", "native_divergences"} <= set(summary)
    assert [e["name"] for e in summary["engines"]] == list(ALL_ENGINES)
    assert summary["cases"] == sum(len(b.cases) for b in corpus_batches(None, ["whitespace", "string_comparison"]))
    assert isinstance(summary["faithful_disagreements"], int)
    for item in summary["native_divergences"]:
        assert {"category", "engine", "function"} <= set(item)
    assert done.returncode == (1 if summary["faithful_disagreements"] or summary["native_divergences"] else 0)


def test_unknown_category_is_an_input_error(tmp_path):
    done = cli("diff", "--categories", "flaots", "--report", str(tmp_path), "--json")
    assert done.returncode == 2
    error = json.loads(done.stdout.splitlines()[0])["error"]
    assert error["code"] == "unknown_category" and "floats" in error["message"]


# ----------------------------------------------------------------------- scale and faults
LOCAL_SPEC = dict(engines=("reference", "arrow", "numpy"), lowerings=LOWERINGS, corpora_dir=None, generate=0, seed=1)


def test_local_processes_give_the_same_results(tmp_path):
    batches = corpus_batches(None, ["floats", "nulls", "casts"])
    one = run_campaign(CampaignSpec(**LOCAL_SPEC, report_dir=str(tmp_path / "a")), batches)
    two = run_campaign(CampaignSpec(**LOCAL_SPEC, report_dir=str(tmp_path / "b")), batches, jobs=2)
    assert outcome_table(one) == outcome_table(two)
    assert sorted(p.name for p in (tmp_path / "b" / "shards").iterdir()) == sorted(f"{b.batch_id}.json" for b in batches)


def test_a_dask_cluster_gives_the_same_results(tmp_path):
    distributed = pytest.importorskip("distributed", reason="Dask distributed is not installed (rexpr[cluster])")
    batches = corpus_batches(None, ["floats", "nulls"]) + generated_batches(300, seed=5)
    local = run_campaign(CampaignSpec(**LOCAL_SPEC, report_dir=str(tmp_path / "local")), batches)
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None) as cluster:
        on_cluster = run_campaign(CampaignSpec(**LOCAL_SPEC, report_dir=str(tmp_path / "dask")), batches,
                                  cluster=cluster.scheduler_address)
        done = cli("diff", "--categories", "floats", "--engines", "arrow,numpy", "--cluster",
                   cluster.scheduler_address, "--report", str(tmp_path / "cli"), "--json")
    assert outcome_table(local) == outcome_table(on_cluster)
    assert done.returncode in (0, 1), done.stderr
    assert json.loads(done.stdout)["cases"] == len(corpus_batches(None, ["floats"])[0].cases)


def _shards(report: Path) -> dict[str, tuple[int, int]]:
    folder = report / "shards"
    return {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in folder.glob("gen-*.json")} if folder.is_dir() else {}


def test_resume_after_a_kill_redoes_nothing_and_loses_nothing(tmp_path):
    args = ["diff", "--no-corpora", "--generate", "1750", "--engines", "arrow,numpy", "--json"]
    killed = tmp_path / "killed"
    process = subprocess.Popen([sys.executable, "-m", "rexpr.cli.main", *args, "--report", str(killed)],
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    while not _shards(killed) and time.monotonic() < deadline and process.poll() is None:
        time.sleep(0.01)
    finished_early = process.poll() is not None
    process.send_signal(signal.SIGKILL)
    process.wait()
    assert not finished_early, "the campaign ended before it could be killed: raise --generate"
    before = _shards(killed)
    assert 1 <= len(before) < 7
    assert not (killed / "report.json").exists()

    resumed = cli(*args, "--report", str(killed), "--resume")
    whole = cli(*args, "--report", str(tmp_path / "whole"))
    assert resumed.returncode == whole.returncode and resumed.returncode in (0, 1), resumed.stderr
    after = _shards(killed)
    assert len(after) == 7 and all(after[name] == stat for name, stat in before.items())  # not rewritten
    load = lambda d: json.loads((d / "report.json").read_text(encoding="utf-8"))  # noqa: E731
    assert comparable(load(killed)) == comparable(load(tmp_path / "whole"))


def test_resume_refuses_a_different_campaign(tmp_path):
    first = cli("diff", "--categories", "floats", "--engines", "arrow", "--report", str(tmp_path), "--json")
    assert first.returncode in (0, 1), first.stderr
    other = cli("diff", "--categories", "nulls", "--engines", "arrow", "--report", str(tmp_path), "--resume", "--json")
    assert other.returncode == 2
    error = json.loads(other.stdout.splitlines()[0])["error"]
    assert error["code"] == "resume_mismatch" and "categories" in error["message"]


class _Proxy:
    """A TCP relay on a loopback port to a local server; ``close`` makes the server vanish for
    whoever connects through it."""

    def __init__(self, port: int) -> None:
        self.target = port
        self.listener = socket.create_server(("127.0.0.1", 0))
        self.port = self.listener.getsockname()[1]
        self.sockets: list[socket.socket] = []
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while True:
            try:
                client, _ = self.listener.accept()
            except OSError:
                return
            upstream = socket.create_connection(("127.0.0.1", self.target))
            self.sockets += [client, upstream]
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pump, args=(a, b), daemon=True).start()

    @staticmethod
    def _pump(source: socket.socket, sink: socket.socket) -> None:
        try:
            while data := source.recv(65536):
                sink.sendall(data)
        except OSError:
            pass
        finally:
            for s in (source, sink):
                try:
                    s.shutdown(socket.SHUT_RDWR)
                except OSError:
                    pass

    def close(self) -> None:
        try:
            self.listener.shutdown(socket.SHUT_RDWR)  # wakes the blocked accept (close alone does not)
        except OSError:
            pass
        self.listener.close()
        for s in self.sockets:
            try:
                s.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass


@pytest.mark.servers
def test_an_engine_that_goes_away_fails_its_remaining_shards_while_the_others_finish(tmp_path, monkeypatch):
    if "postgres" not in AVAILABLE:
        message = "postgres (or the SQL support it needs) is not available"
        if REQUIRE_SERVERS and EMBEDDED_SQL:
            pytest.fail(message + " and REXPR_REQUIRE_SERVERS=1")
        pytest.skip(message)
    from rexpr.engines.settings import server_settings

    proxy = _Proxy(server_settings("postgres").port)
    monkeypatch.setenv("REXPR_POSTGRES_PORT", str(proxy.port))
    batches = corpus_batches(None, ["string_comparison", "text_length", "whitespace", "nulls"])
    engines = ("reference", "arrow", "sqlite", "postgres")
    spec = CampaignSpec(engines, LOWERINGS, None, 0, 1, str(tmp_path))

    def progress(done: int, total: int) -> None:
        if done == 2:
            proxy.close()  # the server goes away after two shards

    shards = run_campaign(spec, batches, progress=progress)
    results, _, engine_info, _ = campaign.merge_shards(shards)
    by_batch = {s["batch"]: [r for r in s["results"] if r["engine"] == "postgres"] for s in shards}
    order = [b.batch_id for b in batches]
    for batch_id in order[:2]:  # it answered (a statement it refuses is that case's failure only)
        assert any(r["outcome"] == "agree" for r in by_batch[batch_id])
        assert not [r for r in by_batch[batch_id] if "went away" in r["reason"] or "engine failed" in r["reason"]]
    merged = [r for r in results if r["engine"] == "postgres" and r["case_id"].split("/")[0] in
              {b.category for b in batches[2:]}]
    assert merged and all(r["outcome"] == "failed" and "went away" in r["reason"] for r in merged)
    assert engine_info["postgres"]["failed_shards"] == 2
    others = [r for r in results if r["engine"] != "postgres"]
    assert others and not [r for r in others if r["outcome"] in ("failed", "unavailable")]


@pytest.mark.parametrize("args", [("functions",), ("diff", "--categories", "nulls", "--engines", "arrow")])
def test_a_closed_pipe_stops_the_command_quietly(args: tuple[str, ...], tmp_path: Path) -> None:
    # `rexpr diff | head`: the reader goes away before the command writes. Exit status 128 + 13
    # (SIGPIPE), as a command killed by the signal gives (common practice, no source).
    extra = ("--report", str(tmp_path / "r")) if args[0] == "diff" else ()
    process = subprocess.Popen([sys.executable, "-m", "rexpr.cli.main", *args, *extra],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    assert process.stdout is not None and process.stderr is not None
    process.stdout.close()
    error = process.stderr.read().decode()
    assert process.wait(timeout=300) == 141
    assert error == ""


# ------------------------------------------------------------------------ engine limits
# Rule 8 of rexpr.compare: a row an engine reports as an engine limit is set aside only where
# the reference reaches a value of that kind (IEEE 754-2019 §7.4: overflow gives ±inf; §6.2,
# §7.2: inf - inf is NaN); anywhere else the limit is a disagreement. Oracle: the reference.
LIMIT_SCHEMA = Schema.from_mapping({"x": "float64", "y": "float64"})


def _limit_batch(*texts: str) -> Batch:
    inf = math.inf
    table = pa.table({"x": pa.array([inf, 1.5, None, -inf, 4.0], pa.float64()),
                      "y": pa.array([inf, 2.0, 1.0, -inf, 0.5], pa.float64())})
    cases = tuple(DiffCase(f"limits/{i}", "limits", text, rexpr.compile(text, LIMIT_SCHEMA).tree)
                  for i, text in enumerate(texts))
    return Batch("limits", "limits", LIMIT_SCHEMA, table, cases)


def _run_limit_batch(engine: str, *texts: str) -> list:
    states = open_engines(["reference", engine])
    if states[engine].unavailable:
        close_engines(states)
        if REQUIRE_SERVERS or engine == "sqlite":
            pytest.fail(f"{engine} is not available: {states[engine].unavailable}")
        pytest.skip(f"{engine} is not available: {states[engine].unavailable}")
    try:
        return [r for r in run_batch(_limit_batch(*texts), states, ["faithful"]) if r.engine == engine]
    finally:
        close_engines(states)


def test_sqlite_nan_results_are_per_row_and_the_other_rows_are_compared():
    [nan_case, finite_case] = _run_limit_batch("sqlite", "x - y", "x * y")
    # x - y is NaN on rows 0 and 3 (inf - inf); x * y is finite or ±inf everywhere (SQLite REAL holds inf).
    assert nan_case.outcome == "agree", nan_case
    assert "2 row(s) not compared, sqlite cannot represent the result (engine limit: nan; rows 0, 3)" in nan_case.reason
    assert finite_case.outcome == "agree" and "engine limit" not in finite_case.reason


@pytest.mark.servers
def test_mariadb_non_finite_rows_are_not_disagreements():
    results = _run_limit_batch("mariadb", "x * 1e308", "x + y", "x * 1e308 > y")
    assert [r.outcome for r in results] == ["agree"] * 3, [(r.text, r.reason, r.diffs) for r in results]
    # x * 1e308 overflows to inf on row 4 only (4e308 > the binary64 maximum ≈ 1.80e308, §3.6, §7.4;
    # 1.5e308 is finite); the input ±inf rows 0 and 3 are input losses (DOUBLE stores them as NULL).
    assert "1 row(s) not compared, mariadb cannot represent the result (engine limit: non_finite; rows 4)" \
        in results[0].reason
    # A bool result whose way passes through inf (row 4): the limit is covered by the sub-expression.
    assert "engine limit: non_finite; rows 4)" in results[2].reason
    assert "engine limit" not in results[1].reason  # 5.6 and 4.5 are finite sums


def test_a_limit_where_the_reference_is_finite_is_a_disagreement():
    # A real SQLite limit raised on every row, compared once against a case whose reference
    # reaches NaN only on rows 0 and 3 (inf - inf), and once against one that is finite there.
    from rexpr.differential.runner import _compared
    from rexpr.engines import get_engine
    from rexpr.engines.base import SqlItem
    import sqlglot

    batch = _limit_batch("x - y", "x + 1.0")
    sqlite = get_engine("sqlite")
    try:
        [limited] = sqlite.evaluate(batch.table, [SqlItem("v", sqlglot.parse_one("rexpr_raise('rexpr-limit:nan')"),
                                                          batch.cases[0].tree.type)])
    finally:
        sqlite.close()
    observed = limited.to_pylist()
    assert all(isinstance(v, rexpr.values.EngineLimit) for v in observed)
    verdicts = []
    for case in batch.cases:
        expected = get_backend("reference")(case.tree)(batch.table).to_pylist()
        verdicts.append(_compared(case, "sqlite", "faithful", expected, observed, table=batch.table))
    nan_case, finite_case = verdicts
    assert nan_case.outcome == "disagree" and {d.row for d in nan_case.diffs} == {1, 2, 4}
    assert finite_case.outcome == "disagree" and {d.row for d in finite_case.diffs} == {0, 1, 2, 3, 4}


def test_check_shows_engine_limit_rows_plainly():
    # inf - inf is NaN (IEEE 754-2019 §7.2); SQLite has no NaN, so those rows are engine-limit rows:
    # status "limited", exit 0 (not a disagreement), and each such row named with the reference's value.
    if "sqlite" not in AVAILABLE:
        pytest.fail("sqlite is not available")
    args = ("check", "x - x", "--field", "x:float64", "--engines", "reference,sqlite")
    text = cli(*args)
    assert text.returncode == 0, text.stderr
    [line] = [l for l in text.stdout.splitlines() if l.strip().startswith("sqlite")]
    assert line.split()[1] == "limited" and "engine limit: nan" in line
    assert re.search(r"row \d+: not computed, sqlite cannot represent a NaN float64 .*reference: NaN\s+\[x=-?inf\]",
                     text.stdout)
    data = json.loads(cli(*args, "--json").stdout)["results"]["sqlite"]
    assert data["status"] == "limited" and data["disagreements"] == []
    assert {r["engine_limit"] for r in data["limited_rows"]} == {"nan"}
    assert {r["expected"] for r in data["limited_rows"]} == {"NaN"}


def test_sql_the_engines_own_parser_refuses_is_not_pushable_in_the_tester_too():
    # Generated seed 5, case 17747: its faithful SQLite SQL (about 290 KB) overflows SQLite's
    # fixed parser stack. to_sql refuses it as not pushable; the tester must say the same, not
    # report the engine as failed. Oracle: SQLite itself (sqlite3 compiling the statement).
    from rexpr.differential.campaign import GENERATED_SCHEMA
    from rexpr.sql.lowering import to_sql

    text = "substring(cast(cast(substring('\u0301', 1, i) as timestamp) as string), j, floor(position(t, '+5')))"
    tree = rexpr.compile(text, GENERATED_SCHEMA).tree
    with pytest.raises(rexpr.NotPushable, match="parser"):
        to_sql(tree, "sqlite")
    table = pa.table({name: pa.nulls(2, to_arrow_type(t)) for name, t in GENERATED_SCHEMA.fields})
    batch = Batch("deep", "generated", GENERATED_SCHEMA, table, (DiffCase("deep/0", "generated", text, tree),))
    states = open_engines(["reference", "sqlite"])
    try:
        [result] = [r for r in run_batch(batch, states, ["faithful"]) if r.engine == "sqlite"]
    finally:
        close_engines(states)
    assert result.outcome == "not_pushable" and "parser stack overflow" in result.reason, result
