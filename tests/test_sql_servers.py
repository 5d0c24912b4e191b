"""SQL lowering on the real PostgreSQL and MariaDB servers (marked ``servers``).

Oracle: the reference evaluator (rexpr.reference), the project's executable spec, unless a
check names another source (corpora cite theirs; Python's str case mapping, repr and float()
stand for the Unicode Standard, IEEE 754 5.12.2 and the cast table). Every faithful SQL
expression runs on the server through the project's runners over edge-value tables
(rexpr.rows.edge_table) and is compared row by row, values and error classes, with
rexpr.compare.same_result. Cases come from the catalogue, so a new function is covered, or
must be declared refused, without touching this file. No mocks.

MariaDB's DOUBLE holds no NaN, ±inf or -0.0 (its declared domain limit): rows whose input the
runner had to store altered (``input_losses``) are not compared, and rows where some float64
subexpression is NaN or ±inf per the reference must be engine-limit rows (``non_finite``) or
agree, never give another value and never raise an error class.
"""

from __future__ import annotations

import math
import random
import struct
import sys
import unicodedata
from typing import Iterator

import pyarrow as pa
import pytest

import rexpr
from engines_support import DEEP_SHAPES, NULL_BESIDE_ERROR, deepest_lowered, open_runner
from rexpr.catalogue import CAST_RULES, ENTRIES, FunctionSpec
from rexpr.compare import same_result
from rexpr.corpus import load_corpora
from rexpr.engines.base import Runner, SqlItem
from rexpr.errors import NotPushable, Span
from rexpr.reference.evaluator import evaluate_row
from rexpr.reference.tables import evaluate_table, field_values
from rexpr.rows import edge_table
from rexpr.schema import Schema, to_arrow_type
from rexpr.sql.capabilities import capability
from rexpr.sql.dialects import _case_mapping
from rexpr.sql.lowering import dialect_of, lower, to_sql
from rexpr.typed import TCall, TField, TLiteral, Typed, fields_read, walk
from rexpr.types import DataType, Kind
from rexpr.values import EngineLimit, RowError

pytestmark = pytest.mark.servers

ENGINES = ("postgres", "mariadb")
SPAN = Span(0, 0)
FIELDS: dict[Kind, tuple[str, ...]] = {
    Kind.INT64: ("a", "b", "c"), Kind.FLOAT64: ("x", "y", "z"), Kind.STRING: ("s", "p", "q"),
    Kind.BOOL: ("f", "g", "h"), Kind.DATE: ("d", "e", "d3"), Kind.TIMESTAMP: ("ts", "tt", "t3"),
}
SCHEMA = Schema.from_mapping({name: kind.value for kind, names in FIELDS.items() for name in names})
MAX_ROWS = 700


@pytest.fixture(scope="module", params=ENGINES)
def server(request: pytest.FixtureRequest) -> Iterator[tuple[str, Runner]]:
    runner = open_runner(request.param)
    try:
        yield request.param, runner
    finally:
        runner.close()


# ------------------------------------------------------------------------------ cases
def _field(kind: Kind, index: int) -> TField:
    return TField((FIELDS[kind][index % 3],), DataType(kind), SPAN)


def catalogue_cases(spec: FunctionSpec) -> list[TCall]:
    """Every signature over columns: optional parameters with and without, variadic ones with
    one and two extra arguments."""
    if spec.id == "cast":
        return [TCall("cast", (_field(rule.source, 0),), DataType(rule.target), SPAN) for rule in CAST_RULES]
    if spec.id == "case":
        return [TCall("case", (_field(Kind.BOOL, 0), _field(k, 0), _field(Kind.BOOL, 1), _field(k, 1), _field(k, 2)),
                      DataType(k), SPAN) for k in FIELDS]
    out = []
    for signature in spec.signatures:
        params = list(signature.params)
        shapes = [params[:len(params) - n] for n in range(signature.optional + 1)]
        if signature.variadic:
            shapes = [params + [params[-1]] * extra for extra in (1, 2)]
        for shape in shapes:
            used: dict[Kind, int] = {}
            args = []
            for kind in shape:
                args.append(_field(kind, used.get(kind, 0)))
                used[kind] = used.get(kind, 0) + 1
            out.append(TCall(spec.id, tuple(args), DataType(signature.result, spec.nullable([a.type for a in args])),
                             SPAN))
    return out


