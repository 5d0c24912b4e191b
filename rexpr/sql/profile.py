"""What a SQL dialect module provides. The lowering driver (``rexpr.sql.lowering``) walks the
typed tree and asks the dialect for each node; a dialect module is data plus small functions.

Contract for ``rexpr/sql/dialects/<engine>.py``: a module-level ``PROFILE: DialectProfile``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Literal, Protocol

from sqlglot import exp

from rexpr.sql.quoting import Quoting
from rexpr.typed import TCall, Typed

Lowering = Literal["faithful", "native"]


class LowerContext(Protocol):
    """What a lowerer may ask of the driver while lowering one node."""

    engine: str
    lowering: Lowering

    def lower(self, node: Typed) -> exp.Expression:
        """Lower a child node (already parenthesised where precedence needs it)."""

    def refuse(self, node: Typed, reason: str) -> None:
        """Raise :class:`~rexpr.errors.NotPushable` for this node with a one-line reason."""


# A lowerer gets the context, the typed call and its lowered arguments (in order), and returns
# the sqlglot tree for the call, or calls ``ctx.refuse(node, reason)``.
Lowerer = Callable[[LowerContext, TCall, list[exp.Expression]], exp.Expression]


@dataclass(frozen=True)
class Capability:
    """One function on one engine under the faithful lowering."""

    status: Literal["faithful", "conditional", "not_pushable"]
    reason: str = ""  # for conditional: which argument forms are faithful; for not_pushable: why


@dataclass(frozen=True)
class Divergence:
    """A measured case where the native lowering disagrees with the reference on this engine.

    ``fields`` and ``rows`` give a small input (dotted field name, type spelling; one tuple of
    values per row); tests run the native SQL on the real engine and check it really differs."""

    function: str                             # catalogue id
    expression: str                           # rexpr text
    what: str                                 # one line: what the native SQL gets wrong
    fields: tuple[tuple[str, str], ...] = ()
    rows: tuple[tuple[object, ...], ...] = ((),)


@dataclass(frozen=True)
class DialectProfile:
    name: str                           # engine name: duckdb, sqlite, postgres, mariadb
    sqlglot_dialect: str                # sqlglot dialect used to print the trees
    session_settings: tuple[str, ...]   # statements/assumptions the SQL relies on (time zone, sql_mode, ...)
    faithful: dict[str, Lowerer]        # function id -> lowerer reproducing docs/semantics.md
    native: dict[str, Lowerer]          # function id -> the plain hand-written mapping
    capabilities: dict[str, Capability]  # function id -> capability under the faithful lowering
    literal: Callable[[object, "object"], exp.Expression] | None = None  # (value, DataType) -> literal tree
    notes: tuple[str, ...] = field(default=())
    # How identifiers and string literals are spelled (rexpr.sql.quoting); None: the default
    # for the sqlglot dialect (double-quoted identifiers, NUL refused).
    quoting: Quoting | None = None
    divergences: tuple[Divergence, ...] = field(default=())
    # For the planner: why this call's faithful SQL holds only for some data values (which no
    # typed tree can prove), or None. Such calls are never pushed into a filter.
    data_dependent: Callable[[TCall], str | None] | None = None
    # Why the engine's own SQL parser refuses this statement text (a limit no nesting depth
    # expresses, such as a fixed parser stack), or None when it takes it.
    parse_problem: Callable[[str], str | None] | None = None
