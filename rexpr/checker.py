"""Syntax tree + schema -> typed tree: binds fields, resolves catalogue signatures, infers
types and nullability. Implicit conversion is int64 -> float64 only, and it is made explicit
as a ``cast`` node so backends never guess."""

from __future__ import annotations

import difflib
import math

from rexpr.catalogue import BY_ID, CALLABLE, FunctionSpec, Signature, cast_rule
from rexpr.errors import Span, TypeProblem
from rexpr.language import nodes as n
from rexpr.schema import Schema
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.types import (BOOL, DATE, FLOAT64, INT64, INT64_MAX, NULL, STRING, TIMESTAMP, TYPE_NAMES,
                         DataType, Kind)

_BINARY = {"+": "add", "-": "subtract", "*": "multiply", "/": "divide", "%": "modulo",
           "||": "concat_op", "=": "eq", "<>": "ne", "!=": "ne", "<": "lt", "<=": "le",
           ">": "gt", ">=": "ge"}
_NUMBERS = {Kind.INT64, Kind.FLOAT64}


def check(tree: n.Node, schema: Schema, text: str | None = None) -> Typed:
    """Type-check a syntax tree against a schema, raising :class:`TypeProblem` on the first error."""
    try:
        return _Checker(schema).visit(tree)
    except TypeProblem as exc:
        if text is not None:
            exc.with_text(text)
        raise


def _widens(source: Kind, target: Kind) -> bool:
    return source is Kind.INT64 and target is Kind.FLOAT64


def coerce(node: Typed, kind: Kind) -> Typed:
    """Make ``node`` have ``kind``: retype a null literal, or wrap an int64 in an explicit cast."""
    if node.type.kind is kind:
        return node
    if node.type.kind is Kind.NULL:
        assert isinstance(node, TLiteral)
        return TLiteral(None, DataType(kind, True), node.span)
    assert _widens(node.type.kind, kind), (node.type, kind)
    if isinstance(node, TLiteral) and node.value is not None:
        return TLiteral(float(node.value), DataType(kind, node.type.nullable), node.span)
    return TCall("cast", (node,), DataType(kind, node.type.nullable), node.span)


def _match(signature: Signature, kinds: list[Kind]) -> int | None:
    """Number of widenings needed to call ``signature`` with ``kinds``, or None if it cannot."""
    params = list(signature.params)
    if signature.variadic:
        if len(kinds) < len(params):
            return None
        params += [params[-1]] * (len(kinds) - len(params))
    elif not (len(params) - signature.optional <= len(kinds) <= len(params)):
        return None
    cost = 0
    for kind, param in zip(kinds, params):
        if kind is param or kind is Kind.NULL:
            continue
        if _widens(kind, param):
            cost += 1
            continue
        return None
    return cost


def _best_signature(function_id: str, kinds: tuple[Kind, ...]) -> tuple[tuple[Kind, ...], Kind] | None:
    """The cheapest signature of a catalogue function for argument kinds: its parameter kinds
    (variadic ones repeated to the argument count) and result kind, or None if none fits."""
    best: tuple[int, Signature] | None = None
    for signature in BY_ID[function_id].signatures:
        cost = _match(signature, list(kinds))
        if cost is not None and (best is None or cost < best[0]):
            best = (cost, signature)
    if best is None:
        return None
    params = list(best[1].params)
    params += [params[-1]] * (len(kinds) - len(params))
    return tuple(params), best[1].result


# The catalogue is fixed, so a resolution depends on the function and argument kinds alone.
# Keys use the kinds' ids: Kind members are singletons, and hashing an Enum member runs Python
# code, which showed up in the compile profile.
_RESOLVED: dict[tuple, tuple[tuple[Kind, ...], Kind, FunctionSpec] | None] = {}
_TYPES: dict[tuple[int, bool], DataType] = {}


def _resolution(function_id: str, kinds: tuple[Kind, ...]) -> tuple[tuple[Kind, ...], Kind, FunctionSpec] | None:
    key = (function_id, *map(id, kinds))
    if key not in _RESOLVED:
        best = _best_signature(function_id, kinds)
        _RESOLVED[key] = None if best is None else (*best, BY_ID[function_id])
    return _RESOLVED[key]