# Literal argument forms, constants (folded while lowering) and nestings where the error rules
# meet SQL's evaluation order.
LITERAL_CASES: dict[str, list[str]] = {
    "add": ["9223372036854775807 + 1", "a + 1", "(a - b) - (b - a)", "x + 1e308", "div(a, b) + 9223372036854775807"],
    "subtract": ["a - (-9223372036854775807 - 1)", "x - 1e308"],
    "multiply": ["x * 1e300", "x * 1e-300", "a * 3037000500"],
    "divide": ["1.0 / 0.0", "x / 0.0", "2.0 * (x / 3.0)", "x / 1e-310", "x / 1e300"],
    "modulo": ["a % -1", "x % 0.5", "x % -3.0", "(-9223372036854775807 - 1) % -1"],
    "negate": ["-(-9223372036854775807 - 1)", "-x"],
    "div": ["div(-9223372036854775807 - 1, -1)", "div(a, 0)", "div(a, -1)"],
    "round": ["round(x, 0)", "round(a, -1)", "round(a, -2)", "round(a, -18)", "round(a, -19)", "round(a, -20)",
              "round(a, 3)", "round(x, null)", "round(2.5)", "round(-2.5)", "round(x, 2)", "round(x, -300)",
              "round(x, 400)"],
    "power": ["power(x, 2.0)", "power(x, 0.5)", "power(-8.0, x)", "power(x, -1.0)", "power(2.0, x)"],
    "exp": ["exp(x * 1000.0)", "exp(-x * 1000.0)"],
    "like": ["s like 'a%'", "s like '_b%'", "s like '%\\%%' escape '\\'", "s like 'a\\_b' escape '\\'",
             "s like 'a\\' escape '\\'", "s like 'a\\b' escape '\\'", "s like p escape '\\'", "s like p escape ''",
             "s like p escape 'ab'", "s like 'ab' escape null", "s like '%%' escape '%'", "s like p escape '_'"],
    "trim": ["trim(s, 'ab ')", "trim(s, ']^-\\[.')", "trim(s, '')", "trim(s, 'Σ')", "trim(s, '\t\n')"],
    "ltrim": ["ltrim(s, '.:=')"],
    "rtrim": ["rtrim(s, ' \u00a0')"],
    "substring": ["substring(s, 0, 2)", "substring(s, -1)", "substring(s, 2, -1)", "substring(s, a, 3)",
                  "substring('abc', 9223372036854775807, 9223372036854775807)",
                  "substring(s, -9223372036854775807 - 1, 0)", "substring(s, a, b)"],
    "in": ["a in (1, div(b, a), 3)", "x in (y, 0.0 / x)", "s in ('a', p, null)", "a in (div(1, b), 2)"],
    "and": ["div(a, b) > 0 and a = 0", "a = 0 and div(a, b) > 0", "x / y > 1.0 and a = 1"],
    "or": ["div(a, b) > 0 or a = 0", "a = 0 or div(a, b) > 0"],
    "between": ["a between div(1, b) and 5", "div(1, a) between b and 5", "x between 0.0 / y and 1.0"],
    "case": ["case when a = 0 then div(1, a) else 0 end", "case when div(1, a) > 0 then 1 end",
             "case when a > 0 then div(7, a) when b > 0 then 9223372036854775807 + 1 else 0 end"],
    "coalesce": ["coalesce(b, div(1, a))", "coalesce(a * 1, 9223372036854775807 + 1)"],
    "nullif": ["nullif(a, div(1, b))", "nullif(x / 2.0, y / 2.0)"],
    "concat": ["concat(s, cast(p as string), cast(cast(q as int64) as string))"],
    "concat_op": ["s || cast(cast(p as int64) as string)"],
    "replace": ["replace(s, p, cast(cast(q as int64) as string))"],
    "eq": ["s = 'a'", "x = 0.0", "cast(x as string) = '-0.0'"],
    "cast": ["cast('2024-02-29' as date)", "cast(' 12 ' as int64)", "cast('-9223372036854775808' as int64)",
             "cast('00000000000000000000123' as int64)", "cast(9.2233720368547748e18 as int64)",
             "cast(-9.2233720368547758e18 as int64)", "cast('1.5e+3' as float64)", "cast('5.' as float64)",
             "cast('-nan' as float64)", "cast('1e-400' as float64)", "cast('2024-05-01t10:11:12.5' as timestamp)",
             "cast('2024-05-01 10:11:60' as timestamp)", "cast('0000-01-01' as date)", "cast(ceil(x) as string)",
             "cast(x * -1.0 as string)", "cast(cast(x as string) as float64)", "cast(length(s) - 3 as float64)"],
}


# ------------------------------------------------------------------------------ running a case
def _outside_float_domain(tree: Typed, table: pa.Table) -> set[int]:
    """Rows where some float64 subexpression is NaN or ±inf per the reference."""
    columns = {path: field_values(table, path) for path in fields_read(tree)}
    nodes = [n for n in walk(tree) if n.type.kind is Kind.FLOAT64]
    out = set()
    for row in range(table.num_rows):
        values = {path: column[row] for path, column in columns.items()}
        for node in nodes:
            value = evaluate_row(node, values)
            if isinstance(value, float) and not math.isfinite(value):
                out.add(row)
                break
    return out


def _non_finite_limit(value: object) -> bool:
    return isinstance(value, EngineLimit) and value.reason == "non_finite"


def _declared_limited(engine: str, tree: Typed) -> bool:
    profile = dialect_of(engine)
    return any(capability(profile, n.function).status != "faithful" for n in walk(tree) if isinstance(n, TCall))


def _edge_table(tree: Typed) -> pa.Table:
    used = {path[0] for path in fields_read(tree)}
    return edge_table(SCHEMA, used, max_rows=MAX_ROWS) if used else pa.table({"_row": [0, 1]})


