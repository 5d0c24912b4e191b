"""The edge-case corpora in corpora/: every file loads, every case compiles, and every stated
answer agrees with the reference evaluator.

The expected values in the corpora come from the sources each case names (ISO/IEC 9075-2,
IEEE 754-2019, RFC 3339 and 3629, the Unicode Standard and its data files, Python's decimal and
str case mapping); the reference evaluator is the code under test here. Where the two disagree
the case stays as written and is listed in KNOWN_DISAGREEMENTS, a strict expected failure.
"""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path

import pytest

import rexpr
from rexpr.catalogue.model import ErrorClass
from rexpr.compare import same_result
from rexpr.corpus import CORPUS_ERROR, Case, Corpus, load_corpora, load_corpus
from rexpr.errors import ExpressionError, InputProblem
from rexpr.schema import Schema
from rexpr.values import RowError, show_value

# Loading type-checks every case that states no compile error, so a case that stops compiling
# fails collection with a message naming the file and the case.
CORPORA = load_corpora()

# (file stem, expression) -> why the reference evaluator is wrong there. Each is a bug to fix in
# rexpr/reference/, after which the entry must go (the xfail is strict).
KNOWN_DISAGREEMENTS: dict[tuple[str, str], str] = {}

# The categories issue 7 asks the corpora to cover.
REQUIRED_CATEGORIES = {
    "whitespace trimming", "substrings", "NaN, infinities and signed zero", "integer overflow",
    "nulls and three-valued logic", "division and modulo", "rounding", "casts", "case mapping",
    "length of combining and astral text", "like and escapes", "string comparison and trailing spaces",
    "dates and timestamps",
}


def _params(wanted, *, known_disagreements: bool = False) -> list:
    """Test parameters for the cases ``wanted`` selects; the known disagreements are strict
    xfails where the test compares values with the reference."""
    params = []
    for corpus in CORPORA:
        for case in corpus.cases:
            if not wanted(case):
                continue
            reason = KNOWN_DISAGREEMENTS.get((corpus.name, case.expression)) if known_disagreements else None
            marks = (pytest.mark.xfail(strict=True, reason=reason),) if reason else ()
            params.append(pytest.param(corpus, case, id=f"{corpus.name}:{case.number:03d}", marks=marks))
    return params


# ------------------------------------------------------------------------------ the corpora
def test_corpora_hold_at_least_400_cases():
    # Issue 7 item 1: at least 400 hand-chosen cases in all.
    assert sum(len(c.cases) for c in CORPORA) >= 400


def test_every_required_category_has_a_file():
    # Issue 7 item 1 lists the categories.
    assert REQUIRED_CATEGORIES <= {c.category for c in CORPORA}


def test_every_case_states_a_result_with_a_source():
    # Format rule (corpora/README.md): a stated result names its rule; every case here states one.
    unstated = [f"{c.name}:{k.number}" for c in CORPORA for k in c.cases
                if k.expected is None and k.compile_error is None]
    assert unstated == []
    assert all(k.source for c in CORPORA for k in c.cases)


def test_known_disagreements_name_existing_cases():
    present = {(c.name, k.expression) for c in CORPORA for k in c.cases}
    assert set(KNOWN_DISAGREEMENTS) <= present


@pytest.mark.parametrize("corpus, case", _params(lambda case: True))
def test_case_compiles_or_is_rejected_as_stated(corpus: Corpus, case: Case):
    # Compiled against the schema of the Arrow table the case runs on, which must give the type
    # the loader typed the expected values with; a rejection must carry the stated error code.
    schema = Schema.from_arrow(corpus.table.schema)
    if case.compile_error is not None:
        with pytest.raises(ExpressionError) as caught:
            rexpr.compile(case.expression, schema)
        assert caught.value.code == case.compile_error
    else:
        assert rexpr.compile(case.expression, schema).type == case.result_type


