"""When two results count as the same. Each rule is a small function, documented and tested.

Rules (docs/semantics.md, "Comparing results"):
1. null equals null, and only null.
2. Errors are equal when their error class is equal (details are free text and ignored).
3. NaN equals NaN, whatever its sign or payload (IEEE 754 6.2: payloads are not portable).
4. -0.0 equals 0.0: no filter can tell them apart except through a cast to string, and the
   string result is compared as a string.
5. Other floats are equal within ``FLOAT_ULPS`` units in the last place, because engines'
   math libraries may differ by an ulp in ln, exp, power (IEEE 754 9.2 recommends, but does
   not require, correct rounding of those). Arithmetic, sqrt and casts are exact in practice.
6. Everything else compares with Python ==, after the type check: a bool is never equal to
   an int, an int never to a float.
7. The result type is the expression's: a local backend must return its values in the
   canonical Arrow type (an int32 column for an int64 expression is a bug even when every
   value compares equal); SQL engines' values are mapped to it, and what does not map
   losslessly is reported per row (``type_mismatches``).
8. An engine-limit row (``EngineLimit``: the engine says it cannot represent
   a value the row reaches) is "not compared, the engine cannot represent the result" only
   when the reference, on that row, reaches a value of the kind the limit names: a NaN for
   ``nan``, a NaN or ±inf for ``non_finite`` (IEEE 754 §6.2, §7.4), a text containing U+0000
   for ``nul``, at the result, an input or any sub-expression (``limit_covered``). Such
   rows are counted and named in the case's reason, like input losses. A limit where the
   reference reaches no such value, or an unknown reason, is a disagreement: the engine (or
   our lowering) failed a row it should have computed. Sub-expressions are evaluated on the
   whole row, so a limit inside a CASE branch the row does not take still counts as covered.
"""

from __future__ import annotations

import math
import struct
from typing import Iterable

from rexpr.evaluation import Evaluation
from rexpr.schema import to_arrow_type
from rexpr.types import DataType
from rexpr.values import EngineLimit, RowError

FLOAT_ULPS = 2


def _ordered_bits(x: float) -> int:
    bits = struct.unpack("<q", struct.pack("<d", x))[0]
    return bits if bits >= 0 else -(bits & 0x7FFFFFFFFFFFFFFF)


def ulp_distance(a: float, b: float) -> int:
    return abs(_ordered_bits(a) - _ordered_bits(b))


def floats_agree(a: float, b: float, ulps: int = FLOAT_ULPS) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    if a == b:  # covers -0.0 == 0.0 and equal infinities
        return True
    if math.isinf(a) or math.isinf(b):
        return False
    return ulp_distance(a, b) <= ulps


def _non_finite(value: object) -> bool:
    return isinstance(value, float) and not math.isfinite(value)


def _nan(value: object) -> bool:
    return isinstance(value, float) and math.isnan(value)


def _has_nul(value: object) -> bool:
    return isinstance(value, str) and "\x00" in value


# Limit reason -> the reference values it covers (rule 8).
LIMIT_COVERS = {"nan": _nan, "non_finite": _non_finite, "nul": _has_nul}


def limit_covered(limit: EngineLimit, reached: Iterable[object]) -> bool:
    """Rule 8: does one of the values the reference reaches on the row (result, inputs and
    sub-expressions) explain ``limit``?"""
    covers = LIMIT_COVERS.get(limit.reason)
    return covers is not None and any(covers(value) for value in reached)


def same_result(expected: object, observed: object) -> bool:
    if isinstance(expected, EngineLimit) or isinstance(observed, EngineLimit):
        return False  # rule 8: a limit row is set aside before comparing, never equal to a value
    if expected is None or observed is None:
        return expected is None and observed is None
    if isinstance(expected, RowError) or isinstance(observed, RowError):
        return (isinstance(expected, RowError) and isinstance(observed, RowError)
                and expected.error == observed.error)
    if type(expected) is not type(observed):
        return False
    if isinstance(expected, float):
        return floats_agree(expected, observed)  # type: ignore[arg-type]
    return expected == observed


def row_differences(expected: list[object], observed: list[object], limit: int = 1000) -> list[tuple[int, object, object]]:
    """(row, expected, observed) for each row that differs, up to ``limit``; a length mismatch is
    reported as row -1."""
    out: list[tuple[int, object, object]] = []
    for row, (e, o) in enumerate(zip(expected, observed)):
        if not same_result(e, o):
            out.append((row, e, o))
            if len(out) >= limit:
                return out
    if len(expected) != len(observed):
        out.append((-1, f"{len(expected)} rows", f"{len(observed)} rows"))
    return out


def result_type_problem(expected_type: DataType, observed: Evaluation) -> str | None:
    """Rule 7: what is wrong with the type of ``observed``, or None."""
    if observed.type.kind is not expected_type.kind:
        return f"result type {observed.type.name}, expected {expected_type.name}"
    want = to_arrow_type(expected_type)
    if not observed.values.type.equals(want):
        return f"values are Arrow {observed.values.type}, expected {want}"
    return None
