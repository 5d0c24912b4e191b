"""Optional compiled path of the auto backend: a numeric subtree as one fused loop (numba).

Where a whole subtree is numeric and boolean work (the nodes ``auto`` runs in NumPy), NumPy
still makes one pass over memory per node, and a filter like ``price * qty > 100.0 and
coalesce(discount, 0) < 0.3`` streams several block-sized intermediates. This module writes
the subtree as Python source for one loop over the rows, where every node is a few scalar
statements, and numba compiles it (``nogil``: the blocks still run on both cores).

The rules are the reference's (rexpr/reference/), written row by row exactly as
``auto_vectors`` writes them for a block: each node's result is a value and a state, 0 for a
value, -1 for null, or an error code (``rexpr.evaluation.ERROR_CODES``); errors come from the
leftmost failing argument, then nulls, then the function's own errors; ``and``/``or`` let an
absorbing operand beat an error; ``case`` and ``coalesce`` only evaluate what a row reaches.
Floats follow IEEE 754 (numba's default, no fast-math): NaN compares false, ``-0.0 == 0.0``.

What depends on the data is written without branches where that is safe: and/or with ``&``
and ``|``, a state picked by a select, a small case or coalesce branch computed on every row
and taken only where a row reaches it (its error is a state like any other). A branch on
random data mispredicts about half the time; the case filter of bench/bench_auto.py ran at
half its speed with one.

numba is optional (``pip install 'rexpr[jit]'``). Compiling a kernel takes about half a second
to a second, so the backend compiles only for inputs of at least ``MIN_ROWS`` rows; kernels
are kept per process and, where the cache directory is writable, on disk (numba's cache,
keyed by the generated source), so the next process loads them in milliseconds.
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import sys
import tempfile
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pyarrow as pa

from rexpr.backends.auto_vectors import DIVISION_BY_ZERO, DTYPES, INVALID_ARGUMENT, OUT_OF_RANGE, runs_in_numpy
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.types import Kind

MIN_ROWS = 1_000_000  # below this a kernel's compile time is more than it can save
MAX_NODES = 200  # a larger subtree's compile time grows past any saving
MIN_CALLS = 3  # with two (price * qty > 100.0) NumPy's kernels were as fast (bench/bench_auto.py)
MAX_NESTING = 40  # case/coalesce branches nest as blocks; Python's parser allows 100 indents
ENV_SWITCH = "REXPR_JIT"  # "0" turns the compiled path off
ENV_CACHE = "REXPR_JIT_CACHE"  # the directory for compiled kernels (default: the user cache)
MAX_CACHED = 128  # kernels kept on disk (about 200 KB each with numba's files); older ones are pruned

_NO_BITS = np.zeros(1, dtype=np.uint8)
_NO_BITS.setflags(write=False)
_NO_OUT = np.empty(1, dtype=bool)  # the keep mode (bool predicates only) writes no values
_ZERO = {Kind.BOOL: "False", Kind.INT64: "np.int64(0)", Kind.FLOAT64: "np.float64(0.0)"}
_COMPARE = {"eq": "==", "ne": "!=", "lt": "<", "le": "<=", "gt": ">", "ge": ">="}
_FLOAT_BINARY = {"add": "+", "subtract": "-", "multiply": "*"}


def available() -> bool:
    """Whether numba can be imported and the compiled path is not switched off."""
    if os.environ.get(ENV_SWITCH, "1") == "0":
        return False
    return importlib.util.find_spec("numba") is not None


# ------------------------------------------------------------------------------ which subtrees
def _node_supported(node: Typed) -> bool:
    """The nodes the kernels write: a subset of what the NumPy path runs (their fallback)."""
    if not runs_in_numpy(node):
        return False
    if isinstance(node, TLiteral):
        return node.value is None or isinstance(node.value, (bool, int, float))
    if isinstance(node, TField):
        return True
    assert isinstance(node, TCall)
    kinds = [a.type.kind for a in node.args]
    fid, kind = node.function, node.type.kind
    if fid == "cast":
        return kinds[0] is kind or (kinds[0], kind) in _CASTS
    if fid in ("floor", "ceil"):
        return kinds[0] is kind
    if kind is Kind.INT64 and fid in ("add", "subtract", "multiply", "negate", "abs"):
        return all(k is Kind.INT64 for k in kinds)
    if kind is Kind.FLOAT64 and fid in ("add", "subtract", "multiply", "divide", "negate", "abs", "sqrt"):
        return all(k is Kind.FLOAT64 for k in kinds)
    return fid in _COMPARE or fid in ("is_distinct_from", "nullif", "in", "between", "and", "or", "not",
                                      "is_null", "coalesce", "case", "is_nan")


def fusable(node: Typed, min_calls: int = 1) -> bool:
    """Whether the whole subtree can be one kernel: at most ``MAX_NODES`` nodes, at least three
    and ``min_calls`` calls (``MIN_CALLS`` is what repays a kernel)."""
    if not isinstance(node, TCall):
        return False
    count = calls = 0
    stack: list[tuple[Typed, int]] = [(node, 0)]
    while stack:
        current, nesting = stack.pop()
        count += 1
        if count > MAX_NODES or nesting > MAX_NESTING or not _node_supported(current):
            return False
        if isinstance(current, TCall):
            calls += 1
            lazy = current.function in ("coalesce", "case")  # each later argument is one block deeper
            step = (lambda i: i // 2 + 1) if current.function == "case" else (lambda i: i + 1)
            stack.extend((arg, nesting + (step(i) if lazy else 0)) for i, arg in enumerate(current.args))
    return count >= 3 and calls >= min_calls


# ------------------------------------------------------------------------------ source
class _Writer:
    """Emits the loop body: each node's value and state into fresh local names."""

    def __init__(self) -> None:
        self.lines: list[str] = []
        self.constants: list[str] = []
        self.fields: dict[tuple[str, ...], tuple[int, TField]] = {}
        self.count = 0
        self.depth = 2

    def fresh(self) -> tuple[str, str]:
        self.count += 1
        return f"v{self.count}", f"s{self.count}"

    def line(self, text: str) -> None:
        self.lines.append("    " * self.depth + text)

    def constant(self, value: object, kind: Kind) -> str:
        name = f"C{len(self.constants)}"
        if kind is Kind.FLOAT64:
            assert isinstance(value, float)
            text = f"np.float64(float.fromhex({float(value).hex()!r}))"  # exact, and NaN and inf too
        elif kind is Kind.INT64:
            text = f"np.int64({int(value)})"  # type: ignore[call-overload]
        else:
            text = repr(bool(value))
        self.constants.append(f"{name} = {text}")
        return name

    # -------------------------------------------------------------- nodes
    def emit(self, node: Typed) -> tuple[str, str]:
        if isinstance(node, TLiteral):
            v, s = self.fresh()
            if node.value is None:
                self.line(f"{v} = {_ZERO[node.type.kind]}; {s} = -1")
            else:
                self.line(f"{v} = {self.constant(node.value, node.type.kind)}; {s} = 0")
            return v, s
        if isinstance(node, TField):
            return self._field(node)
        assert isinstance(node, TCall)
        fid = node.function
        if fid in ("and", "or"):
            return self._logic([self.emit(a) for a in node.args], absorbing=fid == "or")
        if fid == "in":
            x = self.emit(node.args[0])
            tests = [self._plain([x, self.emit(item)], Kind.BOOL, lambda a, b, v, s: [f"{v} = {a} == {b}"])
                     for item in node.args[1:]]
            return self._logic(tests, absorbing=True)
        if fid == "between":
            x, low, high = (self.emit(a) for a in node.args)
            return self._logic([self._plain([x, low], Kind.BOOL, lambda a, b, v, s: [f"{v} = {a} >= {b}"]),
                                self._plain([x, high], Kind.BOOL, lambda a, b, v, s: [f"{v} = {a} <= {b}"])],
                               absorbing=False)
        if fid == "is_null":
            return self._is_null(self.emit(node.args[0]))
        if fid == "is_distinct_from":
            return self._distinct(self.emit(node.args[0]), self.emit(node.args[1]), node.args[0].type.kind)
        if fid == "nullif":
            return self._nullif(self.emit(node.args[0]), self.emit(node.args[1]), node.type.kind)
        if fid == "coalesce":
            return self._coalesce(node)
        if fid == "case":
            return self._case(node)
        if fid == "cast" and node.args[0].type.kind is node.type.kind:
            return self.emit(node.args[0])
        if fid in ("floor", "ceil") and node.type.kind is Kind.INT64:
            return self.emit(node.args[0])  # int64 input is returned unchanged
        args = [self.emit(a) for a in node.args]
        if fid == "multiply" and node.type.kind is Kind.INT64:
            literal = [isinstance(a, TLiteral) and a.value is not None for a in node.args]
            if any(literal):
                factor = node.args[0 if literal[0] else 1]
                assert isinstance(factor, TLiteral)
                return self._plain(args, Kind.INT64, self._multiply_by(int(factor.value), literal[0]))  # type: ignore[arg-type]
        return self._plain(args, node.type.kind, _kernel(node))

    def _multiply_by(self, c: int, literal_first: bool) -> Callable[..., list[str]]:
        """x * c for one int64 literal c: the exact product fits iff x lies in a range worked
        out here with Python's unbounded integers, so no row divides."""
        if c == 0:
            return lambda a, b, v, s: [f"{v} = np.int64(0)"]
        low, high = (-(2 ** 63), 2 ** 63 - 1) if c > 0 else (2 ** 63 - 1, -(2 ** 63))
        least, most = -(-low // c), high // c  # ceil(low / c), floor(high / c)
        # A bound past int64 holds for every x (c = 1, or -1 and the upper one).
        lo = self.constant(least, Kind.INT64) if least > -(2 ** 63) else None
        hi = self.constant(most, Kind.INT64) if most < 2 ** 63 - 1 else None

        def body(a: str, b: str, v: str, s: str) -> list[str]:
            x = b if literal_first else a
            tests = ([f"{x} < {lo}"] if lo else []) + ([f"{x} > {hi}"] if hi else [])
            if not tests:
                return [f"{v} = {a} * {b}"]
            return [f"if {' or '.join(tests)}: {s} = {OUT_OF_RANGE}", f"else: {v} = {a} * {b}"]

        return body

    def _field(self, node: TField) -> tuple[str, str]:
        if node.path not in self.fields:
            self.fields[node.path] = (len(self.fields), node)
        k, kind = self.fields[node.path][0], node.type.kind
        v, s = self.fresh()
        bit = f"(o{k} + i)"
        self.line(f"{s} = 0 if n{k} == 0 or (m{k}[{bit} >> 3] >> ({bit} & 7)) & 1 else -1")
        if kind is Kind.BOOL:
            self.line(f"{v} = ((d{k}[{bit} >> 3] >> ({bit} & 7)) & 1) == 1")
        else:
            self.line(f"{v} = d{k}[i]")
        return v, s

    def _plain(self, args: list[tuple[str, str]], kind: Kind,
               body: Callable[..., list[str]]) -> tuple[str, str]:
        """A null-propagating call: the leftmost error, else null if any argument is, else
        the function's own statements (which may set an error state)."""
        v, s = self.fresh()
        statements = body(*[va for va, _ in args], v, s)
        if len(statements) == 1 and not statements[0].startswith("if "):
            # One statement that cannot fail: computed on every row (on a null row's garbage
            # too, harmless: no float traps, no int64 arithmetic here can overflow) and the
            # state selected, so no branch follows the data's nulls.
            self.line(statements[0])
            self.line(f"{s} = {_state(args)}")
            return v, s
        self.line(f"{v} = {_ZERO[kind]}; {s} = 0")
        first = True
        for _, sa in args:
            self.line(f"{'if' if first else 'elif'} {sa} > 0: {s} = {sa}")
            first = False
        self.line(f"elif {' or '.join(f'{sa} < 0' for _, sa in args)}: {s} = -1")
        self.line("else:")
        self.depth += 1
        for text in statements:
            self.line(text)
        self.depth -= 1
        return v, s

    def _logic(self, args: list[tuple[str, str]], absorbing: bool) -> tuple[str, str]:
        """An absorbing operand (false for and, true for or) decides the row whatever the
        others hold; else the leftmost error, then null. Written with ``&`` and ``|`` and
        selects, not branches: which operand decides is as random as the data."""
        v, s = self.fresh()
        hit = "" if absorbing else "not "
        decided = " | ".join(f"(({sa} == 0) & ({hit}{va}))" for va, sa in args)
        self.line(f"d_{v} = {decided}")
        self.line(f"{s} = 0 if d_{v} else {_state(args)}")
        self.line(f"{v} = d_{v}" if absorbing else f"{v} = (not d_{v}) & ({s} == 0)")
        return v, s

    def _is_null(self, arg: tuple[str, str]) -> tuple[str, str]:
        v, s = self.fresh()
        va, sa = arg
        self.line(f"{v} = {sa} < 0; {s} = {sa} if {sa} > 0 else 0")
        return v, s

    def _distinct(self, a: tuple[str, str], b: tuple[str, str], kind: Kind) -> tuple[str, str]:
        v, s = self.fresh()
        (va, sa), (vb, sb) = a, b
        same = f"{va} == {vb}"
        if kind is Kind.FLOAT64:  # NaN is not distinct from NaN
            same = f"({same} or (np.isnan({va}) and np.isnan({vb})))"
        self.line(f"{v} = False; {s} = 0")
        self.line(f"if {sa} > 0: {s} = {sa}")
        self.line(f"elif {sb} > 0: {s} = {sb}")
        self.line(f"elif {sa} == 0 and {sb} == 0: {v} = not {same}")
        self.line(f"else: {v} = ({sa} == 0) != ({sb} == 0)")
        return v, s

    def _nullif(self, a: tuple[str, str], b: tuple[str, str], kind: Kind) -> tuple[str, str]:
        v, s = self.fresh()
        (va, sa), (vb, sb) = a, b
        self.line(f"{v} = {va}; {s} = 0")
        self.line(f"if {sa} > 0: {s} = {sa}")
        self.line(f"elif {sb} > 0: {s} = {sb}")
        self.line(f"elif {sa} < 0 or ({sb} == 0 and {va} == {vb}): {s} = -1")  # with =: NaN stays
        return v, s

    def _take(self, v: str, s: str, arg: tuple[str, str], kind: Kind, arg_kind: Kind) -> None:
        va, sa = arg
        value = f"np.float64({va})" if kind is Kind.FLOAT64 and arg_kind is not Kind.FLOAT64 else va
        self.line(f"{v} = {value}; {s} = {sa}")

    def _coalesce(self, node: TCall) -> tuple[str, str]:
        """The first argument that is not null gives the value, or its error; later ones are
        not evaluated."""
        v, s = self.fresh()
        kind = node.type.kind
        self.line(f"{v} = {_ZERO[kind]}; {s} = -1")
        opened = 0
        early = {i: self.emit(arg) for i, arg in enumerate(node.args) if _cheap(arg)}
        for i, arg in enumerate(node.args):
            result = early.get(i) or self.emit(arg)
            self.line(f"if {result[1]} != -1:")
            self.depth += 1
            self._take(v, s, result, kind, arg.type.kind)
            self.depth -= 1
            self.line("else:")
            self.depth += 1
            opened += 1
        self.line("pass")
        self.depth -= opened
        return v, s

    def _case(self, node: TCall) -> tuple[str, str]:
        """Conditions in order: an error in one that is reached is the result; the first true
        one's value is evaluated and taken; else the default."""
        v, s = self.fresh()
        kind = node.type.kind
        args = node.args
        self.line(f"{v} = {_ZERO[kind]}; {s} = -1")
        opened = 0
        early = {i: self.emit(arg) for i, arg in enumerate(args) if i % 2 == 1 or i == len(args) - 1
                 if _cheap(arg)}
        for i in range(0, len(args) - 1, 2):
            cv, cs = self.emit(args[i])
            self.line(f"if {cs} > 0: {s} = {cs}")
            self.line(f"elif ({cs} == 0) & {cv}:")
            self.depth += 1
            self._take(v, s, early.get(i + 1) or self.emit(args[i + 1]), kind, args[i + 1].type.kind)
            self.depth -= 1
            self.line("else:")
            self.depth += 1
            opened += 1
        self._take(v, s, early.get(len(args) - 1) or self.emit(args[-1]), kind, args[-1].type.kind)
        self.depth -= opened
        return v, s


CHEAP_NODES = 8  # a case or coalesce argument this small is worth computing on every row


def _cheap(node: Typed) -> bool:
    """Whether a lazy argument is small enough to compute before the branch that picks it.
    Safe whatever it holds: its error is a state like any other, taken only by the rows that
    reach it; what is saved is the branch on random data and its mispredictions."""
    count = 0
    stack = [node]
    while stack:
        current = stack.pop()
        count += 1
        if count > CHEAP_NODES:
            return False
        if isinstance(current, TCall):
            if current.function in ("case", "coalesce"):
                return False
            stack.extend(current.args)
    return True


def _state(args: list[tuple[str, str]]) -> str:
    """The state of a null-propagating call as one expression: the leftmost argument's error,
    else null (-1) if any argument is, else 0."""
    text = f"-1 if {' | '.join(f'({sa} < 0)' for _, sa in args)} else 0"
    for _, sa in reversed(args):
        text = f"{sa} if {sa} > 0 else ({text})"
    return text


def _kernel(node: TCall) -> Callable[..., list[str]]:
    """The statements of a null-propagating function over non-null arguments."""
    fid, kind = node.function, node.type.kind
    if fid in _COMPARE:
        return lambda a, b, v, s: [f"{v} = {a} {_COMPARE[fid]} {b}"]
    if fid == "not":
        return lambda a, v, s: [f"{v} = not {a}"]
    if fid == "cast":
        return _CASTS[(node.args[0].type.kind, kind)]
    if kind is Kind.INT64:
        return _INT_KERNELS[fid]
    if fid == "is_nan":
        return lambda a, v, s: [f"{v} = np.isnan({a})"]
    return _FLOAT_KERNELS[fid]


# LLVM may treat a signed int64 overflow as impossible (numba's arithmetic is C's), so no check
# here reads a wrapped result: each tests the operands first and computes only what fits.
def _int_add(a: str, b: str, v: str, s: str) -> list[str]:
    return [f"if ({b} > 0 and {a} > MAX64 - {b}) or ({b} < 0 and {a} < MIN64 - {b}): {s} = {OUT_OF_RANGE}",
            f"else: {v} = {a} + {b}"]


def _int_subtract(a: str, b: str, v: str, s: str) -> list[str]:
    return [f"if ({b} < 0 and {a} > MAX64 + {b}) or ({b} > 0 and {a} < MIN64 + {b}): {s} = {OUT_OF_RANGE}",
            f"else: {v} = {a} - {b}"]


def _int_multiply(a: str, b: str, v: str, s: str) -> list[str]:
    # In magnitudes (uint64 holds 2^63): |a| * |b| fits iff |b| <= limit // |a|, where the
    # limit is 2^63 for a negative product and 2^63 - 1 for a positive one.
    return [f"ua_ = np.uint64({a}) if {a} >= 0 else np.uint64(-({a} + 1)) + np.uint64(1)",
            f"ub_ = np.uint64({b}) if {b} >= 0 else np.uint64(-({b} + 1)) + np.uint64(1)",
            f"lim_ = LIM_NEG if ({a} < 0) != ({b} < 0) else LIM_POS",
            f"if ua_ != 0 and ub_ > lim_ // ua_: {s} = {OUT_OF_RANGE}",
            f"else: {v} = {a} * {b}"]


def _int_negate(a: str, v: str, s: str) -> list[str]:
    return [f"if {a} == MIN64: {s} = {OUT_OF_RANGE}", f"else: {v} = -{a}"]


def _int_abs(a: str, v: str, s: str) -> list[str]:
    return [f"if {a} == MIN64: {s} = {OUT_OF_RANGE}", f"else: {v} = -{a} if {a} < 0 else {a}"]


_INT_KERNELS: dict[str, Callable[..., list[str]]] = {
    "add": _int_add, "subtract": _int_subtract, "multiply": _int_multiply, "negate": _int_negate,
    "abs": _int_abs,
}


def _float_binary(op: str) -> Callable[..., list[str]]:
    return lambda a, b, v, s: [f"{v} = {a} {op} {b}"]


_FLOAT_KERNELS: dict[str, Callable[..., list[str]]] = {
    **{fid: _float_binary(op) for fid, op in _FLOAT_BINARY.items()},
    # -0.0 == 0 too (IEEE 754 5.11), so a negative zero divisor is a division by zero as well
    "divide": lambda a, b, v, s: [f"if {b} == 0.0: {s} = {DIVISION_BY_ZERO}", f"else: {v} = {a} / {b}"],
    "negate": lambda a, v, s: [f"{v} = -{a}"],
    "abs": lambda a, v, s: [f"{v} = np.abs({a})"],
    "sqrt": lambda a, v, s: [f"if {a} < 0.0: {s} = {INVALID_ARGUMENT}", f"else: {v} = np.sqrt({a})"],
    "floor": lambda a, v, s: [f"{v} = np.floor({a})"],
    "ceil": lambda a, v, s: [f"{v} = np.ceil({a})"],
}


def _float_to_int(a: str, v: str, s: str) -> list[str]:
    """Round half away from zero (rexpr/catalogue/casts.py); NaN, infinities and values outside
    int64 raise. Inside [-2^63, 2^63) the hardware conversion truncates toward zero, and
    x - trunc(x) is exact in binary64 (Sterbenz), so the tie test is exact; no float there is
    within 0.5 of a bound but an integer, so the +-1 cannot leave int64."""
    return [f"if {a} >= -9223372036854775808.0 and {a} < 9223372036854775808.0:",
            f"    t_ = np.int64({a})",
            f"    f_ = {a} - np.float64(t_)",
            "    t_ += np.int64(f_ >= 0.5) - np.int64(f_ <= -0.5)",  # no branch: fractions are random
            f"    {v} = t_",
            f"else: {s} = {OUT_OF_RANGE}"]


_CASTS: dict[tuple[Kind, Kind], Callable[..., list[str]]] = {
    (Kind.FLOAT64, Kind.INT64): _float_to_int,
    (Kind.INT64, Kind.FLOAT64): lambda a, v, s: [f"{v} = np.float64({a})"],  # round to nearest even
    (Kind.BOOL, Kind.INT64): lambda a, v, s: [f"{v} = np.int64(1) if {a} else np.int64(0)"],
    (Kind.INT64, Kind.BOOL): lambda a, v, s: [f"{v} = {a} != 0"],
}


_HEADER = '''"""Generated by rexpr.backends.auto_jit; safe to delete."""
import numpy as np
from numba import njit

MIN64 = np.int64(-9223372036854775808)
MAX64 = np.int64(9223372036854775807)
LIM_POS = np.uint64(9223372036854775807)
LIM_NEG = np.uint64(9223372036854775808)
'''


@dataclass(frozen=True)
class Source:
    text: str
    fields: tuple[TField, ...]  # in parameter order
    kind: Kind


def source_of(node: Typed) -> Source:
    """One function over one block that writes value, validity and error code per row, or
    with ``keep`` set (a predicate) whether the row is true, and the error codes."""
    writer = _Writer()
    v, s = writer.emit(node)
    fields = sorted(writer.fields.items(), key=lambda item: item[1][0])
    params = ", ".join(f"d{k}, m{k}, n{k}, o{k}" for k in range(len(fields)))
    params = f"length, {params}, " if params else "length, "
    body = "\n".join(writer.lines)
    text = "\n".join([
        _HEADER,
        *writer.constants,
        "",
        "@njit(nogil=True, cache=CACHE, error_model='numpy')",
        f"def run({params}keep, out, valid, codes):",
        "    nulls = 0",
        "    errors = 0",
        "    for i in range(length):",
        body,
        "        if keep:",  # the mask goes where validity would: one signature, one compile
        f"            valid[i] = ({s} == 0) & {v}" if node.type.kind is Kind.BOOL else "            valid[i] = False",
        "        else:",
        f"            out[i] = {v}",
        f"            valid[i] = {s} == 0",
        f"        nulls += np.int64({s} < 0)",
        f"        if {s} > 0:",  # codes comes zeroed (calloc'd pages): only errors are written
        f"            codes[i] = {s}",
        "            errors += 1",
        "    return nulls, errors",
        "",
    ])
    return Source(text, tuple(field for _, (_, field) in fields), node.type.kind)


# ------------------------------------------------------------------------------ compiling
_LOADED: dict[str, Any] = {}  # source digest -> module with the kernel
_LOCK = threading.Lock()


def _cache_dir() -> Path | None:
    configured = os.environ.get(ENV_CACHE)
    base = Path(configured) if configured else Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "rexpr" / "jit"
    try:
        base.mkdir(parents=True, exist_ok=True)
        probe = tempfile.NamedTemporaryFile(dir=base, prefix=".probe-", delete=True)
        probe.close()
        return base
    except OSError:
        return None


def _load(text: str, fields: tuple[TField, ...], kind: Kind) -> Any:
    """The module compiled from ``text``: from this process, from the disk cache, or built.
    Its two kernels are compiled (or loaded) here, by a call on one dummy row, so no block
    waits for a compile; a cache entry that fails to load is passed over for an in-memory
    compile."""
    digest = hashlib.sha256(text.encode()).hexdigest()[:24]
    with _LOCK:
        found = _LOADED.get(digest)
        if found is not None:
            return found
        directory = _cache_dir()
        try:
            module = _import(text, digest, directory)
            _warm(module, fields, kind)
        except Exception:
            if directory is None:
                raise
            module = _import(text, digest, None)
            _warm(module, fields, kind)
        _LOADED[digest] = module
        return module


def _warm(module: Any, fields: tuple[TField, ...], kind: Kind) -> None:
    arguments: list[object] = []
    for field in fields:
        dtype = np.dtype(np.uint8) if field.type.kind is Kind.BOOL else DTYPES[field.type.kind]
        arguments += [_readonly(np.zeros(1, dtype)), _NO_BITS, 0, 0]
    module.run(1, *arguments, False, np.empty(1, DTYPES[kind]), np.empty(1, bool), np.empty(1, np.int8))


def _import(text: str, digest: str, directory: Path | None) -> Any:
    name = f"rexpr_jit_{digest}"
    if directory is None:  # no writable cache: compile in memory, without numba's cache
        namespace: dict[str, Any] = {"CACHE": False}
        exec(compile(text, name, "exec"), namespace)  # noqa: S102 - our own generated source
        return type("Kernels", (), {"run": namespace["run"]})
    path = directory / f"{name}.py"
    if path.exists():
        _touch(path)  # recently used: the last to be pruned
    else:  # written whole, then renamed: never a half file
        with tempfile.NamedTemporaryFile("w", dir=directory, suffix=".tmp", delete=False) as handle:
            handle.write(text.replace("cache=CACHE", "cache=True"))
        os.replace(handle.name, path)
        prune(directory)
    spec = importlib.util.spec_from_file_location(name, path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # numba's cache finds the kernels' globals through it
    spec.loader.exec_module(module)
    return module


def _touch(path: Path) -> None:
    try:
        os.utime(path)
    except OSError:
        pass


def prune(directory: Path, keep: int | None = None) -> int:
    """Deletes all but the ``keep`` most recently used kernels (default ``MAX_CACHED``) with
    numba's files for them; how many were deleted. Another process that loses a kernel this
    way compiles it again in memory (``_load`` passes over a cache entry that fails)."""
    keep = MAX_CACHED if keep is None else keep
    def used(path: Path) -> float:
        try:
            return path.stat().st_mtime
        except OSError:
            return 0.0
    kernels = sorted(directory.glob("rexpr_jit_*.py"), key=used, reverse=True)
    for old in kernels[keep:]:
        for path in [old, *(directory / "__pycache__").glob(f"{old.stem}.*")]:
            try:
                path.unlink()
            except OSError:
                pass  # gone already, or not ours to delete: the next prune tries again
    return max(len(kernels) - keep, 0)


def _readonly(array: np.ndarray) -> np.ndarray:
    """Arrow's buffers are read-only views, and numba compiles a kernel per writability: every
    input is read-only so that there is one."""
    array.setflags(write=False)
    return array


def _bitmap(buffer: pa.Buffer | None) -> np.ndarray:
    return _NO_BITS if buffer is None else np.frombuffer(buffer, dtype=np.uint8)


class Kernel:
    """A compiled subtree; ``arguments`` turns a block's field arrays into its parameters."""

    def __init__(self, source: Source) -> None:
        self.source = source
        self.module = _load(source.text, source.fields, source.kind)

    @staticmethod
    def arguments(arrays: list[pa.Array], kinds: list[Kind]) -> list[object]:
        out: list[object] = []
        for array, kind in zip(arrays, kinds):
            buffers = array.buffers()
            if kind is Kind.BOOL:
                data = _bitmap(buffers[1])
            elif buffers[1] is None:  # an all-null array of the type
                data = _readonly(np.zeros(max(len(array), 1), DTYPES[kind]))
            else:
                data = np.frombuffer(buffers[1], dtype=DTYPES[kind], count=array.offset + len(array))[array.offset:]
            has_bits = array.null_count > 0
            bits = _bitmap(buffers[0]) if has_bits and buffers[0] is not None else _NO_BITS
            if has_bits and buffers[0] is None:  # a null-typed all-null array has no bitmap
                bits = _readonly(np.zeros((array.offset + len(array) + 7) // 8 or 1, dtype=np.uint8))
            out += [data, bits, 1 if has_bits else 0, array.offset]
        return out

    def values(self, length: int, arguments: list[object]) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
        out = np.empty(length, DTYPES[self.source.kind])
        valid = np.empty(length, dtype=bool)
        codes = np.zeros(length, dtype=np.int8)
        nulls, errors = self.module.run(length, *arguments, False, out, valid, codes)
        return out, (valid if nulls or errors else None), (codes if errors else None)

    def keep(self, length: int, arguments: list[object], out: np.ndarray, codes: np.ndarray) -> bool:
        """Writes the predicate's true rows into ``out``; whether any row raised (``codes``)."""
        return bool(self.module.run(length, *arguments, True, _NO_OUT, out, codes)[1])