def _tree_and_table(text: str, columns: dict[str, tuple[str, list[object]]]) -> tuple[Typed, pa.Table]:
    schema = Schema.from_mapping({n: t for n, (t, _) in columns.items()})
    tree = rexpr.compile(text, schema).tree
    table = pa.table({n: pa.array(v, to_arrow_type(schema.get(n)))  # type: ignore[arg-type]
                      for n, (_, v) in columns.items()})
    return tree, table


def check(engine: str, runner: Runner, tree: Typed, label: str, table: pa.Table | None = None) -> str:
    """Run the faithful SQL and compare with the reference; 'refused' only where declared."""
    try:
        item = lower(tree, engine, "faithful")
    except NotPushable as refusal:
        assert _declared_limited(engine, tree), f"{engine} refused {label} but declares it faithful: {refusal}"
        return "refused"
    table = _edge_table(tree) if table is None else table
    expected = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
    [result] = runner.evaluate(table, [SqlItem("v", item, tree.type)])
    observed = result.to_pylist()
    domain = _outside_float_domain(tree, table) if engine == "mariadb" else set()
    wrong = []
    for row, (e, o) in enumerate(zip(expected, observed)):
        if row in result.input_losses or same_result(e, o):
            continue
        if row in domain and _non_finite_limit(o):
            continue  # MariaDB's DOUBLE domain: an engine-limit row, never another value
        wrong.append((row, e, o))
    if wrong:
        shown = [(row, {n: table.column(n)[row].as_py() for n in table.column_names}, e, o) for row, e, o in wrong[:5]]
        pytest.fail(f"{engine} faithful SQL for {label} differs from the reference on {len(wrong)} rows, e.g. "
                    f"{shown}\nSQL: {item.sql(dialect=dialect_of(engine).sqlglot_dialect)[:1500]}")
    return "agrees"


@pytest.mark.parametrize("function_id", [spec.id for spec in ENTRIES])
def test_faithful_matches_reference(server: tuple[str, Runner], function_id: str) -> None:
    name, runner = server
    spec = next(s for s in ENTRIES if s.id == function_id)
    outcomes = [check(name, runner, tree, f"{function_id} {tree.type.name}") for tree in catalogue_cases(spec)]
    for text in LITERAL_CASES.get(function_id, []):
        outcomes.append(check(name, runner, rexpr.compile(text, SCHEMA).tree, repr(text)))
    status = capability(dialect_of(name), function_id).status
    if status == "not_pushable":
        assert set(outcomes) == {"refused"}, "a not_pushable function must be refused in every form"
    else:
        assert "agrees" in outcomes, f"{name} never ran {function_id}"


def test_every_function_has_both_lowerings_and_a_capability() -> None:
    for engine in ENGINES:
        profile = dialect_of(engine)
        assert set(profile.capabilities) == {s.id for s in ENTRIES}, engine
        for spec in ENTRIES:
            assert spec.id in profile.native, f"{engine} has no native lowering of {spec.id}"
            cap = capability(profile, spec.id)
            if cap.status != "not_pushable":
                assert spec.id in profile.faithful, f"{engine} has no faithful lowering of {spec.id}"
            if cap.status != "faithful":
                assert cap.reason, f"{engine} {spec.id}: a condition or refusal needs a reason"


# ------------------------------------------------------------------------------ native divergences
def _divergence_params() -> list:
    return [pytest.param(engine, i, id=f"{engine}-{i}-{d.function}")
            for engine in ENGINES for i, d in enumerate(dialect_of(engine).divergences)]


def _rows_table(fields: tuple[tuple[str, str], ...], rows: tuple[tuple[object, ...], ...]) -> tuple[Schema, pa.Table]:
    schema = Schema.from_mapping(dict(fields))
    if not fields:
        return schema, pa.table({"_row": list(range(len(rows)))})
    columns = {name: pa.array([r[i] for r in rows], to_arrow_type(schema.get(name)))  # type: ignore[arg-type]
               for i, (name, _) in enumerate(fields)}
    return schema, pa.table(columns)


@pytest.mark.parametrize(("engine_name", "index"), _divergence_params())
def test_documented_native_divergence_happens(engine_name: str, index: int) -> None:
    divergence = dialect_of(engine_name).divergences[index]
    schema, table = _rows_table(divergence.fields, divergence.rows)
    tree = rexpr.compile(divergence.expression, schema).tree
    expected = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
    runner = open_runner(engine_name)
    try:
        native = lower(tree, engine_name, "native")
        try:
            [result] = runner.evaluate(table, [SqlItem("v", native, tree.type)])
            observed = result.to_pylist()
        except Exception as failure:  # noqa: BLE001 - a statement the engine refuses also differs
            observed = [failure] * table.num_rows
        assert any(not same_result(e, o) for e, o in zip(expected, observed)), \
            f"{engine_name} native {divergence.expression!r} agrees with the reference: {observed}"
        assert check(engine_name, runner, tree, divergence.expression, table) in ("agrees", "refused")
    finally:
        runner.close()


# ------------------------------------------------------------------------------ corpora
CORPORA = load_corpora()