@pytest.mark.parametrize("corpus, case", _params(lambda case: case.expected is not None, known_disagreements=True))
def test_expected_values_agree_with_the_reference(corpus: Corpus, case: Case):
    # Expected values come from the source named in the case; the reference must match them.
    compiled = rexpr.compile(case.expression, corpus.schema)
    observed = compiled.evaluate(corpus.table, backend="reference").to_pylist()
    assert len(observed) == corpus.table.num_rows
    inputs = corpus.table.select(list(compiled.fields)).to_pylist()
    wrong = [f"  row {i}{_show_row(inputs[i])}: expected {show_value(e)}, got {show_value(o)}"
             for i, (e, o) in enumerate(zip(case.expected, observed)) if not same_result(e, o)]
    assert not wrong, (f"{corpus.path.name} {case.label}\n  reason: {case.reason}\n  source: {case.source}\n"
                       + "\n".join(wrong))


@pytest.mark.parametrize("corpus, case",
                         _params(lambda case: case.expected is not None and None in case.expected))
def test_results_with_null_rows_are_typed_nullable(corpus: Corpus, case: Case):
    # A row the source says is null must be allowed by the checker's nullability inference.
    assert case.result_type is not None and case.result_type.nullable


def _show_row(row: dict) -> str:
    return f" ({', '.join(f'{k}={show_value(v)}' for k, v in row.items())})" if row else ""


# ------------------------------------------------------------------------------- the loader
HEADER = 'category = "tiny"\ndescription = "a test corpus"\n'


