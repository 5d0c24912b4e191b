"""docs/semantics.md, rendered from the catalogue and the comparison rules under a hand-written
preamble, so the reference cannot drift from the code (tests/test_docs.py compares the file).

Regenerate with ``python -m rexpr.docs_gen > docs/semantics.md``.
"""

from __future__ import annotations

import re
import sys

from rexpr import compare
from rexpr.catalogue import CAST_RULES, ENTRIES, ErrorClass, Form, FunctionSpec

# SQLSTATE of each error class (ISO/IEC 9075-2 clause 24, table of SQLSTATE class and subclass
# values; the codes are those cited in rexpr/catalogue/model.py).
SQLSTATE: dict[ErrorClass, str] = {
    ErrorClass.OUT_OF_RANGE: "22003 numeric value out of range",
    ErrorClass.DIVISION_BY_ZERO: "22012 division by zero",
    ErrorClass.INVALID_CAST: "22018 invalid character value for cast",
    ErrorClass.INVALID_DATETIME: "22007 invalid datetime format, 22008 datetime field overflow",
    ErrorClass.INVALID_ARGUMENT: "2201E invalid argument for natural logarithm, 2201F invalid argument "
                                 "for power function, 22011 substring error",
    ErrorClass.INVALID_ESCAPE: "22019 invalid escape character, 22025 invalid escape sequence",
}

# How the special forms are written; calls, operators and chains are derived from the entry.
SPECIAL_SYNTAX: dict[str, str] = {
    "is_null": "x is null, x is not null",
    "is_distinct_from": "a is distinct from b, a is not distinct from b",
    "in": "x in (a, ...), x not in (a, ...)",
    "between": "x between lo and hi, x not between lo and hi",
    "like": "s like pattern [escape e], s not like pattern [escape e]",
    "case": "case when c1 then v1 ... [else d] end, case x when a then v1 ... [else d] end",
    "cast": "cast(x as type)",
}

CATEGORY_TITLES = {
    "arithmetic": "Arithmetic", "comparison": "Comparison and predicates", "logic": "Logic",
    "conditional": "Conditional", "string": "Strings", "cast": "Casts", "datetime": "Dates and timestamps",
}

