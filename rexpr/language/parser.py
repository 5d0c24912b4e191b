"""Text to syntax tree: the lark LALR grammar, run by a lean driver over lark's own tables
(``rexpr.language.lalr``) that builds nodes during the parse (no intermediate parse tree).
Text the driver rejects is parsed again by lark itself, whose exceptions carry what the error
messages say was expected.

Building nodes during the parse keeps it iterative, so pathological nesting is caught by the
depth limit instead of Python's recursion limit.
"""

from __future__ import annotations

import datetime as dt
import re
import threading
from functools import lru_cache
from importlib import resources

from lark import Lark, Token, Transformer, Tree
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken, VisitError

from rexpr.errors import LimitExceeded, RexprError, Span, SyntaxProblem
from rexpr.language import lalr
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

_TOKENS = (Token, lalr.Tok)


def _token_span(token: Token | lalr.Tok) -> Span:
    start = token.start_pos or 0
    return Span(start, token.end_pos if token.end_pos is not None else start + len(token))


def _bounds(item: object) -> tuple[int, int]:
    if isinstance(item, _TOKENS):
        start = item.start_pos or 0  # type: ignore[union-attr]
        return start, item.end_pos if item.end_pos is not None else start + len(item)  # type: ignore[union-attr]
    span = item.span  # type: ignore[attr-defined]
    return span.start, span.end


def _covering(first: object, last: object) -> Span:
    """The span from one token or node to another (the pieces of a rule come in text order)."""
    first_start, first_end = _bounds(first)
    last_start, last_end = _bounds(last)
    return Span(min(first_start, last_start), max(first_end, last_end))


def _unquote(text: str, quote: str) -> str:
    return text[1:-1].replace(quote * 2, quote)


class _Builder:
    """Turns reductions into nodes while tracking depth; one instance per parse. Every public
    method is named after a grammar rule or alias and takes that rule's shaped children."""

    def __init__(self) -> None:
        self.depth: dict[int, int] = {}

    def _made(self, node: n.Node, *children: object) -> n.Node:
        # Leaves (literals, fields) are depth 1 and are not recorded, hence the default of 1.
        known, deepest = self.depth, 0
        for child in children:
            if child is not None:
                below = known.get(id(child), 1)
                if below > deepest:
                    deepest = below
        depth = deepest + 1
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
        return n.Literal("int", int(digits), _token_span(tok), str(tok))  # a leaf: depth 1

    def float_literal(self, tok: Token) -> n.Node:
        return n.Literal("float", float(str(tok)), _token_span(tok), str(tok))  # a leaf: depth 1

    def string_literal(self, tok: Token) -> n.Node:
        return n.Literal("string", _unquote(str(tok), "'"), _token_span(tok), str(tok))  # a leaf: depth 1

    def true_literal(self, tok: Token) -> n.Node:
        return n.Literal("bool", True, _token_span(tok), "true")  # a leaf: depth 1

    def false_literal(self, tok: Token) -> n.Node:
        return n.Literal("bool", False, _token_span(tok), "false")  # a leaf: depth 1

    def null_literal(self, tok: Token) -> n.Node:
        return n.Literal("null", None, _token_span(tok), "null")  # a leaf: depth 1

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
        return n.Literal(kind, value, span, text)  # a leaf: depth 1

    # names and fields
    def field(self, *names: Token) -> n.Node:
        path = tuple(_unquote(str(t), '"') if t.type == "QUOTED_NAME" else str(t) for t in names)
        return n.FieldRef(path, _covering(names[0], names[-1]))  # a leaf: depth 1

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
        return " ".join(str(w).lower() for w in words), _covering(words[0], words[-1])

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


_RULE_METHODS = frozenset(name for name in vars(_Builder) if not name.startswith("_"))


class _LarkBuilder(Transformer):
    """Hands lark's reductions to the current thread's :class:`_Builder` (lark's own parse is
    the fallback for text the lean driver rejects, so it must build the same nodes)."""

    def __init__(self) -> None:
        super().__init__(visit_tokens=False)
        self.local = threading.local()

    def __default__(self, data: str, children: list, meta: object) -> object:
        if data in _RULE_METHODS:
            return getattr(self.local.builder, data)(*children)
        return Tree(data, children, meta)  # a ``_rule``: lark splices it into its parent


_LARK_BUILDER = _LarkBuilder()


@lru_cache(maxsize=1)
def _lark() -> Lark:
    return Lark(_grammar_text(), parser="lalr", lexer="contextual", maybe_placeholders=True,
                transformer=_LARK_BUILDER)


@lru_cache(maxsize=1)
def _tables() -> lalr.Tables | None:
    """The lean driver's tables, or None when this lark release lays out its tables in a way the
    driver does not know (it reads lark internals): parsing then goes through lark alone."""
    try:
        return lalr.Tables(_lark(), _Builder)
    except Exception:  # noqa: BLE001 - any layout surprise means: do not use the lean driver
        return None


def _expected_text(expected: set[str]) -> str:
    names = sorted({_TERMINAL_NAMES.get(e, f"'{e.strip('_').lower()}'") for e in expected})
    if len(names) > 8:
        names = names[:8] + ["..."]
    return ", ".join(names)


def parse(text: str) -> n.Node:
    """Parse expression text into a syntax tree, or raise a :class:`~rexpr.errors.ExpressionError`."""
    return _parse(text, lean=True)


def parse_with_lark(text: str) -> n.Node:
    """:func:`parse` with lark's own parser loop instead of the lean driver: the same answer,
    slower; the oracle the driver is tested against."""
    return _parse(text, lean=False)


def _parse(text: str, lean: bool) -> n.Node:
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
    try:
        tables = _tables() if lean else None
        result = lalr.run(tables, text, _Builder()) if tables is not None else None
        if result is None:  # not in the language: let lark say why
            result = _lark_parse(text)
    except RexprError as exc:
        raise _attach(exc, text) from None
    return result  # type: ignore[return-value]


def _lark_parse(text: str) -> object:
    _LARK_BUILDER.local.builder = _Builder()
    try:
        return _lark().parse(text)
    except VisitError as exc:  # an error raised inside a builder callback
        inner = exc.orig_exc
        if isinstance(inner, RexprError):
            raise inner from None
        raise
    except UnexpectedInput as exc:
        raise _syntax_error(exc, text) from None
    finally:
        _LARK_BUILDER.local.builder = None


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
