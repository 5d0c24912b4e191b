"""Random well-typed expressions and rows, reproducible from a seed.

The construction is written once, against one primitive: ``Choices.below(n)``, an integer in
``[0, n)`` where 0 is always the simplest option. Two front ends feed it:

- ``random_expressions(seed, schema, count, max_depth)`` and ``random_table(seed, schema, rows)``
  use a plain ``random.Random``. They are for nightly campaigns: standard library only, the same
  seed gives the same trees on every machine and every hypothesis release, and tree ``i`` of a
  seed can be rebuilt alone from ``(seed, i)`` for a repro.
- ``typed_expressions(schema, max_depth)`` and ``tables(schema)`` are hypothesis strategies that
  answer the same ``below`` calls with ``st.integers``. Hypothesis shrinks the recorded choice
  sequence toward smaller integers and fewer choices; because every choice here lists its
  simplest option first (a leaf before a call, a literal before a field, the fewest arguments,
  the first edge value, no ``else``), a failing tree shrinks to a small one with no hand-written
  shrinker. ``st.recursive``/``st.deferred`` were not used: they grow trees without regard to
  types, and filtering ill-typed trees out would reject nearly every draw, whereas here the
  wanted kind drives every choice, so each draw is well typed by construction.

Functions come from ``rexpr.catalogue.ENTRIES`` signatures and casts from ``CAST_RULES``, so a new
catalogue entry with signatures is generated with no change here. Only ``case`` (and ``cast``,
whose pairs come from the cast table) need construction code of their own.

Trees are ones the checker itself builds, so ``to_text`` followed by ``rexpr.compile`` gives an
equal tree (see ``structure``). Three checker rules shape that: a bare ``null`` takes its kind
from its position (so it is never the only operand of a polymorphic function, a cast, or the
root); ``-`` applied to a non-negative number literal is folded into a negative literal; and NaN
or an infinity has no literal syntax, so it is written ``cast('NaN' as float64)``.
The one exception is a literal -2^63, which ``rexpr.printing`` writes as a subtraction
(a printing bug, pinned by a strict xfail in tests/test_properties.py).
"""

from __future__ import annotations

import datetime as dt
import math
import random
import struct
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING, Any, Callable, Protocol, Sequence, TypeVar

import pyarrow as pa

from rexpr.catalogue import BY_ID, CAST_RULES, ENTRIES, Form, FunctionSpec
from rexpr.edge_values import pool
from rexpr.errors import Span
from rexpr.printing import literal_text
from rexpr.schema import Schema
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.types import INT64_MAX, INT64_MIN, SCALAR_KINDS, DataType, Kind
from rexpr.values import identity_key

if TYPE_CHECKING:
    from hypothesis.strategies import SearchStrategy

T = TypeVar("T")

_NOWHERE = Span(0, 0)
_MAX_EXTRA_VARIADIC = 2   # variadic calls get up to this many arguments beyond the signature's
_MAX_CASE_BRANCHES = 2
_NODE_BUDGET = 48         # calls per tree; keeps hypothesis draws well inside its buffer
_LAST_DAY = dt.date(9999, 12, 31).toordinal()
_DAY_MICROS = 86_400 * 10**6


class Choices(Protocol):
    def below(self, n: int) -> int:
        """An integer in [0, n); 0 must be the simplest choice (shrinking goes there)."""


@dataclass(frozen=True)
class RandomChoices:
    rng: random.Random

    def below(self, n: int) -> int:
        return self.rng.randrange(n)


@dataclass(frozen=True)
class DrawnChoices:
    draw: Callable[[Any], Any]

    def below(self, n: int) -> int:
        return self.draw(_integers_below(n))


@lru_cache(maxsize=256)
def _integers_below(n: int) -> "SearchStrategy[int]":
    from hypothesis import strategies as st  # a test dependency: loaded only for strategies

    return st.integers(0, n - 1)


def _pick(choices: Choices, items: Sequence[T]) -> T:
    return items[choices.below(len(items))]


def _weighted(choices: Choices, options: Sequence[tuple[int, T]]) -> T:
    r = choices.below(sum(w for w, _ in options))
    for weight, item in options:
        if r < weight:
            return item
        r -= weight
    raise AssertionError("unreachable: r < total weight")


def _zigzag(n: int) -> int:
    """0, -1, 1, -2, 2, ...: small magnitudes first, so shrinking heads for 0."""
    return (n >> 1) ^ -(n & 1)