@pytest.mark.parametrize("corpus", CORPORA, ids=[c.name for c in CORPORA])
def test_corpus_cases_on_the_server(server: tuple[str, Runner], corpus) -> None:
    """Every corpus case with stated values, faithful SQL on the server against the value the
    case's source gives (the corpora name ISO/IEC 9075-2, IEEE 754, Unicode, RFCs, ...)."""
    name, runner = server
    items, cases = [], []
    for case in corpus.cases:
        if case.compile_error or case.expected is None:
            continue
        tree = rexpr.compile(case.expression, corpus.schema).tree
        try:
            items.append(SqlItem(f"c{case.number}", lower(tree, name, "faithful"), tree.type))
        except NotPushable:
            assert _declared_limited(name, tree), f"{name} refused {case.label} but declares it faithful"
            continue
        cases.append((case, tree))
    results = runner.evaluate(corpus.table, items)
    wrong = []
    for (case, tree), result in zip(cases, results):
        domain = _outside_float_domain(tree, corpus.table) if name == "mariadb" else set()
        for row, (e, o) in enumerate(zip(case.expected, result.to_pylist())):
            if row in result.input_losses or same_result(e, o):
                continue
            if row in domain and _non_finite_limit(o):
                continue
            wrong.append((case.label, row, e, o))
    assert not wrong, f"{name} disagrees with {corpus.name}: {wrong[:8]}"


# ------------------------------------------------------------------------------ floats
def _random_doubles(rng: random.Random, count: int) -> list[float]:
    out = []
    while len(out) < count:
        value = struct.unpack("<d", struct.pack("<Q", rng.getrandbits(64)))[0]
        if math.isfinite(value):
            out.append(value)
    return out


def _near_limit_pairs(rng: random.Random) -> tuple[list[float], list[float]]:
    """Operand pairs whose product or quotient lands near 2^1024 or 2^-1075 (the binary64
    overflow and underflow limits, IEEE 754-2019 4.3.1), plus exact ties."""
    a, b = [], []
    for _ in range(400):
        ea = rng.randint(-1074, 1023)
        x = math.ldexp(1 + rng.random(), ea) * rng.choice((1, -1))
        target = rng.choice((1024, 1023, -1075, -1074, -1076))
        eb = target - ea - 1
        y = math.ldexp(1 + rng.random(), eb) if -1074 <= eb <= 1023 else 1.0
        a += [x, x]
        b += [y, 1 / y if abs(y) > 1e-300 else 2.0]
    a += [2.0**-537, 2.0**-538 * 3, 2.0**512, 1.7976931348623157e308, 5e-324, -5e-324, 0.5, 5e-324 * 3]
    b += [2.0**-538, 2.0**-538, 2.0**512, 1.0000000000000002, 0.5, 0.5, 5e-324, 1 / 6]
    return a, b


@pytest.mark.parametrize("text", ["a + b", "a - b", "a * b", "a / b", "a % b", "power(a, b)", "a * 1e300",
                                  "a * 2.5e-300", "a / 1e-300", "7e300 / a", "a * 0.5", "a + 1.7976931348623157e308"])
def test_float_arithmetic_near_the_limits(server: tuple[str, Runner], text: str) -> None:
    # oracle: the reference's IEEE 754 binary64 arithmetic (Python float, math.fmod/pow)
    name, runner = server
    rng = random.Random(20240501)
    a, b = _near_limit_pairs(rng)
    pool = _random_doubles(rng, 300)
    a += [rng.choice(pool) for _ in range(500)]
    b += [rng.choice(pool) for _ in range(500)]
    tree, table = _tree_and_table(text, {"a": ("float64", a), "b": ("float64", b)})
    check(name, runner, tree, text, table)


def test_power_decided_exactly_at_the_limits(server: tuple[str, Runner]) -> None:
    # oracle: math.pow through the reference; exact ties such as 0.25^537.5 = 2^-1075
    name, runner = server
    rng = random.Random(3)
    xs, ys = [0.25, 2.0, 2.0, 10.0], [537.5, 1024.0, 1023.9999999999999, 308.25]
    for base in (2.0, 0.5, 10.0, 1.0000001, 0.9999999, -2.0, 1.7976931348623157e308, 5e-324, 7.5):
        for limit in (709.782712893384, -745.1332191019412, -744.44007192138):
            y0 = limit / math.log(abs(base))
            for _ in range(12):
                y = y0 * (1 + rng.uniform(-1e-6, 1e-6))
                xs.append(base)
                ys.append(float(round(y)) if base < 0 else y)
    tree, table = _tree_and_table("power(a, b)", {"a": ("float64", xs), "b": ("float64", ys)})
    check(name, runner, tree, "power(a, b)", table)


