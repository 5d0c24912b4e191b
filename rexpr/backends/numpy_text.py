"""NumPy kernels for strings, on ``StringDType`` arrays through ``numpy.strings``.

NumPy's string kernels treat a trailing U+0000 as padding (lengths, searches, strips and
comparisons go wrong), so when a string may hold U+0000 (``Ctx.exact_text`` false) every
kernel here takes its per-row Python path instead. ``numpy.strings.strip`` also mishandles a
character set with non-ASCII characters, so those sets go through Python too.
"""

from __future__ import annotations

import enum
import operator
import re
from functools import lru_cache
from typing import Callable

import numpy as np
import pyarrow as pa

from rexpr.backends.numpy_columns import TEXT, Ctx, Out, faults, rowwise
from rexpr.catalogue.model import ErrorClass as E
from rexpr.types import INT64_MAX

_INT64 = np.dtype(np.int64)
_BOOL = np.dtype(np.bool_)

_COMPARE: dict[str, Callable[[object, object], object]] = {
    "eq": operator.eq, "ne": operator.ne, "lt": operator.lt, "le": operator.le, "gt": operator.gt,
    "ge": operator.ge,
}


def compare(op: str, a: np.ndarray, b: np.ndarray, exact_text: bool) -> np.ndarray:
    """A comparison of any two same-kind arrays; strings compare by code point (UTF-8 byte
    order is code-point order, RFC 3629 section 1), in Python when U+0000 may occur."""
    fn = _COMPARE[op]
    if a.dtype == TEXT and not exact_text:
        return np.fromiter((fn(x, y) for x, y in zip(a.tolist(), b.tolist())), bool, len(a))
    with np.errstate(invalid="ignore"):
        return fn(a, b)  # type: ignore[return-value]


def lengths(cx: Ctx, s: np.ndarray) -> np.ndarray:
    """Code points per string."""
    if cx.exact_text:
        return np.strings.str_len(s).astype(np.int64)
    return np.fromiter((len(x) for x in s.tolist()), np.int64, len(s))


# ---------------------------------------------------------------- like
class Wild(enum.Enum):
    ONE = "_"  # exactly one code point
    ANY = "%"  # any run of code points


Token = str | Wild  # a literal run, or a wildcard


@lru_cache(maxsize=256)
def like_tokens(pattern: str, escape: str | None) -> tuple[Token, ...] | E:
    """The pattern as literal runs and wildcards, or the error it raises (ISO/IEC 9075-2 8.5)."""
    if escape is not None and len(escape) != 1:
        return E.INVALID_ESCAPE
    tokens: list[Token] = []
    i = 0
    while i < len(pattern):
        ch = pattern[i]
        token: Token
        if escape is not None and ch == escape:
            if i + 1 >= len(pattern) or pattern[i + 1] not in ("%", "_", escape):
                return E.INVALID_ESCAPE
            token, i = pattern[i + 1], i + 2
        else:
            token, i = (Wild(ch) if ch in "%_" else ch), i + 1
        if isinstance(token, str) and tokens and isinstance(tokens[-1], str):
            tokens[-1] += token
        else:
            tokens.append(token)
    return tuple(tokens)


@lru_cache(maxsize=256)
def _like_regex(pattern: str, escape: str | None) -> "re.Pattern[str] | E":
    tokens = like_tokens(pattern, escape)
    if isinstance(tokens, E):
        return tokens
    parts = [re.escape(t) if isinstance(t, str) else ".*" if t is Wild.ANY else "." for t in tokens]
    return re.compile("".join(parts), re.DOTALL)  # DOTALL: a wildcard matches a newline too


def _like_row(s: str, pattern: str, escape: str | None = None) -> bool | E:
    regex = _like_regex(pattern, escape)
    return regex if isinstance(regex, E) else regex.fullmatch(s) is not None


def like(cx: Ctx, s: np.ndarray, pattern: np.ndarray, escape: np.ndarray | None = None) -> Out:
    if not (cx.is_constant(1) and (escape is None or cx.is_constant(2))):
        args = (s, pattern) if escape is None else (s, pattern, escape)
        return rowwise(_like_row, cx, _BOOL, *args)
    text, esc = str(pattern[0]), None if escape is None else str(escape[0])
    tokens = like_tokens(text, esc)
    if isinstance(tokens, E):
        return np.zeros(len(s), bool), faults(cx.live, (cx.live, tokens))
    if Wild.ONE in tokens or not cx.exact_text:
        regex = _like_regex(text, esc)
        return rowwise(lambda x: regex.fullmatch(x) is not None, cx, _BOOL, s)  # type: ignore[union-attr]
    return _like_literals(cx, s, tokens), None


def _like_literals(cx: Ctx, s: np.ndarray, tokens: tuple[Token, ...]) -> np.ndarray:
    """A pattern of literal runs and %: anchor the first and last run, then find the middle runs
    left to right (leftmost matching is enough when the only wildcard is %)."""
    pieces = [""]
    for token in tokens:
        if token is Wild.ANY:
            pieces.append("")
        else:
            pieces[-1] += token  # type: ignore[operator]
    if len(pieces) == 1:
        return s == pieces[0]
    head, tail, middle = pieces[0], pieces[-1], [p for p in pieces[1:-1] if p]
    size = lengths(cx, s)
    ok = np.strings.startswith(s, head) & np.strings.endswith(s, tail) & (size >= len(head) + len(tail))
    position = np.full(len(s), len(head), np.int64)
    stop = size - len(tail)
    for piece in middle:
        found = np.strings.find(s, piece, position, stop)
        ok &= found >= 0
        position = np.where(found >= 0, found + len(piece), position)
    return ok


