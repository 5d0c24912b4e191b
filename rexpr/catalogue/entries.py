"""Every function the language knows, one entry each. Adding a function starts here; the
registry tests then name every backend that still lacks it."""

from __future__ import annotations

from rexpr.catalogue.model import (ErrorClass as E, ErrorRule, Form, FunctionSpec, Signature,
                                   always_nullable, never_null, nulls_propagate)
from rexpr.types import DataType, Kind

B, I, F, S, D, T = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP
ORDERED = (I, F, S, D, T, B)  # kinds with an order; listed int before float so int wins ties

P_OR, P_AND, P_NOT, P_PRED, P_CONCAT, P_ADD, P_MUL, P_NEG = 10, 20, 30, 40, 50, 60, 70, 80

SQL = "ISO/IEC 9075-2"
IEEE = "IEEE 754-2019"
PROPAGATES = "null if any argument is null"


def sig(*params: Kind, result: Kind, variadic: bool = False, optional: int = 0) -> Signature:
    return Signature(tuple(params), result, variadic, optional)


def same(kinds: tuple[Kind, ...], arity: int, result: Kind | None = None, **kw) -> tuple[Signature, ...]:
    return tuple(sig(*([k] * arity), result=result or k, **kw) for k in kinds)


OVERFLOW = ErrorRule(E.OUT_OF_RANGE, "the exact int64 result lies outside [-2^63, 2^63-1]")


def _all_nullable(args: list[DataType]) -> bool:
    return all(a.nullable for a in args)


def _case_nullable(args: list[DataType]) -> bool:
    values = args[1::2] + [args[-1]]  # then-branches and the default
    return any(a.nullable for a in values)


def _first_nullable(args: list[DataType]) -> bool:
    return args[0].nullable