def test_round_digits_on_the_exact_binary_value(server: tuple[str, Runner]) -> None:
    # oracle: Python's decimal ROUND_HALF_UP on the exact value (round(2.675, 2) = 2.67)
    name, runner = server
    rng = random.Random(11)
    xs = _random_doubles(rng, 400) + [round(rng.uniform(-1000, 1000), rng.randint(1, 4)) for _ in range(400)]
    xs += [2.675, 1.005, 0.125, -0.125, 1.45, 2.5, -2.5, 5e-324, 1.7976931348623157e308]
    digits = [rng.randint(-320, 330) if i % 3 == 0 else rng.randint(-3, 4) for i in range(len(xs))]
    tree, table = _tree_and_table("round(a, d)", {"a": ("float64", xs), "d": ("int64", digits)})
    outcome = check(name, runner, tree, "round(a, d)", table)
    assert outcome == ("refused" if name == "mariadb" else "agrees")


def test_float_to_string_is_python_repr(server: tuple[str, Runner]) -> None:
    # oracle: the cast table's float64 -> string, Python's repr (shortest round trip,
    # IEEE 754-2019 5.12.2), through the reference
    name, runner = server
    rng = random.Random(5)
    values = _random_doubles(rng, 2000) + [rng.uniform(-1e6, 1e6) for _ in range(300)]
    values += [10.0**k for k in range(-30, 30)] + [1e15, 1e16, 123456789012345.6, 1234567890123456.7, 0.0001, 1e-5]
    tree, table = _tree_and_table("cast(a as string)", {"a": ("float64", values)})
    check(name, runner, tree, "cast(a as string)", table)


def test_string_to_float_at_the_range_limits(server: tuple[str, Runner]) -> None:
    # oracle: Python float() (correctly rounded, IEEE 754-2019 5.12.2) via the cast table:
    # a finite numeral too large is out_of_range, one too small is 0.0
    name, runner = server
    texts = ["1.7976931348623157e308", "1.7976931348623158e308", "1.797693134862315807937289714053e308",
             "1.7976931348623158079372897140530341507993413271003782693617377898044496829276475094664e308",
             "1.79769313486231580793728971405303415079934132710037826936173778980444968292764750946650e308",
             "2e308", str(2**1024 - 2**970), str(2**1024 - 2**970 - 1), "2.4703282292062327e-324",
             "2.4703282292062328e-324", "2.47032822920623272088284396434110686182529901307e-324",
             "1e-400", "-1e-400", "0e-99999", "0.000000000000000000000000000001e-300", "4e-324", "5e-324",
             "1e99999999999999999999", "-1e-99999999999999999999", "00012e-2", ".5", "5.", "+5", " 1.5 ", "\t1.5",
             "1.5\n", "1,5", "0x10", "1e", "e5", "--1", "+-1", "١٢", "1_0", "NaN", "-inf", "+Infinity", "infinit"]
    tree, table = _tree_and_table("cast(s as float64)", {"s": ("string", texts)})
    check(name, runner, tree, "cast(s as float64)", table)


# ------------------------------------------------------------------------------ text
@pytest.mark.parametrize("function", ["upper", "lower"])
def test_case_mapping_of_every_assigned_character(server: tuple[str, Runner], function: str) -> None:
    # oracle: Python's str.upper/str.lower, the full mappings of the Unicode Standard 3.13
    # (UnicodeData.txt plus SpecialCasing.txt), for every code point assigned in its version
    name, runner = server
    chars = [chr(c) for c in range(1, 0x110000) if not 0xD800 <= c < 0xE000 and unicodedata.category(chr(c)) != "Cn"]
    tree, table = _tree_and_table(f"{function}(s)", {"s": ("string", chars)})
    check(name, runner, tree, f"{function}(s)", table)


def test_special_casing_tables_are_consistent() -> None:
    # Unicode Standard 3.13: the full uppercase of a character is already upper case, and no
    # character outside the special set maps into it, so expanding before the simple mapping
    # is exact (checked with Python's str methods, the oracle for case mapping here).
    special = dict(_case_mapping.special("upper"))
    assert len(special) >= 100 and special["ß"] == "SS"
    assert all(expansion.upper() == expansion for expansion in special.values())
    assert not any(ch in special for expansion in special.values() for ch in expansion)
    assert dict(_case_mapping.special("lower")) == {"\u0130": "i\u0307"}


GREEK = ["Σ", "σ", "ς", "A", "a", "'", ".", "\u0301", " ", "\u00ad", "Ω", "ω", "1", "\u0345", "ΐ", "İ", "ß", "ᾀ",
         "ﬀ", "ŉ", "😀", "-", ":"]
TEXT = GREEK + ["%", "_", "\\", "#", "\n", "[", "]", "^", "=", "x", "b"]


def _random_texts(rng: random.Random, alphabet: list[str], count: int, longest: int) -> list[str]:
    return ["".join(rng.choice(alphabet) for _ in range(rng.randint(0, longest))) for _ in range(count)]


def test_final_sigma_in_context(server: tuple[str, Runner]) -> None:
    # oracle: Python's str.lower, which applies the Final_Sigma condition (Unicode Standard
    # 3.13, table 3-17) with the Cased and Case_Ignorable properties
    name, runner = server
    texts = _random_texts(random.Random(8), GREEK, 1500, 7)
    tree, table = _tree_and_table("lower(s)", {"s": ("string", texts)})
    check(name, runner, tree, "lower(s)", table)