# ------------------------------------------------------------------------------------- values
# Characters where engines disagree: ASCII wildcards and escapes, whitespace that is not U+0020,
# case mappings that change length or are context dependent, combining and astral code points.
_ALPHABET = ("a", " ", "b", "A", "%", "_", "\\", "'", "\t", "\n", "\u00a0", "\u3000", "ß", "İ", "ı",
             "Σ", "σ", "ς", "ǅ", "ﬁ", "é", "\u0301", "日", "\U0001F600", "0", "1", "-", ".", "e", "x")


def _fresh_int(c: Choices) -> int:
    shape = c.below(10)
    if shape < 4:
        return _zigzag(c.below(33))
    if shape < 5:
        return INT64_MAX - c.below(3)
    if shape < 6:
        return INT64_MIN + c.below(3)
    return _zigzag(c.below(2**64))


def _fresh_float(c: Choices) -> float:
    shape = c.below(10)
    if shape < 3:
        return _zigzag(c.below(41)) / 2          # exact halves: rounding ties
    if shape < 5:
        return _zigzag(c.below(4001)) / 1000     # decimals with no exact binary value
    if shape < 6:
        return float(_fresh_int(c))              # near 2^53, 2^63 and beyond
    # Any bit pattern: subnormals, NaN payloads of either sign, huge exponents.
    return struct.unpack("<d", struct.pack("<Q", c.below(2**64)))[0]


def _fresh_string(c: Choices) -> str:
    shape = c.below(6)
    if shape < 4:
        return "".join(_pick(c, _ALPHABET) for _ in range(c.below(6)))
    pad = " " * c.below(2)
    number = _fresh_int(c) if shape == 4 else _fresh_float(c)
    return f"{pad}{number!r}{pad}"


def _fresh_date(c: Choices) -> dt.date:
    return dt.date.fromordinal(1 + c.below(_LAST_DAY))


def _fresh_timestamp(c: Choices) -> dt.datetime:
    day = dt.datetime.combine(_fresh_date(c), dt.time())
    micros = c.below(86_400) * 10**6 if c.below(2) == 0 else c.below(_DAY_MICROS)
    return day + dt.timedelta(microseconds=micros)


_FRESH: dict[Kind, Callable[[Choices], object]] = {
    Kind.BOOL: lambda c: _pick(c, (False, True)),
    Kind.INT64: _fresh_int,
    Kind.FLOAT64: _fresh_float,
    Kind.STRING: _fresh_string,
    Kind.DATE: _fresh_date,
    Kind.TIMESTAMP: _fresh_timestamp,
}


def random_value(c: Choices, kind: Kind, nullable: bool = True) -> object:
    """A value of ``kind``: mostly from the edge pool, sometimes fresh, sometimes null."""
    shape = c.below(10 if nullable else 9)
    if shape < 6:
        return _pick(c, pool(kind, nullable=False))
    if shape < 9:
        return _FRESH[kind](c)
    return None


def _row_value(c: Choices, data_type: DataType) -> object:
    if data_type.kind is Kind.STRUCT:
        if data_type.nullable and c.below(8) == 7:
            return None
        return {name: _row_value(c, inner) for name, inner in data_type.fields}
    return random_value(c, data_type.kind, data_type.nullable)


def build_table(c: Choices, schema: Schema, rows: int) -> pa.Table:
    """``rows`` random rows for every column of ``schema`` (non-nullable columns get no nulls)."""
    data = {name: [_row_value(c, t) for _ in range(rows)] for name, t in schema.fields}
    if not data:
        return pa.table({"_row": pa.array(range(rows), pa.int64())})
    return pa.Table.from_pydict(data, schema=schema.to_arrow())


# -------------------------------------------------------------------------------- expressions
@dataclass(frozen=True)
class _Producer:
    """One way to build a call whose result has a given kind."""

    function: str
    params: tuple[Kind, ...]
    variadic: bool = False
    optional: int = 0
    # With one signature every position has a fixed kind, so a bare `null` there is typed by
    # the position; with several, the checker picks the signature from the operands' kinds.
    fixes_kinds: bool = True


def _min_arity(spec: FunctionSpec, params: int, optional: int) -> int:
    least = params - optional
    if spec.form is Form.CHAIN:
        least = max(least, 2)  # a one-operand chain prints as its operand
    if spec.id == "in":
        least = max(least, 2)  # the grammar needs the operand and at least one item
    return least


