"""Text to syntax tree: lark LALR with an inline transformer (no intermediate parse tree).

Building nodes during the parse keeps it iterative, so pathological nesting is caught by the
depth limit instead of Python's recursion limit.
"""

from __future__ import annotations

import datetime as dt
import re
import threading
from functools import lru_cache
from importlib import resources

from lark import Lark, Token, Transformer, v_args
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken, VisitError

from rexpr.errors import LimitExceeded, RexprError, Span, SyntaxProblem
from rexpr.language import nodes as n
from rexpr.language.datetime_text import parse_date_text, parse_timestamp_text

MAX_LENGTH = 65_536
MAX_DEPTH = 200
_SURROGATE = re.compile('[\ud800-\udfff]')

_KEYWORDS = {"and", "or", "not", "is", "in", "between", "like", "escape", "distinct", "from", "null",
             "true", "false", "cast", "as", "case", "when", "then", "else", "end"}

# Friendly names for lark's terminal names in "expected ..." lists.
_TERMINAL_NAMES = {
    "LPAR": "'('", "RPAR": "')'", "COMMA": "','", "DOT": "'.'", "COMPARE": "a comparison",
    "ADD_OP": "'+' or '-'", "MUL_OP": "'*', '/' or '%'", "MINUS": "'-'", "CONCAT_OP": "'||'",
    "INT": "a number", "FLOAT": "a number", "STRING": "a string", "NAME": "a name",
    "QUOTED_NAME": "a quoted name", "$END": "end of expression",
}


def _token_span(token: Token) -> Span:
    start = token.start_pos or 0
    return Span(start, token.end_pos if token.end_pos is not None else start + len(token))


def _span_of(item: object) -> Span:
    if isinstance(item, Token):
        return _token_span(item)
    return item.span  # type: ignore[attr-defined]


def _covering(*items: object) -> Span:
    spans = [_span_of(i) for i in items if i is not None]
    span = spans[0]
    for other in spans[1:]:
        span = span.union(other)
    return span


def _unquote(text: str, quote: str) -> str:
    return text[1:-1].replace(quote * 2, quote)