# ---------------------------------------------------------------- trim and friends
def _trimmer(name: str):
    def kernel(cx: Ctx, s: np.ndarray, chars: np.ndarray | None = None) -> Out:
        strip = getattr(np.strings, name)
        if chars is None:
            return (strip(s, " "), None) if cx.exact_text else rowwise(lambda x: getattr(x, name)(" "), cx, TEXT, s)
        if cx.exact_text and cx.is_constant(1) and str(chars[0]).isascii():
            return strip(s, str(chars[0])), None
        return rowwise(lambda x, c: getattr(x, name)(c), cx, TEXT, s, chars)

    kernel.__name__ = name
    return kernel


def substring(cx: Ctx, s: np.ndarray, start: np.ndarray, length: np.ndarray | None = None) -> Out:
    """ISO/IEC 9075-2 6.30: positions before 1 exist but are empty; the int64 index arithmetic is
    done without overflow, then clipped to the string."""
    if cx.exact_text and cx.is_constant(1) and (length is None or cx.is_constant(2)):
        return _substring_constant(cx, s, int(start[0]), None if length is None else int(length[0]))
    size = lengths(cx, s)
    first = np.minimum(np.maximum(start, 1) - 1, size)
    if length is None:
        last = size
        codes = None
    else:
        span = np.maximum(length, 0)
        end = np.where(start > INT64_MAX - span, INT64_MAX, start + span)  # past INT64_MAX is "to the end"
        last = np.clip(np.maximum(end, 1) - 1, first, size)
        codes = faults(cx.live, (length < 0, E.INVALID_ARGUMENT))
    if cx.exact_text:
        return np.strings.slice(s, first, np.maximum(last, first)), codes
    values, _ = rowwise(lambda x, b, e: x[b:e], cx, TEXT, s, first, np.maximum(last, first))
    return values, codes


def _substring_constant(cx: Ctx, s: np.ndarray, start: int, length: int | None) -> Out:
    """The same rule with literal positions, worked out once in Python's unbounded ints. A
    slice [first, last) with 0 <= first clips to each string by itself (Python slicing), so
    no per-row lengths are needed."""
    first = max(start, 1) - 1
    if length is None:
        return np.strings.slice(s, first, None), None
    if length < 0:
        return np.full(len(s), "", TEXT), faults(cx.live, (cx.live, E.INVALID_ARGUMENT))
    last = min(max(max(start + length, 1) - 1, first), INT64_MAX)
    return np.strings.slice(s, min(first, INT64_MAX), last), None


def upper(cx: Ctx, s: np.ndarray) -> Out:
    # numpy.strings.upper applies full Unicode case mapping (SpecialCasing: 'ß' -> 'SS'),
    # the same as Python's str.upper; checked over every code point in the tests.
    return (np.strings.upper(s), None) if cx.exact_text else rowwise(str.upper, cx, TEXT, s)


def lower(cx: Ctx, s: np.ndarray) -> Out:
    return (np.strings.lower(s), None) if cx.exact_text else rowwise(str.lower, cx, TEXT, s)


def length(cx: Ctx, s: np.ndarray) -> Out:
    return lengths(cx, s), None


def octet_length(cx: Ctx, s: np.ndarray) -> Out:
    """UTF-8 bytes per string, read from the offsets of the Arrow string array NumPy converts to."""
    array = pa.array(s, type=pa.large_string())
    offsets = np.frombuffer(array.buffers()[1], np.int64)[array.offset:array.offset + len(array) + 1]
    return np.diff(offsets), None


def concat_op(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    return np.strings.add(a, b), None  # concatenation keeps U+0000 intact


def replace(cx: Ctx, s: np.ndarray, search: np.ndarray, replacement: np.ndarray) -> Out:
    if not cx.exact_text:
        return rowwise(lambda x, a, b: x if a == "" else x.replace(a, b), cx, TEXT, s, search, replacement)
    # Python and NumPy insert at every position for an empty search; here it changes nothing.
    return np.where(search == "", s, np.strings.replace(s, search, replacement)), None


def position(cx: Ctx, needle: np.ndarray, haystack: np.ndarray) -> Out:
    if not cx.exact_text:
        return rowwise(lambda n, h: h.find(n) + 1, cx, _INT64, needle, haystack)
    return np.strings.find(haystack, needle).astype(np.int64) + 1, None


def starts_with(cx: Ctx, s: np.ndarray, prefix: np.ndarray) -> Out:
    if not cx.exact_text:
        return rowwise(str.startswith, cx, _BOOL, s, prefix)
    return np.strings.startswith(s, prefix), None


def ends_with(cx: Ctx, s: np.ndarray, suffix: np.ndarray) -> Out:
    if not cx.exact_text:
        return rowwise(str.endswith, cx, _BOOL, s, suffix)
    return np.strings.endswith(s, suffix), None


KERNELS = {
    "like": like, "trim": _trimmer("strip"), "ltrim": _trimmer("lstrip"), "rtrim": _trimmer("rstrip"),
    "substring": substring, "upper": upper, "lower": lower, "length": length,
    "octet_length": octet_length, "concat_op": concat_op, "replace": replace, "position": position,
    "starts_with": starts_with, "ends_with": ends_with,
}