def test_float_text_is_the_shortest_numeral_at_the_rounding_interval_edge(server: tuple[str, Runner]) -> None:
    # Oracle: Python's float repr, the shortest numeral that reads back as the same float64
    # (correctly rounded both ways, IEEE 754-2019 5.12.2), through the reference evaluator. From
    # 2^53 up an interval edge can be that numeral: 2.111966241167932e+17 is the edge of its
    # interval, which PostgreSQL's float8out skipped (generated seed 12, case 2065). Random
    # finite doubles of that range, both signs, and the largest double.
    rng = random.Random(12)
    values = [2.111966241167932e+17, -2.111966241167932e+17, 2.0 ** 53, 2.0 ** 63, 1e22, 1e23, sys.float_info.max]
    for _ in range(1500):
        bits = (rng.randint(53 + 1023, 2046) << 52) | rng.getrandbits(52)
        values.append(struct.unpack("<d", struct.pack("<Q", bits))[0] * rng.choice([1, -1]))
    name, runner = server
    tree, table = _tree_and_table("cast(x as string)", {"x": ("float64", values)})
    check(name, runner, tree, "cast(x as string)", table)


# Case-mapped text combined with a text column in every function that takes two texts: the
# mapped text must carry no collation of its own that could clash with the columns' (generated
# seed 11 had eight such cases refused by PostgreSQL). Oracle: Python's str.upper/str.lower
# (Unicode Standard 3.13 full case mappings) through the reference evaluator.
CASE_MAPPED_BESIDE_COLUMNS = ["starts_with(upper(s), t)", "ends_with(lower(s), t)", "position(lower(t), s)",
                              "replace(upper(s), t, lower(t))", "upper(s) = t", "lower(s) < t", "upper(s) || t = t",
                              "upper(s) like t", "trim(lower(s), t)", "coalesce(upper(s), t) = lower(t)",
                              "case when s = t then upper(s) else t end >= lower(s)"]


@pytest.mark.parametrize("text", CASE_MAPPED_BESIDE_COLUMNS)
def test_case_mapped_text_combines_with_text_columns(server: tuple[str, Runner], text: str) -> None:
    name, runner = server
    tree, table = _tree_and_table(text, {"s": ("string", ["straße", "ΣΑΣ", "Ab", None, "ab"]),
                                         "t": ("string", ["STRASSE", "σας", "ab", "x", None])})
    check(name, runner, tree, text, table)


@pytest.mark.parametrize("text", ["s like p", "s like p escape e", "s like p escape '#'", "s like p escape '\\'",
                                  "trim(s, p)", "ltrim(s, p)", "rtrim(s, p)", "position(p, s)", "replace(s, p, e)",
                                  "starts_with(s, p)", "ends_with(s, p)", "s < p", "s = p", "upper(s || p)",
                                  "substring(s, length(p) - 2, length(e))"])
def test_string_functions_on_random_text(server: tuple[str, Runner], text: str) -> None:
    name, runner = server
    rng = random.Random(13)
    texts = _random_texts(rng, TEXT, 900, 8)
    patterns = _random_texts(rng, TEXT, 900, 4)
    escapes = [rng.choice(["\\", "#", "%", "_", "a", "Σ", "", "ab", None]) for _ in texts]
    tree, table = _tree_and_table(text, {"s": ("string", texts), "p": ("string", patterns),
                                            "e": ("string", escapes)})
    check(name, runner, tree, text, table)


def test_upper_with_text_that_holds_the_dictionary_sentinel(server: tuple[str, Runner]) -> None:
    # MariaDB appends a lookup dictionary after U+10FFFF; text holding that noncharacter (and
    # lookalike dictionary entries) must still map as Python's str.upper does (Unicode 3.13)
    name, runner = server
    texts = ["ß\U0010ffff|ßXY", "\U0010ffffß", "ﬀ\U0010ffff\U0010ffff|ﬀQ|ß", "a\U0010ffff", "\U0010ffff"]
    tree, table = _tree_and_table("upper(s)", {"s": ("string", texts)})
    check(name, runner, tree, "upper(s)", table)


@pytest.mark.parametrize("text", ["p = upper(s)", "p = lower(s)", "p < trim(s, 'ab')", "p = ltrim(s, p)",
                                  "concat(p, lower(s)) = upper(p)", "ltrim(trim(s, s)) like concat(p, lower(s), s)",
                                  "upper(s) like lower(p)", "position(lower(p), upper(s)) > 0",
                                  "lower(s) in (upper(p), trim(s, 'a '))", "ends_with(upper(s), lower(p))"])
def test_text_results_combine_with_any_other_text(server: tuple[str, Runner], text: str) -> None:
    # The collations used inside a lowering (code point order, Unicode case mapping) must not
    # leak into the result: the engines refuse operations that mix two explicit collations.
    name, runner = server
    rng = random.Random(17)
    tree, table = _tree_and_table(text, {"s": ("string", _random_texts(rng, TEXT, 300, 5)),
                                         "p": ("string", _random_texts(rng, TEXT, 300, 3))})
    check(name, runner, tree, text, table)