@lru_cache(maxsize=1)
def _producers() -> dict[Kind, tuple[tuple[str, tuple[_Producer, ...]], ...]]:
    """Result kind -> (function id, ways to build it), in catalogue order."""
    by_kind: dict[Kind, dict[str, list[_Producer]]] = {k: {} for k in SCALAR_KINDS}
    for spec in ENTRIES:
        several = len(spec.signatures) > 1
        for sig in spec.signatures:
            producer = _Producer(spec.id, sig.params, sig.variadic, sig.optional, not several)
            by_kind[sig.result].setdefault(spec.id, []).append(producer)
    casts = [(r.source, r.target) for r in CAST_RULES] + [(k, k) for k in SCALAR_KINDS]
    for source, target in casts:
        by_kind[target].setdefault("cast", []).append(_Producer("cast", (source,), fixes_kinds=False))
    if "case" in BY_ID:
        for kind in SCALAR_KINDS:
            by_kind[kind]["case"] = [_Producer("case", ())]
    return {k: tuple((fid, tuple(ps)) for fid, ps in table.items()) for k, table in by_kind.items()}


def _scalar_fields(schema: Schema) -> dict[Kind, tuple[TField, ...]]:
    found: dict[Kind, list[TField]] = {}

    def visit(path: tuple[str, ...], data_type: DataType, nullable: bool) -> None:
        nullable = nullable or data_type.nullable  # a null struct makes its fields null
        if data_type.kind is Kind.STRUCT:
            for name, inner in data_type.fields:
                visit(path + (name,), inner, nullable)
        elif data_type.kind in SCALAR_KINDS:
            found.setdefault(data_type.kind, []).append(
                TField(path, data_type.with_nullable(nullable), _NOWHERE))

    for name, data_type in schema.fields:
        visit((name,), data_type, False)
    return {k: tuple(v) for k, v in found.items()}


def _bare_null(node: Typed) -> bool:
    """A null literal printed as the bare keyword: the checker types it from its position."""
    return isinstance(node, TLiteral) and node.value is None and node.type.kind is Kind.BOOL


def _non_finite_text(value: float) -> str:
    return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")


class _Builder:
    """Builds one tree; holds the choice source and the remaining call budget."""

    def __init__(self, choices: Choices, schema: Schema) -> None:
        self.c = choices
        self.fields = _scalar_fields(schema)
        self.budget = _NODE_BUDGET

    def root(self, kind: Kind, max_depth: int) -> Typed:
        node = self.node(kind, max_depth)
        return self.literal_of(kind, False) if _bare_null(node) else node

    def node(self, kind: Kind, depth: int) -> Typed:
        if depth <= 0 or self.budget <= 0 or self.c.below(4) == 0:
            return self.leaf(kind)
        self.budget -= 1
        return self.call(kind, depth - 1)

    def leaf(self, kind: Kind) -> Typed:
        fields = self.fields.get(kind, ())
        if fields and self.c.below(5) >= 2:
            return _pick(self.c, fields)
        value = random_value(self.c, kind)
        return self.literal_of(kind, value)

    def literal_of(self, kind: Kind, value: object) -> Typed:
        if value is None:
            return TLiteral(None, DataType(kind, True), _NOWHERE)
        if kind is Kind.FLOAT64 and not math.isfinite(value):  # type: ignore[arg-type]
            text = TLiteral(_non_finite_text(value), DataType(Kind.STRING, False), _NOWHERE)  # type: ignore[arg-type]
            return TCall("cast", (text,), DataType(Kind.FLOAT64, False), _NOWHERE)
        return TLiteral(value, DataType(kind, False), _NOWHERE)

    def call(self, kind: Kind, depth: int) -> Typed:
        function, producers = _pick(self.c, _producers()[kind])
        if function == "case":
            return self.case(kind, depth)
        producer = _pick(self.c, producers)
        spec = BY_ID[function]
        least = _min_arity(spec, len(producer.params), producer.optional)
        most = max(least, len(producer.params) + (_MAX_EXTRA_VARIADIC if producer.variadic else 0))
        count = least + self.c.below(most - least + 1)
        params = (producer.params + (producer.params[-1],) * count)[:count]
        args = [self.node(p, depth) for p in params]
        if not producer.fixes_kinds and args and all(_bare_null(a) for a in args):
            args[0] = self.literal_of(Kind.BOOL, _pick(self.c, (False, True)))
        if function == "negate":
            folded = _fold_negation(args[0])
            if folded is not None:
                return folded
        return TCall(function, tuple(args), DataType(kind, spec.nullable([a.type for a in args])), _NOWHERE)

    def case(self, kind: Kind, depth: int) -> Typed:
        args: list[Typed] = []
        for _ in range(1 + self.c.below(_MAX_CASE_BRANCHES)):
            args += [self.node(Kind.BOOL, depth), self.node(kind, depth)]
        no_else = self.c.below(3) == 0
        args.append(TLiteral(None, DataType(kind, True), _NOWHERE) if no_else else self.node(kind, depth))
        return TCall("case", tuple(args), DataType(kind, BY_ID["case"].nullable([a.type for a in args])), _NOWHERE)


