"""A lean LALR(1) driver over the tables lark builds from ``grammar.lark``.

lark's own loop spends most of a short parse in per-token and per-reduction machinery (token
objects with line counting, wrapper chains around every callback). This driver reads the same
artefacts lark computes (the parse table, the per-state scanners of its contextual lexer, the
rules with their shaping options) and runs them in one tight loop, so the grammar stays the only
definition of the language. It shapes children exactly as lark's tree builder does for
``maybe_placeholders=True``: filtered tokens dropped, ``_rules`` spliced into their parent,
``None`` for absent optional items, single children of ``?rules`` passed through.

It only ever answers for valid text: when the lexer or the table has no move it returns
``None`` and the caller re-parses with lark, whose exception carries the expected-token sets
the error messages are made of. Errors raised by the builder propagate unchanged, at the same
reduction lark would have raised them, because the tokens and reductions are the same.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Callable

from lark import Lark
from lark.parsers.lalr_analysis import Shift


class Tok:
    """A token as the builder sees it: the same fields it reads from a lark ``Token``."""

    __slots__ = ("type", "value", "start_pos", "end_pos")

    def __init__(self, type_: str, value: str, start_pos: int, end_pos: int) -> None:
        self.type = type_
        self.value = value
        self.start_pos = start_pos
        self.end_pos = end_pos

    def __str__(self) -> str:
        return self.value

    def __len__(self) -> int:
        return len(self.value)

    def __repr__(self) -> str:
        return f"Tok({self.type!r}, {self.value!r}, {self.start_pos}, {self.end_pos})"


@dataclass(frozen=True)
class _Reduction:
    """One grammar rule and how lark's tree builder shapes its children."""

    size: int  # symbols popped
    origin: str  # the nonterminal pushed
    passthrough: bool  # a ``?rule`` with one kept child and nothing to shape: the child is the value
    shape: Callable[[list, object], object]  # (children, builder) -> value


@dataclass(frozen=True)
class _Scanner:
    pattern: re.Pattern[str]  # one alternation of the state's terminals, in lark's order
    retype: dict[str, Callable[[str], str | None]]  # keyword test for a terminal that may be one
    ignore: frozenset[str]


class Tables:
    """Everything the driver needs, taken once from a built ``Lark`` instance (parser='lalr',
    lexer='contextual', maybe_placeholders=True, no lexer callbacks) and the builder class whose
    methods are named after the grammar's rules and aliases."""

    def __init__(self, lark: Lark, builder: type) -> None:
        frontend = lark.parser
        table = frontend.parser.parser.parse_table
        rules: list[_Reduction] = []
        index_of: dict[Any, int] = {}
        self.actions: dict[int, dict[str, int]] = {}
        for state, moves in table.states.items():
            encoded: dict[str, int] = {}
            for symbol, (action, arg) in moves.items():
                if action is Shift:
                    encoded[symbol] = arg
                else:
                    if arg not in index_of:
                        index_of[arg] = len(rules)
                        rules.append(_reduction(arg, builder))
                    encoded[symbol] = ~index_of[arg]  # negative: reduce by rule ~code
            self.actions[state] = encoded
        self.rules = tuple(rules)
        (self.start,) = table.start_states.values()
        (self.end,) = table.end_states.values()
        if lark.lexer_conf.callbacks:
            raise ValueError("the lean driver does not run lexer callbacks")
        by_lexer: dict[int, _Scanner] = {}
        # per state: (match at a position, terminals to skip, keyword retyping)
        self.scanners: dict[int, tuple[Callable[[str, int], re.Match[str] | None], frozenset[str], dict]] = {}
        for state, lexer in frontend.lexer.lexers.items():
            if id(lexer) not in by_lexer:
                by_lexer[id(lexer)] = _scanner(lexer)
            scanner = by_lexer[id(lexer)]
            self.scanners[state] = (scanner.pattern.match, scanner.ignore, scanner.retype)
        # (state below, state on top, lookahead) -> top state after every pass-through reduction
        # that lookahead triggers; filled as texts are parsed (a chain like atom -> unary -> ...
        # -> and_expr is one step then).
        self.climbs: dict[tuple[int, int, str], int] = {}

    def climb(self, below: int, top: int, kind: str) -> int:
        state = top
        while state != self.end:
            code = self.actions[state].get(kind)
            if code is None or code >= 0 or not self.rules[~code].passthrough:
                break
            state = self.actions[below][self.rules[~code].origin]
        self.climbs[(below, top, kind)] = state
        return state