PREAMBLE = """\
# rexpr semantics

This is the one meaning of every rexpr expression. The reference evaluator in `rexpr/reference/`
is its executable form and the oracle every backend and engine is compared with. The rules
below say what is decided and why, with the published rule each follows or departs from; then
every function of the catalogue and the cast table follow, generated from `rexpr/catalogue/`
(regenerate with `python -m rexpr.docs_gen > docs/semantics.md`; a test fails when this file and
the catalogue differ).

Agreement of the Arrow and NumPy backends and of the SQL engines with this semantics is
verified on the edge-case corpora in `corpora/` and on generated expressions and rows; it is
evidence, not proof.

## Values and types

Values are null, `bool`, `int64` (two's-complement 64-bit), `float64` (IEEE 754 binary64),
`string` (Unicode scalar values; lengths and positions count code points), `date` and
`timestamp` (proleptic Gregorian calendar, microseconds, no time zone; RFC 3339 text forms
`YYYY-MM-DD` and `YYYY-MM-DD HH:MM:SS[.ffffff]`). The only implicit conversion is `int64` to
`float64` where a function needs a float; the checker writes it into the tree as an explicit
cast. Strings and numbers never convert implicitly: an error beats a guess.

## Three-valued logic, and what a filter keeps

A comparison with a null operand is unknown, the null boolean. `and`, `or` and `not` follow the
truth tables of ISO/IEC 9075-2 6.39: `false and unknown` is false, `true or unknown` is true,
`not unknown` is unknown. A filter keeps a row only when its predicate is true; false and
unknown rows are both dropped (ISO/IEC 9075-2 7.8 <where clause>). `is null` and
`is distinct from` are never unknown (8.8, 8.15).

## Errors are values

A row whose computation fails (overflow, division by zero, an invalid cast, ...) does not stop
the others: its value is an error of one of the classes below, named after the SQLSTATE classes
of ISO/IEC 9075-2 clause 24. `evaluate` returns errors beside the values, row by row; a filter
(`filter`, `mask`) over rows that include an error raises `EvaluationFailed` naming the first
such row, because silently dropping or keeping that row would be a guess.

{error_table}

How errors combine, and why:

- A function's errors propagate from its arguments, the leftmost failing argument first, before
  nulls are considered: an error beats a null.
- `and` is false if any operand is false, even when another operand is an error; `or` is true if
  any operand is true. The truth tables of 6.39 make `false and x` false for every `x`, and
  engines reorder and short-circuit operands freely, so only this rule gives one answer
  whatever the order of evaluation.
- `case` and `coalesce` are lazy: a branch not taken and arguments after the first non-null one
  are not evaluated, so their errors do not count (ISO/IEC 9075-2 6.12 defines `coalesce` as a
  `case`, and `case` evaluates only the chosen result). An error in a `when` condition that is
  reached is the result.
- `x in (a, b, ...)` is exactly `x = a or x = b or ...` (8.4) and `x between lo and hi` is exactly
  `x >= lo and x <= hi` (8.3), errors and unknowns included.

## Numbers

- **int64 overflow is an error.** `+`, `-`, `*`, unary `-`, `abs`, `div`, `round` and casts to
  `int64` compute the exact result and raise `out_of_range` when it lies outside
  [-2^63, 2^63 - 1]. Reason: wrapping around silently changes answers, and engines disagree
  (some wrap, some widen, some raise); ISO/IEC 9075-2 6.27 raises 22003.
- **`/` is float division.** Its result is always `float64`, with `int64` operands converted
  first: `7 / 2` is 3.5. Reason: engines split between truncating and true division for
  integers, so the language has one `/` and a separate `div`. Source: common practice, no source.
- **Integer division and `%` truncate toward zero.** `div(-7, 2)` is -3 and `%` takes the sign of
  the dividend: `-7 % 3` is -1, `7 % -3` is 1, so `a = div(a, b) * b + a % b`. `%` on floats is
  C's `fmod`, not the IEEE 754 remainder. Source: ISO/IEC 9075-2 6.28 MOD.
- **Division by zero is an error for integers and floats alike.** `1 / 0`, `1.0 / 0.0`,
  `1.0 / -0.0`, `x % 0` and `div(x, 0)` raise `division_by_zero`. This departs from IEEE 754-2019
  7.3 (which gives ±inf) and follows ISO/IEC 9075-2 6.27 (22012), because a filter that divides by
  zero almost always has a bug that an infinity would hide.
- **NaN is unordered.** `=`, `<`, `<=`, `>`, `>=` with a NaN operand are false and `<>` is true,
  NaN included on both sides (IEEE 754-2019 5.11). So NaN is in no `in` list, between no bounds,
  and `nullif(NaN, NaN)` is NaN. `is distinct from` treats every NaN as one value (NaN is not
  distinct from NaN), since it asks about identity, not order. `is_nan(x)` is IEEE 754-2019 5.7.2
  isNaN. NaN is not null.
- **-0.0 equals 0.0.** Comparisons ignore the sign of zero (IEEE 754-2019 5.11), but arithmetic
  keeps it (6.3): `-0.0 * 1.0` is -0.0, `sqrt(-0.0)` is -0.0, and `cast(-0.0 as string)` is
  `'-0.0'`.
- **Rounding is half away from zero, on the exact binary value.** `round(2.5)` is 3.0,
  `round(-2.5)` is -3.0, and `round(2.675, 2)` is 2.67 because 2.675 is stored as
  2.67499999999999982236431605997495353221893310546875. Casts from `float64` to `int64` round
  the same way: `cast(2.5 as int64)` is 3, `cast(0.49999999999999994 as int64)` is 0. Source:
  Python's `decimal.ROUND_HALF_UP` applied to `Decimal(x)`; ISO/IEC 9075-2 leaves rounding
  implementation-defined, and engines differ (half-even, half-up on the decimal text).
- **Out-of-range casts are errors, never saturated or wrapped.** NaN, ±inf and finite values
  outside int64 raise `out_of_range` when cast to `int64`; a numeral too large for `float64`
  (`'1e999'`) raises `out_of_range` rather than becoming inf.
- **String to number casts strip spaces only.** Leading and trailing U+0020 are removed
  (ISO/IEC 9075-2 6.13); tabs, newlines and U+00A0 are not spaces, so a tab before the digits
  makes a cast to `int64` an `invalid_cast` error. Only ASCII digits count.

## Strings

- **`trim` removes U+0020 only by default.** Without a second argument `trim`, `ltrim` and
  `rtrim` remove the space character and nothing else: not tabs, newlines, U+00A0 or U+3000
  (ISO/IEC 9075-2 6.31: the default trim character is <space>). With a second argument every
  character in it is removed from the end(s), as a set: `trim('abcba', 'ab')` is `'c'`.
- **`substring` follows ISO/IEC 9075-2 6.30.** Positions are 1-based code points; positions
  before 1 exist but hold nothing, so `substring('abc', 0, 2)` is `'a'` and `substring('abc', -1)`
  is `'abc'`; a length past the end stops at the end; a start past the end gives `''`; a negative
  length is an `invalid_argument` error (22011). Multi-byte text is counted in code points, not
  bytes: `substring('日本語', 2, 1)` is `'本'`; combining marks are separate code points.
- **Case mapping is full Unicode mapping, independent of locale.** `upper` and `lower` apply the
  Unicode Standard 3.13 toUppercase and toLowercase with SpecialCasing.txt: `upper('Straße')` is
  `'STRASSE'`, `lower('İ')` is `'i'` followed by U+0307, a final capital sigma lowers to `ς`.
  Turkish and Lithuanian tailorings never apply, and nothing is normalized.
- **Strings compare by code point.** Order is by Unicode code point (a binary, NO PAD collation
  in the terms of ISO/IEC 9075-2 8.2): case-sensitive (`'B' < 'a'`), trailing spaces significant
  (`'a' <> 'a '`), and U+1F600 sorts after U+FFFF even though its UTF-16 form sorts before.
- **`like` has no default escape.** `_` matches exactly one code point and `%` any run of code
  points, case-sensitively, over the whole string. A backslash is an ordinary character unless
  `escape '\\'` is written; the escape must be one character and may precede only `_`, `%` or
  itself, otherwise the row is an `invalid_escape` error (ISO/IEC 9075-2 8.5, 22019 and 22025).
- **`||` is null with a null operand; `concat` skips nulls.** `'a' || null` is null (ISO/IEC
  9075-2 6.31 <concatenation>); `concat('a', null, 'b')` is `'ab'` and `concat` is never null
  (common practice, no source).
- **Dates and timestamps lie in years 0001 to 9999** (ISO/IEC 9075-2 4.6.2). Arrow's date32 and
  timestamp types hold far more; an input column holding a value outside that range is refused
  before evaluation (`temporal_out_of_range`, naming the field and row) on every backend, since
  each would print or compare it differently.

## Comparing results

The differential tester and `rexpr check` count an engine's result as the reference's when, row
by row, these rules hold (`rexpr/compare.py`):

{compare_rules}
"""


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _error_table() -> str:
    lines = ["| error class | SQLSTATE (ISO/IEC 9075-2 clause 24) |", "|---|---|"]
    lines += [f"| `{e.value}` | {_cell(SQLSTATE[e])} |" for e in ErrorClass]
    return "\n".join(lines)