# ------------------------------------------------------------------------------ errors
def test_two_risky_operands_are_refused_not_guessed() -> None:
    tree = rexpr.compile("div(7, b) > 1 or div(7, a) > 1", SCHEMA).tree
    for engine in ENGINES:
        with pytest.raises(NotPushable, match=r"or\(bool, bool\).*2 operands that can raise"):
            lower(tree, engine)


def test_untaken_error_never_fires(server: tuple[str, Runner]) -> None:
    # ISO/IEC 9075-2 6.12: a CASE branch no row takes is not evaluated; a constant that raises
    # must not fail while the engine plans the statement
    name, runner = server
    for text in ["case when a = 99 then div(1, 0) else a end", "coalesce(a, 9223372036854775807 + 1)",
                 "case when a = 99 then cast('x' as int64) else 0 end",
                 "case when a = 99 then 1e308 * 10.0 else 1.0 end"]:
        tree, table = _tree_and_table(text, {"a": ("int64", [1, 2])})
        expected = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
        [result] = runner.evaluate(table, [SqlItem("v", lower(tree, name), tree.type)])
        assert result.to_pylist() == expected, text


# An error beside a null: the cases (and their sources) are in engines_support.py.
@pytest.mark.parametrize("text, columns, error", NULL_BESIDE_ERROR, ids=[c[0] for c in NULL_BESIDE_ERROR])
def test_an_error_beats_a_null_operand(server: tuple[str, Runner], text: str, columns: dict, error: str) -> None:
    name, runner = server
    if columns:
        tree, table = _tree_and_table(text, columns)
    else:
        tree, table = rexpr.compile(text, {}).tree, pa.table({"_row": [0]})
    [expected] = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
    assert isinstance(expected, RowError) and expected.error.value == error
    [result] = runner.evaluate(table, [SqlItem("v", lower(tree, name), tree.type)])
    assert same_result(expected, result.to_pylist()[0]), \
        f"{name} gave {result.to_pylist()[0]!r}; SQL: {to_sql(tree, name)[:1500]}"


def test_error_class_survives_an_overflow_message_that_quotes_a_tag(server: tuple[str, Runner]) -> None:
    # A MariaDB overflow message quotes the whole expression, guards and literals included;
    # the class must still be out_of_range (ISO/IEC 9075-2 22003), not a quoted tag's class.
    name, runner = server
    for text in ["div(a, b) + 9223372036854775807", "length('rexpr:division_by_zero') + a",
                 "(a - div(a, b)) * 9223372036854775807", "exp(cast(a as float64) / cast(b as float64))",
                 "power(cast(div(a, b) as float64) + 9.0, 400.0)", "-(div(a, b) - 9223372036854775807 - 1)"]:
        tree, table = _tree_and_table(text, {"a": ("int64", [1000, 7]), "b": ("int64", [1, 7])})
        [result] = runner.evaluate(table, [SqlItem("v", lower(tree, name), tree.type)])
        expected = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
        observed = result.to_pylist()
        for e, o in zip(expected, observed):
            if isinstance(e, float) and math.isinf(e) and name == "mariadb":
                assert _non_finite_limit(o), (text, o)  # the DOUBLE domain limit, whatever the message quotes
            else:
                assert same_result(e, o), (text, e, o)


# ------------------------------------------------------------------------------ quoting and SQL text
HOSTILE = ["it's", "''", "\\", "\\'", "a\\nb", "line\nbreak", "cr\rlf", "tab\there", "\x1a", "😀 astral",
           "'; DROP TABLE rexpr_input; --", "$$", "$1", "%s", "%(x)s", "\"quoted\"", "`back`", "\u00a0", "Σ"]


def test_hostile_string_literals_round_trip(server: tuple[str, Runner]) -> None:
    name, runner = server
    values = HOSTILE + (["nul\x00inside"] if name == "mariadb" else [])
    items = []
    column = TField(("s",), DataType(Kind.STRING), SPAN)
    for i, value in enumerate(values):
        # built as a tree: the expression language itself does not take a NUL in its text
        tree = TCall("eq", (column, TLiteral(value, DataType(Kind.STRING, False), SPAN)), DataType(Kind.BOOL), SPAN)
        items.append((value, SqlItem(f"v{i}", lower(tree, name), tree.type)))
    table = pa.table({"s": pa.array(values)})
    results = runner.evaluate(table, [item for _, item in items])
    for row, ((value, _), result) in enumerate(zip(items, results)):
        got = result.to_pylist()
        # the literal equals its own row's text and no other (the values are distinct)
        assert got == [r == row for r in range(len(values))], (value, got)


def test_nul_in_a_postgres_literal_is_refused() -> None:
    column = TField(("s",), DataType(Kind.STRING), SPAN)
    tree = TCall("eq", (column, TLiteral("a\x00b", DataType(Kind.STRING, False), SPAN)), DataType(Kind.BOOL), SPAN)
    with pytest.raises(NotPushable, match="U\\+0000"):
        lower(tree, "postgres")


@pytest.mark.parametrize("engine_name", ENGINES)
def test_generated_sql_reads_back_as_one_select(engine_name: str) -> None:
    for spec in ENTRIES:
        for tree in catalogue_cases(spec):
            try:
                to_sql(tree, engine_name)  # parses the SQL back: exactly one SELECT
            except NotPushable:
                assert _declared_limited(engine_name, tree)


