"""Typed tree back to expression text that parses to the same tree (used for residuals,
shrunk repros and the CLI's tree view)."""

from __future__ import annotations

import math
import re

from rexpr.catalogue import BY_ID, Form
from rexpr.language.datetime_text import format_date, format_timestamp
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.types import Kind

_PLAIN_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_RESERVED = {"and", "or", "not", "is", "in", "between", "like", "escape", "distinct", "from", "null",
             "true", "false", "cast", "as", "case", "when", "then", "else", "end"}
_ATOM = 1000


def quote_name(name: str) -> str:
    if _PLAIN_NAME.fullmatch(name) and name.lower() not in _RESERVED:
        return name
    return '"' + name.replace('"', '""') + '"'


def literal_text(value: object, kind: Kind) -> str:
    if value is None:
        return "null" if kind is Kind.NULL else f"cast(null as {kind.value})"
    if kind is Kind.BOOL:
        return "true" if value else "false"
    if kind is Kind.INT64:
        return str(value)  # the checker folds -9223372036854775808 back into one literal
    if kind is Kind.FLOAT64:
        v = float(value)  # type: ignore[arg-type]
        if math.isnan(v):
            return "cast('NaN' as float64)"
        if math.isinf(v):
            return "cast('Infinity' as float64)" if v > 0 else "cast('-Infinity' as float64)"
        text = repr(v)
        return text if ("." in text or "e" in text) else text + ".0"
    if kind is Kind.STRING:
        return "'" + str(value).replace("'", "''") + "'"
    if kind is Kind.DATE:
        return f"date '{format_date(value)}'"  # type: ignore[arg-type]
    return f"timestamp '{format_timestamp(value)}'"  # type: ignore[arg-type]


def to_text(node: Typed) -> str:
    return _print(node)[0]


def _wrap(text_prec: tuple[str, int], need: int) -> str:
    text, prec = text_prec
    return text if prec >= need else f"({text})"


def _print(node: Typed) -> tuple[str, int]:
    if isinstance(node, TLiteral):
        text = literal_text(node.value, node.type.kind)
        return text, (_ATOM if not text.startswith("-") else 80)
    if isinstance(node, TField):
        return ".".join(quote_name(p) for p in node.path), _ATOM
    spec = BY_ID[node.function]
    args = node.args
    fid = node.function
    if fid == "cast":
        return f"cast({_print(args[0])[0]} as {node.type.kind.value})", _ATOM
    if fid == "case":
        parts = ["case"]
        for i in range(0, len(args) - 1, 2):
            parts += ["when", _print(args[i])[0], "then", _print(args[i + 1])[0]]
        default = args[-1]
        if not (isinstance(default, TLiteral) and default.value is None):
            parts += ["else", _print(default)[0]]
        parts.append("end")
        return " ".join(parts), _ATOM
    p = spec.precedence
    operand_prec = 50  # predicates take concat-level operands
    if fid == "is_null":
        return f"{_wrap(_print(args[0]), operand_prec)} is null", p
    if fid == "is_distinct_from":
        return f"{_wrap(_print(args[0]), operand_prec)} is distinct from {_wrap(_print(args[1]), operand_prec)}", p
    if fid == "in":
        items = ", ".join(_print(a)[0] for a in args[1:])
        return f"{_wrap(_print(args[0]), operand_prec)} in ({items})", p
    if fid == "between":
        x, lo, hi = (_wrap(_print(a), operand_prec) for a in args)
        return f"{x} between {lo} and {hi}", p
    if fid == "like":
        text = f"{_wrap(_print(args[0]), operand_prec)} like {_wrap(_print(args[1]), operand_prec)}"
        if len(args) == 3:
            text += f" escape {_wrap(_print(args[2]), operand_prec)}"
        return text, p
    if spec.form is Form.CALL:
        return f"{spec.spelling}({', '.join(_print(a)[0] for a in args)})", _ATOM
    if spec.form is Form.CHAIN:
        return f" {spec.spelling} ".join(_wrap(_print(a), p + 1) for a in args), p
    if spec.form is Form.PREFIX:
        inner = _wrap(_print(args[0]), p)
        sep = " " if fid == "not" else ""
        if fid == "negate" and inner.startswith("-"):
            inner = f"({inner})"
        return f"{spec.spelling}{sep}{inner}", p
    # INFIX: left-associative; comparisons are not associative at all.
    left_need = p + 1 if p == 40 else p
    return f"{_wrap(_print(args[0]), left_need)} {spec.spelling} {_wrap(_print(args[1]), p + 1)}", p


def tree_lines(node: Typed, indent: int = 0) -> list[str]:
    """The typed tree as indented lines: ``function : type`` per call, leaves as text."""
    pad = "  " * indent
    suffix = "" if node.type.nullable else " not null"
    if isinstance(node, TCall):
        label = node.function if node.function != "cast" else f"cast to {node.type.kind.value}"
        lines = [f"{pad}{label} : {node.type.name}{suffix}"]
        for arg in node.args:
            lines += tree_lines(arg, indent + 1)
        return lines
    return [f"{pad}{_print(node)[0]} : {node.type.name}{suffix}"]