ENTRIES: tuple[FunctionSpec, ...] = (
    # ---------------------------------------------------------------- arithmetic
    FunctionSpec(
        "add", "+", Form.INFIX, "arithmetic", same((I, F), 2),
        "Sum. int64 + int64 is exact and must fit in int64; float64 follows IEEE 754 addition "
        "(round to nearest even; overflow gives ±inf).",
        f"{SQL} 6.27 <numeric value expression>; {IEEE} 5.4.1", PROPAGATES,
        errors=(OVERFLOW,), precedence=P_ADD),
    FunctionSpec(
        "subtract", "-", Form.INFIX, "arithmetic", same((I, F), 2),
        "Difference, with the same rules as +.",
        f"{SQL} 6.27; {IEEE} 5.4.1", PROPAGATES, errors=(OVERFLOW,), precedence=P_ADD),
    FunctionSpec(
        "multiply", "*", Form.INFIX, "arithmetic", same((I, F), 2),
        "Product, with the same rules as +.",
        f"{SQL} 6.27; {IEEE} 5.4.1", PROPAGATES, errors=(OVERFLOW,), precedence=P_MUL),
    FunctionSpec(
        "divide", "/", Form.INFIX, "arithmetic", (sig(F, F, result=F),),
        "True division, always float64: int64 operands are converted to float64 first. A zero "
        "divisor (0.0 or -0.0) is an error even for floats; otherwise IEEE 754 division.",
        f"{SQL} 6.27 general rule: division by zero raises 'data exception - division by zero' "
        f"(22012); {IEEE} 5.4.1 otherwise",
        PROPAGATES, errors=(ErrorRule(E.DIVISION_BY_ZERO, "the divisor is zero"),), precedence=P_MUL,
        notes=("Use div(a, b) for integer division.",)),
    FunctionSpec(
        "modulo", "%", Form.INFIX, "arithmetic", same((I, F), 2),
        "Remainder of truncating division: the result has the sign of the dividend "
        "(-7 % 3 = -1, 7 % -3 = 1). For float64 this is fmod. A zero divisor is an error.",
        f"{SQL} 6.28 MOD: the result has the sign of the dividend; {IEEE} 5.3.1 remainder is NOT used",
        PROPAGATES, errors=(ErrorRule(E.DIVISION_BY_ZERO, "the divisor is zero"),), precedence=P_MUL),
    FunctionSpec(
        "negate", "-", Form.PREFIX, "arithmetic", same((I, F), 1),
        "Arithmetic negation; -(-2^63) does not fit in int64 and is an error; -0.0 stays signed.",
        f"{SQL} 6.27; {IEEE} 5.5.1 negate", PROPAGATES, errors=(OVERFLOW,), precedence=P_NEG),
    FunctionSpec(
        "div", "div", Form.CALL, "arithmetic", (sig(I, I, result=I),),
        "Integer division truncating toward zero (div(-7, 2) = -3), so a = div(a, b) * b + a % b. "
        "div(-2^63, -1) overflows.",
        f"common practice, no source; consistent with {SQL} 6.28 MOD", PROPAGATES,
        errors=(ErrorRule(E.DIVISION_BY_ZERO, "the divisor is zero"), OVERFLOW)),
    FunctionSpec(
        "abs", "abs", Form.CALL, "arithmetic", same((I, F), 1),
        "Absolute value; abs(-2^63) overflows; abs(-0.0) = 0.0; abs(NaN) = NaN.",
        f"{SQL} 6.28 <absolute value expression>; {IEEE} 5.5.1 abs", PROPAGATES, errors=(OVERFLOW,)),
    FunctionSpec(
        "round", "round", Form.CALL, "arithmetic",
        (sig(I, I, result=I, optional=1), sig(F, I, result=F, optional=1)),
        "Round to `digits` decimal places (default 0; negative rounds left of the point), half away "
        "from zero, judged on the exact binary value (round(2.675, 2) = 2.67 because 2.675 is "
        "stored as 2.67499999...). int64 input stays int64. NaN and ±inf are returned unchanged; a "
        "float64 result too large to represent becomes ±inf (IEEE 754 overflow), as in arithmetic.",
        "decimal.ROUND_HALF_UP on the exact value (Python decimal module); the SQL standard leaves "
        "rounding implementation-defined", PROPAGATES,
        errors=(ErrorRule(E.OUT_OF_RANGE, "an int64 result does not fit"),)),
    FunctionSpec(
        "floor", "floor", Form.CALL, "arithmetic", same((I, F), 1),
        "Largest integral value not greater than x; int64 input is returned unchanged; floor(-0.0) = -0.0.",
        f"{SQL} 6.28 <floor function>; {IEEE} 5.9 roundToIntegralTowardNegative", PROPAGATES),
    FunctionSpec(
        "ceil", "ceil", Form.CALL, "arithmetic", same((I, F), 1),
        "Smallest integral value not less than x; int64 input is returned unchanged; ceil(-0.5) = -0.0.",
        f"{SQL} 6.28 <ceiling function>; {IEEE} 5.9 roundToIntegralTowardPositive", PROPAGATES),
    FunctionSpec(
        "sqrt", "sqrt", Form.CALL, "arithmetic", (sig(F, result=F),),
        "Square root, correctly rounded; sqrt(-0.0) = -0.0; a negative argument is an error; sqrt(NaN) = NaN.",
        f"{SQL} 6.28 <square root>; {IEEE} 5.4.1 squareRoot", PROPAGATES,
        errors=(ErrorRule(E.INVALID_ARGUMENT, "the argument is less than zero"),)),
    FunctionSpec(
        "power", "power", Form.CALL, "arithmetic", (sig(F, F, result=F),),
        "x raised to y in float64. power(x, 0) = 1 for every x, NaN included. 0 to a negative power "
        "and a negative base with a non-integral exponent are errors; overflow gives inf.",
        f"{SQL} 6.28 <power function> (data exception - invalid argument for power function, 2201F)",
        PROPAGATES,
        errors=(ErrorRule(E.INVALID_ARGUMENT, "base 0 with a negative exponent, or a negative base "
                                              "with a non-integral exponent"),)),
    FunctionSpec(
        "ln", "ln", Form.CALL, "arithmetic", (sig(F, result=F),),
        "Natural logarithm; zero or negative arguments are errors; ln(inf) = inf; ln(NaN) = NaN.",
        f"{SQL} 6.28 <natural logarithm> (invalid argument for natural logarithm, 2201E)", PROPAGATES,
        errors=(ErrorRule(E.INVALID_ARGUMENT, "the argument is zero or negative"),)),
    FunctionSpec(
        "exp", "exp", Form.CALL, "arithmetic", (sig(F, result=F),),
        "e raised to x; overflow gives inf, exp(-inf) = 0.",
        f"{SQL} 6.28 <exponential function>; {IEEE} 9.2 exp", PROPAGATES),
    FunctionSpec(
        "is_nan", "is_nan", Form.CALL, "arithmetic", (sig(F, result=B),),
        "True exactly when x is a NaN (any payload, either sign).",
        f"{IEEE} 5.7.2 isNaN", PROPAGATES),
    # ---------------------------------------------------------------- comparison
    *(FunctionSpec(
        fid, op, Form.INFIX, "comparison", same(ORDERED, 2, B),
        f"{text} Numbers compare by value (int64 is widened to float64 against a float64); NaN is "
        "unordered, so every comparison with NaN is false except <>, which is true; -0.0 = 0.0. "
        "Strings compare by Unicode code point, case-sensitively, trailing spaces significant. "
        "false < true.",
        f"{SQL} 8.2 <comparison predicate> with a binary, NO PAD collation; {IEEE} 5.11 comparison",
        PROPAGATES, precedence=P_PRED)
      for fid, op, text in (("eq", "=", "Equality."), ("ne", "<>", "Inequality; also written !=."),
                            ("lt", "<", "Less than."), ("le", "<=", "Less than or equal."),
                            ("gt", ">", "Greater than."), ("ge", ">=", "Greater than or equal."))),
    FunctionSpec(
        "is_distinct_from", "is distinct from", Form.SPECIAL, "comparison", same(ORDERED, 2, B),
        "Null-safe inequality: two nulls are not distinct, a null and a value are; NaN is not "
        "distinct from NaN; -0.0 is not distinct from 0.0. Never null.",
        f"{SQL} 8.15 <distinct predicate>; NaN treated as one value (IEEE 754 leaves identity to the user)",
        "never null", nullable=never_null, precedence=P_PRED),
    FunctionSpec(
        "is_null", "is null", Form.SPECIAL, "comparison",
        tuple(sig(k, result=B) for k in ORDERED),
        "True when the value is null. NaN is not null. Never null.",
        f"{SQL} 8.8 <null predicate>", "never null", nullable=never_null, precedence=P_PRED),
    # ---------------------------------------------------------------- logic
    FunctionSpec(
        "and", "and", Form.CHAIN, "logic", (sig(B, result=B, variadic=True),),
        "Three-valued conjunction: false if any operand is false, else null if any is null, else "
        "true. A false operand also absorbs an error in another operand (order does not matter).",
        f"{SQL} 6.39 <boolean value expression>, truth table for AND",
        "false beats null; null beats true", precedence=P_AND),
    FunctionSpec(
        "or", "or", Form.CHAIN, "logic", (sig(B, result=B, variadic=True),),
        "Three-valued disjunction: true if any operand is true, else null if any is null, else "
        "false. A true operand also absorbs an error in another operand.",
        f"{SQL} 6.39 <boolean value expression>, truth table for OR",
        "true beats null; null beats false", precedence=P_OR),
    FunctionSpec(
        "not", "not", Form.PREFIX, "logic", (sig(B, result=B),),
        "Three-valued negation: not null is null.",
        f"{SQL} 6.39 <boolean value expression>, truth table for NOT", PROPAGATES, precedence=P_NOT),
    # ---------------------------------------------------------------- conditional
    FunctionSpec(
        "coalesce", "coalesce", Form.CALL, "conditional", same(ORDERED, 1, variadic=True),
        "The first non-null argument, evaluated left to right; later arguments are not evaluated "
        "(their errors do not count) once a non-null value is found.",
        f"{SQL} 6.12 <case abbreviation>: COALESCE is a CASE",
        "null only when every argument is null", nullable=_all_nullable),
    FunctionSpec(
        "nullif", "nullif", Form.CALL, "conditional", same(ORDERED, 2),
        "Null when a = b (with = as defined here, so nullif(NaN, NaN) is NaN), else a.",
        f"{SQL} 6.12 <case abbreviation>: NULLIF(a, b) is CASE WHEN a = b THEN NULL ELSE a END",
        "null when the arguments are equal or the first is null", nullable=always_nullable),
    FunctionSpec(
        "case", "case", Form.SPECIAL, "conditional", (),
        "The value of the first branch whose condition is true (null and false conditions are "
        "skipped), else the else value, else null. Branches not taken are not evaluated, so their "
        "errors do not count.",
        f"{SQL} 6.12 <case expression>", "null when no branch is taken and there is no else, or "
        "the chosen value is null", nullable=_case_nullable),
    FunctionSpec(
        "in", "in", Form.SPECIAL, "comparison", same(ORDERED, 1, B, variadic=True),
        "x in (a, b, ...) is x = a or x = b or ...: true if any is equal, else null if x or any "
        "item is null, else false. NaN is in no list.",
        f"{SQL} 8.4 <in predicate>", "see the semantics", nullable=nulls_propagate, precedence=P_PRED),
    FunctionSpec(
        "between", "between", Form.SPECIAL, "comparison", same(ORDERED, 3, B),
        "x between lo and hi is x >= lo and x <= hi (not symmetric: lo > hi matches nothing).",
        f"{SQL} 8.3 <between predicate>", "three-valued, as the and of two comparisons",
        precedence=P_PRED),
    FunctionSpec(
        "like", "like", Form.SPECIAL, "string", (sig(S, S, S, result=B, optional=1),),
        "Whole-string match where _ matches one code point and % any run of code points, "
        "case-sensitively. There is no escape character unless one is given with escape; the escape "
        "must be one character and may precede only _, % or itself.",
        f"{SQL} 8.5 <like predicate> (22019 invalid escape character, 22025 invalid escape sequence)",
        PROPAGATES,
        errors=(ErrorRule(E.INVALID_ESCAPE, "the escape is not one character, or is followed by "
                                            "anything but _, % or itself"),), precedence=P_PRED),
    # ---------------------------------------------------------------- strings
    *(FunctionSpec(
        fid, fid, Form.CALL, "string", (sig(S, S, result=S, optional=1),),
        f"Remove every {side} character that is in `characters` (a set, not a prefix string; "
        "default: the space U+0020 only, not tabs, newlines or U+00A0).",
        f"{SQL} 6.31 <trim function>: the default trim character is <space>; a set of characters "
        "is an extension of the standard's single trim character", PROPAGATES)
      for fid, side in (("trim", "leading and trailing"), ("ltrim", "leading"), ("rtrim", "trailing"))),
    FunctionSpec(
        "substring", "substring", Form.CALL, "string", (sig(S, I, I, result=S, optional=1),),
        "Code points from position start (1-based) for length code points. Positions before 1 "
        "exist but are empty: substring('abc', 0, 2) = 'a', substring('abc', -1) = 'abc'. A "
        "negative length is an error; past the end gives the empty string.",
        f"{SQL} 6.30 <character substring function> (22011 substring error)", PROPAGATES,
        errors=(ErrorRule(E.INVALID_ARGUMENT, "length is negative"),)),
    FunctionSpec(
        "upper", "upper", Form.CALL, "string", (sig(S, result=S),),
        "Full Unicode uppercase mapping (SpecialCasing included: 'ß' becomes 'SS'), independent of locale.",
        "The Unicode Standard 3.13 toUppercase(X); as Python's str.upper", PROPAGATES),
    FunctionSpec(
        "lower", "lower", Form.CALL, "string", (sig(S, result=S),),
        "Full Unicode lowercase mapping, independent of locale (final sigma included).",
        "The Unicode Standard 3.13 toLowercase(X); as Python's str.lower", PROPAGATES),
    FunctionSpec(
        "length", "length", Form.CALL, "string", (sig(S, result=I),),
        "Number of Unicode code points (not bytes, not grapheme clusters: 'e' + U+0301 is 2).",
        f"{SQL} 6.33 CHAR_LENGTH in CHARACTERS", PROPAGATES),
    FunctionSpec(
        "octet_length", "octet_length", Form.CALL, "string", (sig(S, result=I),),
        "Number of bytes in the UTF-8 encoding.",
        f"{SQL} 6.33 OCTET_LENGTH; RFC 3629 UTF-8", PROPAGATES),
    FunctionSpec(
        "concat_op", "||", Form.INFIX, "string", (sig(S, S, result=S),),
        "Concatenation; null if either side is null.",
        f"{SQL} 6.31 <concatenation>", PROPAGATES, precedence=P_CONCAT),
    FunctionSpec(
        "concat", "concat", Form.CALL, "string", (sig(S, result=S, variadic=True),),
        "Concatenation of any number of strings, skipping nulls; never null (all nulls give '').",
        "common practice, no source (not in ISO/IEC 9075; null-skipping as most engines' concat)",
        "never null: null arguments count as ''", nullable=never_null),
    FunctionSpec(
        "replace", "replace", Form.CALL, "string", (sig(S, S, S, result=S),),
        "Replace every non-overlapping occurrence of `search`, scanning left to right; an empty "
        "`search` leaves the string unchanged.",
        "common practice, no source (not in ISO/IEC 9075)", PROPAGATES),
    FunctionSpec(
        "position", "position", Form.CALL, "string", (sig(S, S, result=I),),
        "position(needle, haystack): 1-based code-point index of the first occurrence, 0 when "
        "absent, 1 for an empty needle.",
        f"{SQL} 6.33 <position expression>", PROPAGATES),
    FunctionSpec(
        "starts_with", "starts_with", Form.CALL, "string", (sig(S, S, result=B),),
        "True when s begins with the prefix, code point for code point; every string starts with ''.",
        "common practice, no source", PROPAGATES),
    FunctionSpec(
        "ends_with", "ends_with", Form.CALL, "string", (sig(S, S, result=B),),
        "True when s ends with the suffix, code point for code point; every string ends with ''.",
        "common practice, no source", PROPAGATES),
    # ---------------------------------------------------------------- casts and dates
    FunctionSpec(
        "cast", "cast", Form.SPECIAL, "cast", (),
        "Conversion between scalar types; see the cast table in the semantics reference.",
        f"{SQL} 6.13 <cast specification>", PROPAGATES,
        errors=(ErrorRule(E.INVALID_CAST, "a string is not a valid literal of the target type"),
                ErrorRule(E.OUT_OF_RANGE, "the value does not fit in the target type, or is NaN or "
                                          "infinite for int64"),
                ErrorRule(E.INVALID_DATETIME, "a string is not a valid date or timestamp"))),
    *(FunctionSpec(
        fid, fid, Form.CALL, "datetime", (sig(D, result=I), sig(T, result=I)),
        f"The {fid} field of a date or timestamp (proleptic Gregorian calendar).",
        f"{SQL} 6.32 <extract expression>", PROPAGATES)
      for fid in ("year", "month", "day")),
)