def _data_type(kind: Kind, nullable: bool) -> DataType:
    """One shared instance per scalar type (DataType is a value; equal instances are interchangeable)."""
    key = (id(kind), nullable)
    found = _TYPES.get(key)
    if found is None:
        found = _TYPES[key] = DataType(kind, nullable)
    return found


def _arity_text(spec: FunctionSpec) -> str:
    sig = spec.signatures[0]
    most = len(sig.params)
    least = most - sig.optional
    if sig.variadic:
        return f"at least {least} argument{'s' if least != 1 else ''}"
    if least == most:
        return f"{most} argument{'s' if most != 1 else ''}"
    return f"{least} to {most} arguments"


class _Checker:
    def __init__(self, schema: Schema) -> None:
        self.schema = schema

    def visit(self, node: n.Node) -> Typed:
        return _VISITORS[type(node)](self, node)

    # leaves ------------------------------------------------------------------------------
    def visit_Literal(self, node: n.Literal, negated: bool = False) -> Typed:
        kind = node.kind
        if kind == "int":
            value = -node.value if negated else node.value  # type: ignore[operator]
            if not (-INT64_MAX - 1 <= value <= INT64_MAX):
                raise TypeProblem(f"integer literal {node.text} does not fit in int64", code="invalid_literal",
                                  span=node.span, hint="int64 holds -9223372036854775808 to "
                                                       "9223372036854775807; write a float like 1e19 instead")
            return TLiteral(value, _data_type(Kind.INT64, False), node.span)
        if kind == "float":
            value = -node.value if negated else node.value  # type: ignore[operator]
            if math.isinf(value):
                raise TypeProblem(f"float literal {node.text} is too large for float64", code="invalid_literal",
                                  span=node.span)
            return TLiteral(value, _data_type(Kind.FLOAT64, False), node.span)
        types = {"string": STRING, "bool": BOOL, "date": DATE, "timestamp": TIMESTAMP}
        if kind == "null":
            return TLiteral(None, NULL, node.span)
        return TLiteral(node.value, types[kind].with_nullable(False), node.span)

    def visit_FieldRef(self, node: n.FieldRef) -> Typed:
        head, *rest = node.path
        current = self.schema.get(head)
        if current is None:
            raise self._unknown(head, self.schema.names, node.span, "field")
        walked = [head]
        nullable = current.nullable
        for part in rest:
            if current.kind is not Kind.STRUCT:
                raise TypeProblem(f"{'.'.join(walked)} is {current.name}, not a struct, so it has no field {part!r}",
                                  code="unknown_field", span=node.span)
            inner = current.field(part)
            if inner is None:
                raise self._unknown(part, [f for f, _ in current.fields], node.span, f"field of {'.'.join(walked)}")
            walked.append(part)
            current = inner
            nullable = nullable or inner.nullable  # a null struct makes its fields null
        if current.kind is Kind.STRUCT:
            names = ", ".join(".".join(walked + [f]) for f, _ in current.fields[:3])
            raise TypeProblem(f"{'.'.join(walked)} is a struct and cannot be used as a value",
                              span=node.span, hint=f"use one of its fields, e.g. {names}")
        return TField(node.path, current.with_nullable(nullable), node.span)

    @staticmethod
    def _unknown(name: str, known: list[str], span: Span, what: str) -> TypeProblem:
        close = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
        if not close:
            close = [k for k in known if k.lower() == name.lower()][:1]
        hint = f"did you mean {close[0]!r}?" if close else (
            f"known: {', '.join(sorted(known)[:12])}" if known else "the schema has no fields")
        return TypeProblem(f"unknown {what} {name!r}", code="unknown_field" if "field" in what else "unknown_function",
                           span=span, hint=hint)

    # calls -------------------------------------------------------------------------------
    def resolve(self, function_id: str, args: list[Typed], span: Span, arg_spans: list[Span] | None = None) -> TCall:
        resolved = _resolution(function_id, tuple(a.type.kind for a in args))
        if resolved is None:
            raise self._no_signature(BY_ID[function_id], args, span)
        params, result_kind, spec = resolved
        coerced = tuple(a if a.type.kind is p else coerce(a, p) for a, p in zip(args, params))
        result = _data_type(result_kind, spec.nullable([a.type for a in coerced]))
        return TCall(function_id, coerced, result, span)

    def _no_signature(self, spec: FunctionSpec, args: list[Typed], span: Span) -> TypeProblem:
        kinds = [a.type.kind for a in args]
        counts_ok = any(_match(Signature(tuple(kinds), s.result), kinds) is not None and
                        (s.variadic and len(kinds) >= len(s.params) or
                         len(s.params) - s.optional <= len(kinds) <= len(s.params))
                        for s in spec.signatures)
        if not counts_ok:
            return TypeProblem(f"{spec.spelling} takes {_arity_text(spec)}, got {len(args)}", code="wrong_arity",
                               span=span)
        shown = ", ".join(k.value for k in kinds)
        accepted = "; ".join(s.describe() for s in spec.signatures[:6])
        hint = f"{spec.spelling} accepts {accepted}"
        # Point at the first operand that no signature accepts in its position.
        culprit = args[0]
        for i, arg in enumerate(args):
            if arg.type.kind is Kind.NULL:
                continue
            if not any(i < len(s.params) + (999 if s.variadic else 0) and
                       (arg.type.kind is (s.params[min(i, len(s.params) - 1)]) or
                        _widens(arg.type.kind, s.params[min(i, len(s.params) - 1)]))
                       for s in spec.signatures):
                culprit = arg
                break
        if Kind.STRING in kinds and any(k in _NUMBERS for k in kinds):
            hint = ("strings and numbers never convert implicitly; write an explicit cast, "
                    "e.g. cast(x as float64) or cast(x as string)")
        return TypeProblem(f"{spec.spelling} cannot take ({shown})", span=culprit.span, hint=hint)

    def visit_Call(self, node: n.Call) -> Typed:
        name = node.name.lower()
        spec = CALLABLE.get(name)
        if spec is None:
            raise self._unknown(node.name, sorted(CALLABLE), node.name_span, "function")
        args = [self.visit(a) for a in node.args]
        return self.resolve(spec.id, args, node.span)

    def visit_Unary(self, node: n.Unary) -> Typed:
        if node.op == "-":
            inner = node.operand
            while isinstance(inner, n.Parens):
                inner = inner.inner
            if isinstance(inner, n.Literal) and inner.kind in ("int", "float"):
                literal = self.visit_Literal(inner, negated=True)
                return TLiteral(literal.value, literal.type, node.span)
            return self.resolve("negate", [self.visit(node.operand)], node.span)
        return self.resolve("not", [self._boolean(node.operand, "not")], node.span)

    def _boolean(self, node: n.Node, where: str) -> Typed:
        typed = self.visit(node)
        if typed.type.kind not in (Kind.BOOL, Kind.NULL):
            raise TypeProblem(f"{where} needs a bool operand, got {typed.type.name}", span=typed.span,
                              hint="compare it first, e.g. x <> 0 or s <> ''")
        return typed

    def visit_Binary(self, node: n.Binary) -> Typed:
        left, right = self.visit(node.left), self.visit(node.right)
        return self.resolve(_BINARY[node.op], [left, right], node.span)

    def visit_Chain(self, node: n.Chain) -> Typed:
        items = [self._boolean(item, node.op) for item in node.items]
        return self.resolve(node.op, items, node.span)

    def visit_Parens(self, node: n.Parens) -> Typed:
        return self.visit(node.inner)

    def _negate(self, call: Typed, negated: bool, span: Span) -> Typed:
        return self.resolve("not", [call], span) if negated else call

    def visit_IsNull(self, node: n.IsNull) -> Typed:
        operand = self.visit(node.operand)
        if operand.type.kind is Kind.NULL:
            operand = coerce(operand, Kind.BOOL)
        return self._negate(self.resolve("is_null", [operand], node.span), node.negated, node.span)

    def visit_IsDistinct(self, node: n.IsDistinct) -> Typed:
        args = [self.visit(node.left), self.visit(node.right)]
        if all(a.type.kind is Kind.NULL for a in args):
            args = [coerce(a, Kind.BOOL) for a in args]
        call = self.resolve("is_distinct_from", args, node.span)
        return self._negate(call, node.negated, node.span)

    def visit_InList(self, node: n.InList) -> Typed:
        args = [self.visit(node.operand)] + [self.visit(i) for i in node.items]
        return self._negate(self.resolve("in", args, node.span), node.negated, node.span)

    def visit_Between(self, node: n.Between) -> Typed:
        args = [self.visit(node.operand), self.visit(node.low), self.visit(node.high)]
        return self._negate(self.resolve("between", args, node.span), node.negated, node.span)

    def visit_Like(self, node: n.Like) -> Typed:
        args = [self.visit(node.operand), self.visit(node.pattern)]
        if node.escape is not None:
            args.append(self.visit(node.escape))
        return self._negate(self.resolve("like", args, node.span), node.negated, node.span)

    def visit_Cast(self, node: n.Cast) -> Typed:
        operand = self.visit(node.operand)
        target_kind = TYPE_NAMES.get(node.type_name)
        if target_kind is None:
            known = sorted({k.value for k in TYPE_NAMES.values()})
            close = difflib.get_close_matches(node.type_name, list(TYPE_NAMES), n=1)
            raise TypeProblem(f"unknown type {node.type_name!r} in cast", code="unknown_type", span=node.type_span,
                              hint=f"did you mean {close[0]!r}?" if close else f"types: {', '.join(known)}")
        if operand.type.kind is Kind.NULL:
            return TLiteral(None, DataType(target_kind, True), node.span)
        if cast_rule(operand.type.kind, target_kind) is None:
            raise TypeProblem(f"there is no cast from {operand.type.name} to {target_kind.value}",
                              span=node.span, hint="go through another type if that is what you mean, e.g. "
                                                   "cast(cast(x as string) as ...)")
        return TCall("cast", (operand,), DataType(target_kind, operand.type.nullable), node.span)

    def visit_Case(self, node: n.Case) -> Typed:
        subject = self.visit(node.subject) if node.subject is not None else None
        conditions: list[Typed] = []
        values: list[Typed] = []
        for cond_node, value_node in node.whens:
            if subject is not None:
                cond = self.resolve("eq", [subject, self.visit(cond_node)], cond_node.span)
            else:
                cond = self._boolean(cond_node, "when")
            conditions.append(cond)
            values.append(self.visit(value_node))
        default = self.visit(node.default) if node.default is not None else TLiteral(None, NULL, node.span)
        values.append(default)
        kind = self._common_kind(values, "case branches")
        values = [coerce(v, kind) for v in values]
        args: list[Typed] = []
        for cond, value in zip(conditions, values):
            args += [coerce(cond, Kind.BOOL), value]
        args.append(values[-1])
        spec = BY_ID["case"]
        return TCall("case", tuple(args), DataType(kind, spec.nullable([a.type for a in args])), node.span)

    def _common_kind(self, values: list[Typed], what: str) -> Kind:
        kinds = {v.type.kind for v in values} - {Kind.NULL}
        if not kinds:
            return Kind.BOOL  # every branch is null: pick any type; bool is the cheapest
        if len(kinds) == 1:
            return kinds.pop()
        if kinds == _NUMBERS:
            return Kind.FLOAT64
        first = values[0]
        other = next(v for v in values if v.type.kind not in (first.type.kind, Kind.NULL))
        hint = ("strings and numbers never convert implicitly; cast one side" if
                {Kind.STRING} & kinds and _NUMBERS & kinds else "cast the branches to one type")
        raise TypeProblem(f"{what} mix {first.type.name} and {other.type.name}", span=other.span, hint=hint)


_VISITORS = {node_type: getattr(_Checker, "visit_" + node_type.__name__)
             for node_type in (n.Literal, n.FieldRef, n.Call, n.Unary, n.Binary, n.Chain, n.IsNull, n.IsDistinct,
                               n.InList, n.Between, n.Like, n.Cast, n.Case, n.Parens)}