def _write(tmp_path: Path, text: str, name: str = "tiny.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_loader_reads_every_value_kind(tmp_path):
    # Format rules from corpora/README.md; value spellings from TOML 1.0.
    path = _write(tmp_path, HEADER + """
[columns.x]
type = "float64"
values = [-0.0, "-0.0", "NaN", "Infinity", "-Infinity", nan, { null = true }]

[columns.d]
type = "date"
values = [2024-02-29, 2024-02-29, 2024-02-29, 2024-02-29, 2024-02-29, 2024-02-29, 2024-02-29]

[columns.t]
type = "timestamp not null"
values = [2024-02-29T23:59:59.5, 2024-02-29 00:00:00, 2024-02-29T00:00:00, 2024-02-29T00:00:00,
          2024-02-29T00:00:00, 2024-02-29T00:00:00, 2024-02-29T00:00:00]

[[case]]
expression = "1 / 0"
reason = "a constant with a single expected value"
source = "ISO/IEC 9075-2 6.27 22012"
expected = { error = "division_by_zero" }

[[case]]
expression = "x"
reason = "a column read back"
source = "identity"
expected = [-0.0, -0.0, nan, inf, -inf, nan, { null = true }]
""")
    corpus = load_corpus(path)
    assert corpus.category == "tiny" and corpus.schema.names == ["x", "d", "t"]
    xs = corpus.table.column("x").to_pylist()
    # IEEE 754-2019 6.3: the sign bit of a zero is kept; TOML 1.0 allows -0.0.
    assert [math.copysign(1.0, v) for v in xs[:2]] == [-1.0, -1.0]
    assert math.isnan(xs[2]) and xs[3] == math.inf and xs[4] == -math.inf and xs[6] is None
    assert corpus.table.column("d").to_pylist()[0] == dt.date(2024, 2, 29)
    assert corpus.table.column("t").to_pylist()[0] == dt.datetime(2024, 2, 29, 23, 59, 59, 500000)
    assert corpus.table.schema.field("t").nullable is False
    constant, column = corpus.cases
    assert constant.expected == (RowError(ErrorClass.DIVISION_BY_ZERO),) * 7  # broadcast to every row
    assert math.copysign(1.0, column.expected[1]) == -1.0


def test_loader_gives_a_file_without_columns_one_row(tmp_path):
    path = _write(tmp_path, HEADER + '[[case]]\nexpression = "1 + 1"\nreason = "r"\nsource = "s"\nexpected = 2\n')
    corpus = load_corpus(path)
    assert corpus.table.num_rows == 1 and corpus.schema.fields == ()
    assert corpus.cases[0].expected == (2,)


CASE = '[[case]]\nexpression = "x + 1.0"\nreason = "r"\nsource = "s"\nexpected = [1.0, 2.0]\n'
COLUMN = '[columns.x]\ntype = "float64"\nvalues = [0.0, 1.0]\n'


@pytest.mark.parametrize("text, fragment", [
    ("category = \n", "not readable TOML"),
    (HEADER + "extra = 1\n" + COLUMN + CASE, "unknown key 'extra'"),
    ('description = "d"\n' + COLUMN + CASE, "'category' must be a non-empty string"),
    (HEADER + COLUMN, "there is no [[case]]"),
    (HEADER + '[columns.x]\ntype = "float64"\nvalues = [0.0, 1]\n' + CASE, "write 1.0 for a float64"),
    (HEADER + '[columns.x]\ntype = "decimal"\nvalues = [0.0, 1.0]\n' + CASE, "unknown type"),
    (HEADER + '[columns.x]\ntype = "float64 not null"\nvalues = [0.0, { null = true }]\n' + CASE,
     "holds a null"),
    (HEADER + '[columns.x]\ntype = "float64"\nvalues = [0.0, { error = "out_of_range" }]\n' + CASE,
     "must be { null = true }"),
    (HEADER + COLUMN + '[columns.y]\ntype = "int64"\nvalues = [1]\n' + CASE, "different numbers of values"),
    (HEADER + '[columns.i]\ntype = "int64"\nvalues = [9223372036854775808]\n' + CASE, "does not fit in int64"),
    (HEADER + '[columns.t]\ntype = "timestamp"\nvalues = [2024-05-01T10:00:00Z]\n' + CASE, "no time zone"),
    (HEADER + '[columns.s]\ntype = "struct<a: int64>"\nvalues = [1]\n' + CASE, "struct columns"),
    (HEADER + COLUMN + CASE.replace('reason = "r"\n', ''), "'reason' must be a non-empty string"),
    (HEADER + COLUMN + CASE.replace('reason = "r"', 'reason = "two\\nlines"'), "must be one line"),
    (HEADER + COLUMN + CASE.replace('source = "s"\n', ''), "needs a 'source'"),
    (HEADER + COLUMN + CASE.replace("[1.0, 2.0]", "[1.0]"), "has 1 values for 2 rows"),
    (HEADER + COLUMN + CASE.replace("[1.0, 2.0]", "1.0"), "needs one value per row"),
    (HEADER + COLUMN + CASE.replace("[1.0, 2.0]", '[1.0, { error = "overflow" }]'), "unknown error class"),
    (HEADER + COLUMN + CASE.replace("[1.0, 2.0]", '[1.0, "2.0"]'), "is not a float64 value"),
    (HEADER + COLUMN + CASE.replace("x + 1.0", "y + 1.0"), "does not compile"),
    (HEADER + COLUMN + CASE + 'compile_error = "type_mismatch"\n', "not both"),
    (HEADER + COLUMN + CASE + CASE, "repeats case 1"),
])
def test_loader_rejects_bad_files_with_a_typed_error(tmp_path, text, fragment):
    # Format rules from corpora/README.md; errors are InputProblem with code invalid_corpus.
    path = _write(tmp_path, text)
    with pytest.raises(InputProblem) as caught:
        load_corpus(path)
    assert caught.value.code == CORPUS_ERROR
    assert "tiny.toml" in caught.value.message and fragment in caught.value.message


def test_loader_errors_name_the_case(tmp_path):
    broken = CASE.replace("x + 1.0", "x + 2.0").replace("[1.0, 2.0]", "[2.0]")
    path = _write(tmp_path, HEADER + COLUMN + CASE + broken)
    with pytest.raises(InputProblem) as caught:
        load_corpus(path)
    assert "case 2 ('x + 2.0')" in caught.value.message


def test_load_corpora_rejects_a_missing_directory_and_duplicate_categories(tmp_path):
    with pytest.raises(InputProblem) as caught:
        load_corpora(tmp_path / "absent")
    assert caught.value.code == CORPUS_ERROR
    _write(tmp_path, HEADER + COLUMN + CASE, "a.toml")
    _write(tmp_path, HEADER + COLUMN + CASE, "b.toml")
    with pytest.raises(InputProblem) as caught:
        load_corpora(tmp_path)
    assert "category 'tiny'" in caught.value.message


def test_load_corpora_defaults_to_the_bundled_directory():
    assert {c.path.parent for c in CORPORA} == {Path(rexpr.__file__).resolve().parent.parent / "corpora"}