def test_session_settings_the_sql_assumes_are_in_force(server: tuple[str, Runner]) -> None:
    name, runner = server
    settings = runner.session_info().settings
    if name == "postgres":
        assert settings["TimeZone"] == "UTC"
        assert int(settings["extra_float_digits"]) >= 1  # shortest round-trip float8 text (PostgreSQL 12+)
        assert settings["standard_conforming_strings"] == "on"
        assert settings["server_encoding"] == "UTF8"
    else:
        modes = settings["sql_mode"].split(",")
        assert "NO_BACKSLASH_ESCAPES" not in modes and "PIPES_AS_CONCAT" not in modes
        assert settings["time_zone"] == "+00:00"
        assert settings["character_set_connection"] == "utf8mb4"


# SQL deeper than the lowering's limit is refused (NotPushable); whatever it does produce must run
# on the server (MariaDB's thread stack and PostgreSQL's stack depth limit are the server's own).
@pytest.mark.parametrize("shape", sorted(DEEP_SHAPES))
def test_the_deepest_sql_produced_runs_on_the_server(server: tuple[str, Runner], shape: str) -> None:
    name, runner = server
    deepest = deepest_lowered(shape, SCHEMA, name)
    check(name, runner, deepest, f"{shape} nested deepest", _edge_table(deepest).slice(0, 6))


# ------------------------------------------------------------------------------ engine limits
# IEEE 754-2019 §7.4: overflow rounds to ±inf (1e308 * 10, exp(1000) ≈ 1.97e434 beyond the
# binary64 maximum ≈ 1.80e308, §3.6); 'inf' and 'nan' are numerals of the cast table (docs/semantics.md)
# for ±inf and a quiet NaN (§6.2). MariaDB's DOUBLE holds none of them: such rows are engine-limit
# rows (rexpr-limit:non_finite), not out_of_range, and a finite row in the same statement keeps
# its value. Oracle for the finite rows: the reference evaluator.
MARIADB_LIMITS = ["1e308 * 10.0", "cast('inf' as float64)", "exp(1000.0)", "x * 10.0", "exp(x)",
                  "cast(s as float64)"]


def test_mariadb_non_finite_results_are_engine_limit_rows() -> None:
    runner = open_runner("mariadb")
    table = pa.table({"x": pa.array([1e308, 2.0, None, 1000.0], pa.float64()),
                      "s": pa.array(["inf", "2.5", None, "-nan"], pa.string())})
    schema = Schema.from_mapping({"x": "float64", "s": "string"})
    trees = [rexpr.compile(text, schema).tree for text in MARIADB_LIMITS]
    finite = rexpr.compile("x + 1.0", schema).tree  # beside them, in the same statement
    items = [SqlItem(f"c{i}", lower(tree, "mariadb"), tree.type) for i, tree in enumerate(trees + [finite])]
    try:
        results = runner.evaluate(table, items)
    finally:
        runner.close()
    assert results[0].statements == results[-1].statements > 1  # one batch, bisected
    for text, tree, result in zip(MARIADB_LIMITS + ["x + 1.0"], trees + [finite], results):
        expected = evaluate_table(tree, table).to_pylist()
        observed = result.to_pylist()
        non_finite = {row for row, e in enumerate(expected) if isinstance(e, float) and not math.isfinite(e)}
        assert {row for row, o in enumerate(observed) if _non_finite_limit(o)} == non_finite, (text, observed)
        assert not result.evaluation.errors, text  # never an error class
        for row in set(range(table.num_rows)) - non_finite:
            assert same_result(expected[row], observed[row]), (text, row, expected[row], observed[row])
    assert {row for row, o in enumerate(results[0].to_pylist()) if _non_finite_limit(o)} == {0, 1, 2, 3}
    assert results[-1].to_pylist() == [1e308, 3.0, None, 1001.0]  # 1e308 + 1 rounds to 1e308 (§4.3)


def test_a_pushed_filter_that_reaches_an_engine_limit_is_a_typed_error() -> None:
    from rexpr.engines.failures import EngineLimitReached
    from rexpr.engines.layout import TABLE_NAME, layout_of
    from rexpr.planner.execute import TableSource, execute
    from rexpr.planner.plan import plan

    runner = open_runner("mariadb")
    schema = Schema.from_mapping({"draught": "string", "berth": "int64"})
    table = pa.table({"draught": pa.array(["9.5", "inf", "12.0"]), "berth": pa.array([1, 2, 3], pa.int64())})
    try:
        runner._load(layout_of(table))
        p = plan("cast(draught as float64) > 10.0", schema, "mariadb")
        assert p.pushed_sql is not None
        with pytest.raises(EngineLimitReached) as info:
            execute(p, schema, TableSource("mariadb", TABLE_NAME, runner._connection))
    finally:
        runner.close()
    error = info.value
    assert (error.code, error.reason, error.engine) == ("engine_limit", "non_finite", "mariadb")
    assert "infinite" in error.message and "local" in error.message and "cast(draught as float64)" in error.message