@v_args(inline=True)
class _Builder(Transformer):
    """Turns reductions into nodes while tracking depth."""

    def __init__(self) -> None:
        super().__init__()
        self._local = threading.local()

    @property
    def depth(self) -> dict[int, int]:
        return self._local.depth

    def reset(self) -> None:
        self._local.depth = {}

    def _made(self, node: n.Node, *children: object) -> n.Node:
        depth = 1 + max((self.depth.get(id(c), 0) for c in children if c is not None), default=0)
        if depth > MAX_DEPTH:
            raise LimitExceeded(
                f"expression nests deeper than {MAX_DEPTH} levels",
                code="too_deep", span=node.span,
                hint="split the expression or flatten long chains; 'and'/'or' chains do not count")
        self.depth[id(node)] = depth
        return node

    # literals
    def int_literal(self, tok: Token) -> n.Node:
        digits = str(tok).lstrip("0") or "0"
        if len(digits) > 20:  # far beyond int64; also keeps int() under its digit limit
            raise SyntaxProblem(f"integer literal with {len(digits)} digits does not fit in int64",
                                code="invalid_literal", span=_token_span(tok))
        return self._made(n.Literal("int", int(digits), _token_span(tok), str(tok)))

    def float_literal(self, tok: Token) -> n.Node:
        return self._made(n.Literal("float", float(tok), _token_span(tok), str(tok)))

    def string_literal(self, tok: Token) -> n.Node:
        return self._made(n.Literal("string", _unquote(str(tok), "'"), _token_span(tok), str(tok)))

    def true_literal(self, tok: Token) -> n.Node:
        return self._made(n.Literal("bool", True, _token_span(tok), "true"))

    def false_literal(self, tok: Token) -> n.Node:
        return self._made(n.Literal("bool", False, _token_span(tok), "false"))

    def null_literal(self, tok: Token) -> n.Node:
        return self._made(n.Literal("null", None, _token_span(tok), "null"))

    def typed_literal(self, kind_tok: Token, value_tok: Token) -> n.Node:
        kind = str(kind_tok).lower()
        raw = _unquote(str(value_tok), "'")
        span = _covering(kind_tok, value_tok)
        text = f"{kind} {value_tok}"
        if kind == "date":
            value: object = _parse_date_literal(raw, span)
        elif kind == "timestamp":
            value = _parse_timestamp_literal(raw, span)
        else:
            raise SyntaxProblem(
                f"unknown typed literal {str(kind_tok)!r}", span=_token_span(kind_tok),
                hint="typed literals are date '2024-05-01' and timestamp '2024-05-01 10:00:00'; "
                     "a name followed by a string is not valid otherwise")
        return self._made(n.Literal(kind, value, span, text))

    # names and fields
    def field(self, *names: Token) -> n.Node:
        path = tuple(_unquote(str(t), '"') if t.type == "QUOTED_NAME" else str(t) for t in names)
        return self._made(n.FieldRef(path, _covering(*names)))

    # calls
    def call(self, name: Token, lpar: Token, args: list | None, rpar: Token) -> n.Node:
        items = tuple(args or ())
        return self._made(n.Call(str(name), items, _covering(name, rpar), _token_span(name)), *items)

    def expr_list(self, *items: n.Node) -> list:
        return list(items)

    def cast(self, cast_tok: Token, lpar: Token, operand: n.Node, type_name: tuple, rpar: Token) -> n.Node:
        text, span = type_name
        return self._made(n.Cast(operand, text, _covering(cast_tok, rpar), span), operand)

    def type_name(self, *words: Token) -> tuple[str, Span]:
        return " ".join(str(w).lower() for w in words), _covering(*words)

    def when_clause(self, cond: n.Node, value: n.Node) -> tuple:
        return (cond, value)

    def searched_case(self, case_tok: Token, *rest: object) -> n.Node:
        *whens, default, end_tok = rest
        return self._case(None, case_tok, whens, default, end_tok)

    def simple_case(self, case_tok: Token, subject: n.Node, *rest: object) -> n.Node:
        *whens, default, end_tok = rest
        return self._case(subject, case_tok, whens, default, end_tok)

    def _case(self, subject, case_tok, whens, default, end_tok) -> n.Node:
        children = [subject, default] + [x for pair in whens for x in pair]
        node = n.Case(subject, tuple(whens), default, _covering(case_tok, end_tok))
        return self._made(node, *children)

    def parens(self, lpar: Token, inner: n.Node, rpar: Token) -> n.Node:
        return self._made(n.Parens(inner, _covering(lpar, rpar)), inner)

    # operators
    def negate(self, minus: Token, operand: n.Node) -> n.Node:
        return self._made(n.Unary("-", operand, _covering(minus, operand)), operand)

    def not_op(self, not_tok: Token, operand: n.Node) -> n.Node:
        return self._made(n.Unary("not", operand, _covering(not_tok, operand)), operand)

    def binary(self, left: n.Node, op: Token, right: n.Node) -> n.Node:
        node = n.Binary(str(op), left, right, _covering(left, right), _token_span(op))
        return self._made(node, left, right)

    def comparison(self, left: n.Node, op: Token, right: n.Node) -> n.Node:
        return self.binary(left, op, right)

    def and_chain(self, *items: n.Node) -> n.Node:
        return self._chain("and", items)

    def or_chain(self, *items: n.Node) -> n.Node:
        return self._chain("or", items)

    def _chain(self, op: str, items: tuple) -> n.Node:
        node = n.Chain(op, tuple(items), _covering(items[0], items[-1]))
        # A chain is one level however long it is.
        return self._made(node, *items)

    def is_null(self, operand: n.Node, not_tok: Token | None, null_tok: Token) -> n.Node:
        return self._made(n.IsNull(operand, not_tok is not None, _covering(operand, null_tok)), operand)

    def is_distinct(self, left: n.Node, not_tok: Token | None, right: n.Node) -> n.Node:
        return self._made(n.IsDistinct(left, right, not_tok is not None, _covering(left, right)), left, right)

    def in_list(self, operand: n.Node, not_tok: Token | None, lpar: Token, items: list, rpar: Token) -> n.Node:
        node = n.InList(operand, tuple(items), not_tok is not None, _covering(operand, rpar))
        return self._made(node, operand, *items)

    def between(self, operand: n.Node, not_tok: Token | None, low: n.Node, high: n.Node) -> n.Node:
        node = n.Between(operand, low, high, not_tok is not None, _covering(operand, high))
        return self._made(node, operand, low, high)

    def like(self, operand: n.Node, not_tok: Token | None, pattern: n.Node, escape: n.Node | None) -> n.Node:
        node = n.Like(operand, pattern, escape, not_tok is not None, _covering(operand, escape or pattern))
        return self._made(node, operand, pattern, escape)