def _fold_negation(operand: Typed) -> TLiteral | None:
    """The checker reads ``-5`` as the literal -5, never as negate(5): mirror that."""
    if not isinstance(operand, TLiteral) or operand.value is None:
        return None
    value = operand.value
    if literal_text(value, operand.type.kind).startswith("-") or value == INT64_MIN:
        return None  # printed as "-(-5)", which stays a negation
    return TLiteral(-value, operand.type, _NOWHERE)  # type: ignore[operator]


def _root_kind(c: Choices) -> Kind:
    # Filters are the main use, so bool is drawn as often as all other kinds together.
    others = tuple(k for k in SCALAR_KINDS if k is not Kind.BOOL)
    return Kind.BOOL if c.below(2) == 0 else _pick(c, others)


def build_expression(c: Choices, schema: Schema, max_depth: int = 3, kind: Kind | None = None) -> Typed:
    """One well-typed tree of at most ``max_depth`` nested calls."""
    builder = _Builder(c, schema)
    return builder.root(kind or _root_kind(c), max_depth)


def _rng(seed: int, index: int, what: str) -> RandomChoices:
    # A string seed is hashed with SHA-512 by random.Random: stable across runs and platforms.
    return RandomChoices(random.Random(f"rexpr:{what}:{seed}:{index}"))


def random_expression(seed: int, index: int, schema: Schema | Any, max_depth: int = 3,
                      kind: Kind | None = None) -> Typed:
    """Tree ``index`` of campaign ``seed``: rebuildable alone, for repros."""
    return build_expression(_rng(seed, index, "tree"), Schema.of(schema), max_depth, kind)


def random_expressions(seed: int, schema: Schema | Any, count: int, max_depth: int = 3,
                       kind: Kind | None = None) -> list[Typed]:
    schema = Schema.of(schema)
    return [random_expression(seed, i, schema, max_depth, kind) for i in range(count)]


def random_table(seed: int, schema: Schema | Any, rows: int) -> pa.Table:
    return build_table(_rng(seed, 0, "rows"), Schema.of(schema), rows)


def typed_expressions(schema: Schema | Any, max_depth: int = 3,
                      kind: Kind | None = None) -> "SearchStrategy[Typed]":
    """Hypothesis strategy of well-typed trees (same construction as ``random_expressions``)."""
    from hypothesis import strategies as st

    schema = Schema.of(schema)

    @st.composite
    def trees(draw):
        return build_expression(DrawnChoices(draw), schema, max_depth, kind)

    return trees()


def tables(schema: Schema | Any, min_rows: int = 1, max_rows: int = 8) -> "SearchStrategy[pa.Table]":
    """Hypothesis strategy of Arrow tables for ``schema``, values drawn mostly from edge pools."""
    from hypothesis import strategies as st

    schema = Schema.of(schema)

    @st.composite
    def table(draw):
        c = DrawnChoices(draw)
        return build_table(c, schema, min_rows + c.below(max_rows - min_rows + 1))

    return table()


# ------------------------------------------------------------------------------- comparison
def structure(node: Typed) -> tuple:
    """A span-free form of a tree that compares floats by their bits (so -0.0 is not 0.0),
    for checking that trees built from different texts are the same."""
    if isinstance(node, TLiteral):
        return ("literal", node.type, identity_key(node.value))
    if isinstance(node, TField):
        return ("field", node.path, node.type)
    return ("call", node.function, node.type, tuple(structure(a) for a in node.args))