def _reduction(rule: Any, builder: type) -> _Reduction:
    """Mirror of lark's ``maybe_create_child_filter`` and ``ExpandSingleChild`` for one rule."""
    expansion = rule.expansion
    empty = rule.options.empty_indices
    if empty:
        counts = [len(ones) for ones in "".join(str(int(b)) for b in empty).split("0")]
    else:
        counts = [0] * (len(expansion) + 1)
    include: list[tuple[int, bool, int]] = []  # (child index, splice it, Nones inserted before it)
    nones = 0
    for i, symbol in enumerate(expansion):
        nones += counts[i]
        if rule.options.keep_all_tokens or not (symbol.is_term and symbol.filter_out):
            include.append((i, not symbol.is_term and symbol.name.startswith("_"), nones))
            nones = 0
    trailing = nones + counts[len(expansion)]
    name = str(rule.alias or rule.options.template_source or rule.origin.name)
    origin = str(rule.origin.name)
    expand1 = bool(rule.options.expand1 and not rule.alias)
    passthrough = expand1 and include == [(0, False, 0)] and trailing == 0 and len(expansion) == 1
    method = getattr(builder, name, None) if not name.startswith("_") else None
    if method is None and not (passthrough or origin.startswith("_")):
        raise ValueError(f"grammar rule {name!r} has no builder method")
    return _Reduction(len(expansion), origin, passthrough, _shaper(tuple(include), trailing, expand1, method))


def _shaper(include: tuple[tuple[int, bool, int], ...], trailing: int, expand1: bool,
            method: Callable[..., object] | None) -> Callable[[list, object], object]:
    if not trailing and not any(splice or nones for _, splice, nones in include):
        keep = tuple(i for i, _, _ in include)
        if method is not None and not expand1:  # the common case: drop filtered tokens, call
            return lambda children, builder: method(builder, *[children[i] for i in keep])

    def shape(children: list, builder: object) -> object:
        args: list[object] = []
        for i, splice, nones in include:
            if nones:
                args.extend([None] * nones)
            if splice:
                args.extend(children[i])  # type: ignore[arg-type]
            else:
                args.append(children[i])
        if trailing:
            args.extend([None] * trailing)
        if expand1 and len(args) == 1:
            return args[0]
        if method is None:
            return args  # a ``_rule``: the parent splices these children
        return method(builder, *args)

    return shape


def _scanner(lexer: Any) -> _Scanner:
    scanner = lexer.scanner  # builds lark's scanner for this state and its keyword callbacks
    alternatives = "|".join(f"(?P<{t.name}>{t.pattern.to_regexp()})" for t in scanner.terminals)
    retype = {}
    for name, callback in lexer.callback.items():
        retype[name] = callback.scanner.fullmatch  # lark's UnlessCallback: a keyword spelt like a NAME
    return _Scanner(re.compile(alternatives, lexer.g_regex_flags), retype, frozenset(lexer.ignore_types))


def run(tables: Tables, text: str, builder: object) -> object | None:
    """The value of the start rule, or None when the text is not in the language."""
    actions, rules, scanners, climbs, end = tables.actions, tables.rules, tables.scanners, tables.climbs, tables.end
    states = [tables.start]
    values: list[object] = []
    push_state, push_value = states.append, values.append
    pos, length = 0, len(text)
    while True:
        state = states[-1]
        # The next token, lexed with the scanner of the state after the last shift (as lark does).
        match_at, ignore, retype = scanners[state]
        token: Tok | None = None
        kind = "$END"
        while pos < length:
            match = match_at(text, pos)
            if match is None:
                return None
            kind = match.lastgroup  # type: ignore[assignment]
            start, pos = pos, match.end()
            if kind in retype:
                ignored = kind in ignore
                kind = retype[kind](match.group()) or kind
                if ignored:
                    kind = "$END"
                    continue
            elif kind in ignore:
                kind = "$END"
                continue
            token = Tok(kind, match.group(), start, pos)
            break
        moves = actions[state]
        while True:
            code = moves.get(kind)
            if code is None:
                return None
            if code >= 0:
                if token is None:
                    return None
                push_state(code)
                push_value(token)
                break
            rule = rules[~code]
            if rule.passthrough:  # the value stays; only the state on top changes
                below = states[-2]
                top = climbs.get((below, state, kind))
                state = states[-1] = top if top is not None else tables.climb(below, state, kind)
            else:
                size = rule.size
                if size:
                    children = values[-size:]
                    del values[-size:]
                    del states[-size:]
                else:
                    children = []
                push_value(rule.shape(children, builder))
                state = actions[states[-1]][rule.origin]
                push_state(state)
            if token is None and state == end:
                return values[-1]
            moves = actions[state]
