"""The shape of a catalogue entry. Entries are data; nothing here evaluates anything."""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from typing import Callable

from rexpr.types import DataType, Kind


class ErrorClass(str, enum.Enum):
    """Classes of per-row errors, after the SQLSTATE classes of ISO/IEC 9075-2 (clause 24)."""

    OUT_OF_RANGE = "out_of_range"          # 22003 numeric value out of range
    DIVISION_BY_ZERO = "division_by_zero"  # 22012
    INVALID_CAST = "invalid_cast"          # 22018 invalid character value for cast
    INVALID_DATETIME = "invalid_datetime"  # 22007 invalid datetime format / 22008 field overflow
    INVALID_ARGUMENT = "invalid_argument"  # 2201E/2201F/22011: logarithm, power, substring, ...
    INVALID_ESCAPE = "invalid_escape"      # 22019 invalid escape character / 22025 escape sequence


class Form(enum.Enum):
    """How a function is written in the language (used to print trees back as text)."""

    CALL = "call"          # name(a, b)
    INFIX = "infix"        # a op b
    PREFIX = "prefix"      # op a
    CHAIN = "chain"        # a and b and c
    SPECIAL = "special"    # cast, case, in, between, like, is null, is distinct from


@dataclass(frozen=True)
class Signature:
    """Parameter kinds and result kind; ``variadic`` repeats the last parameter.

    ``optional`` is how many trailing parameters may be omitted.
    """

    params: tuple[Kind, ...]
    result: Kind
    variadic: bool = False
    optional: int = 0

    def describe(self) -> str:
        parts = [k.value for k in self.params]
        if self.optional:
            keep = len(parts) - self.optional
            parts = parts[:keep] + [f"[{p}]" for p in parts[keep:]]
        if self.variadic:
            parts[-1] = parts[-1] + ", ..."
        return f"({', '.join(parts)}) -> {self.result.value}"


@dataclass(frozen=True)
class ErrorRule:
    error: ErrorClass
    when: str  # one sentence: the condition that raises it


NullableRule = Callable[[list[DataType]], bool]


def nulls_propagate(args: list[DataType]) -> bool:
    return any(a.nullable for a in args)


def never_null(args: list[DataType]) -> bool:
    return False


def always_nullable(args: list[DataType]) -> bool:
    return True


@dataclass(frozen=True)
class FunctionSpec:
    """One catalogue entry: everything the checker, the backends, the docs and the tester need."""

    id: str                      # stable identifier used by every backend's dispatch table
    spelling: str                # how users write it: "+", "trim", "like", ...
    form: Form
    category: str
    signatures: tuple[Signature, ...]
    semantics: str               # the canonical rule in a sentence or two
    standard: str                # the published rule it follows, or why it departs
    null_behaviour: str          # in words, for the docs
    nullable: NullableRule = nulls_propagate
    errors: tuple[ErrorRule, ...] = ()
    precedence: int = 100        # for INFIX/PREFIX printing; higher binds tighter
    notes: tuple[str, ...] = field(default=())

    @property
    def may_error(self) -> bool:
        return bool(self.errors)