def compare_rules() -> list[str]:
    """The numbered rules of rexpr/compare.py's docstring, one string per rule."""
    doc = compare.__doc__ or ""
    body = doc.split("Rules", 1)[1].split(":", 1)[1]
    rules: list[str] = []
    for line in body.strip().splitlines():
        match = re.match(r"\s*\d+\.\s+(.*)", line)
        if match:
            rules.append(match.group(1))
        elif line.strip() and rules:
            rules[-1] += " " + line.strip()
    return [r.replace("``FLOAT_ULPS``", str(compare.FLOAT_ULPS)).replace("``", "`") for r in rules]


def _syntax(spec: FunctionSpec) -> str:
    if spec.form is Form.SPECIAL:
        return SPECIAL_SYNTAX.get(spec.id, spec.spelling)
    if spec.form is Form.CALL:
        return f"{spec.spelling}(...)"
    if spec.form is Form.INFIX:
        return f"a {spec.spelling} b"
    if spec.form is Form.PREFIX:
        return f"{spec.spelling} a" if spec.spelling.isalpha() else f"{spec.spelling}a"
    return f"a {spec.spelling} b {spec.spelling} ..."


def _signatures(spec: FunctionSpec) -> str:
    if spec.id == "case":
        return "conditions are `bool`; all results share one type (`int64` and `float64` mix as `float64`)"
    if spec.id == "cast":
        return "any pair listed in the cast table below"
    return ", ".join(f"`{s.describe()}`" for s in spec.signatures)


def _function_section(spec: FunctionSpec) -> list[str]:
    lines = [f"#### `{spec.id}`", "", f"- Written: `{_syntax(spec)}`", f"- Signatures: {_signatures(spec)}",
             f"- Nulls: {spec.null_behaviour}"]
    if spec.errors:
        lines.append("- Errors: " + "; ".join(f"`{r.error.value}` when {r.when}" for r in spec.errors))
    else:
        lines.append("- Errors: none of its own (argument errors propagate)")
    lines.append(f"- Semantics: {spec.semantics}")
    lines.append(f"- Standard: {spec.standard}")
    lines += [f"- Note: {note}" for note in spec.notes]
    lines.append("")
    return lines


def _functions() -> list[str]:
    lines = ["## Functions", "", f"{len(ENTRIES)} functions, by category, in catalogue order.", ""]
    for category in dict.fromkeys(spec.category for spec in ENTRIES):
        lines += [f"### {CATEGORY_TITLES.get(category, category.title())}", ""]
        for spec in ENTRIES:
            if spec.category == category:
                lines += _function_section(spec)
    return lines


def _cast_table() -> list[str]:
    lines = ["## Cast table", "",
             "A cast to the same type is the identity. Pairs not listed are type errors at compile time.", "",
             "| from | to | meaning | errors |", "|---|---|---|---|"]
    for rule in CAST_RULES:
        errors = ", ".join(f"`{e.value}`" for e in rule.errors) or "none"
        lines.append(f"| `{rule.source.value}` | `{rule.target.value}` | {_cell(rule.semantics)} | {errors} |")
    lines.append("")
    return lines


def render_semantics() -> str:
    """The full text of docs/semantics.md."""
    rules = "\n".join(f"{i}. {rule}" for i, rule in enumerate(compare_rules(), 1))
    preamble = PREAMBLE.replace("{error_table}", _error_table()).replace("{compare_rules}", rules)
    return "\n".join([preamble.rstrip("\n"), "", *_functions(), *_cast_table()]).rstrip("\n") + "\n"


if __name__ == "__main__":
    sys.stdout.write(render_semantics())