def _parse_date_literal(raw: str, span: Span) -> dt.date:
    try:
        value = parse_date_text(raw)
        if value is None:
            raise ValueError
        return value
    except ValueError:
        raise SyntaxProblem(f"invalid date literal {raw!r}", code="invalid_literal", span=span,
                            hint="write dates as date 'YYYY-MM-DD' (RFC 3339 full-date)") from None


def _parse_timestamp_literal(raw: str, span: Span) -> dt.datetime:
    value = parse_timestamp_text(raw)
    if value is None:
        raise SyntaxProblem(f"invalid timestamp literal {raw!r}", code="invalid_literal", span=span,
                            hint="write timestamps as timestamp 'YYYY-MM-DD HH:MM:SS[.ffffff]'")
    return value


@lru_cache(maxsize=1)
def _grammar_text() -> str:
    return resources.files("rexpr.language").joinpath("grammar.lark").read_text(encoding="utf-8")


_BUILDER = _Builder()


@lru_cache(maxsize=1)
def _lark() -> Lark:
    return Lark(_grammar_text(), parser="lalr", lexer="contextual", maybe_placeholders=True,
                transformer=_BUILDER)


def _expected_text(expected: set[str]) -> str:
    names = sorted({_TERMINAL_NAMES.get(e, f"'{e.strip('_').lower()}'") for e in expected})
    if len(names) > 8:
        names = names[:8] + ["..."]
    return ", ".join(names)


def parse(text: str) -> n.Node:
    """Parse expression text into a syntax tree, or raise a :class:`~rexpr.errors.ExpressionError`."""
    if not isinstance(text, str):
        raise SyntaxProblem(f"expression must be text, not {type(text).__name__}")
    if len(text) > MAX_LENGTH:
        raise LimitExceeded(f"expression is {len(text):,} characters; the limit is {MAX_LENGTH:,}",
                            code="too_long", span=Span(MAX_LENGTH, MAX_LENGTH + 1), text=text)
    if "\x00" in text:
        at = text.index("\x00")
        raise SyntaxProblem("NUL character in expression", span=Span(at, at + 1), text=text,
                            hint="write the character inside a string literal with a cast or remove it")
    surrogate = _SURROGATE.search(text)
    if surrogate:
        at = surrogate.start()
        raise SyntaxProblem("expression contains a lone surrogate code point, which is not Unicode text",
                            span=Span(at, at + 1), text=text)
    if not text.strip():
        raise SyntaxProblem("empty expression", span=Span(0, max(1, len(text))), text=text)
    lark = _lark()
    _BUILDER.reset()
    try:
        result = lark.parse(text)
    except VisitError as exc:  # an error raised inside a builder callback
        inner = exc.orig_exc
        if isinstance(inner, RexprError):
            raise _attach(inner, text) from None
        raise
    except RexprError as exc:
        raise _attach(exc, text) from None
    except UnexpectedInput as exc:
        raise _syntax_error(exc, text) from None
    finally:
        _BUILDER.reset()
    return result


def _attach(exc: RexprError, text: str) -> RexprError:
    if hasattr(exc, "with_text"):
        exc.with_text(text)  # type: ignore[attr-defined]
    return exc


def _syntax_error(exc: UnexpectedInput, text: str) -> SyntaxProblem:
    pos = exc.pos_in_stream if exc.pos_in_stream is not None else len(text)
    if isinstance(exc, UnexpectedCharacters):
        char = text[pos] if pos < len(text) else ""
        hint = None
        if char == '"':
            hint = 'double quotes name a field; close it with another "'
        elif char == "'":
            hint = "unterminated string: close it with ' (write '' for a quote inside)"
        return SyntaxProblem(f"unexpected character {char!r}", span=Span(pos, pos + 1), text=text, hint=hint)
    if isinstance(exc, UnexpectedEOF):
        return SyntaxProblem(f"unexpected end of expression; expected {_expected_text(set(exc.expected))}",
                             span=Span(len(text), len(text) + 1), text=text)
    assert isinstance(exc, UnexpectedToken)
    token = exc.token
    if token.type == "$END":
        return SyntaxProblem(f"unexpected end of expression; expected {_expected_text(exc.accepts or exc.expected)}",
                             span=Span(len(text), len(text) + 1), text=text)
    hint = None
    word = str(token).lower()
    if word in _KEYWORDS:
        hint = f'{word!r} is a keyword; to name a field {token!s}, quote it: "{token!s}"'
    span = _token_span(token)
    return SyntaxProblem(f"unexpected {str(token)!r}; expected {_expected_text(exc.accepts or exc.expected)}",
                         span=span, text=text, hint=hint)
