"""The SQL text the runners send, printed by sqlglot in the engine's dialect.

Many items over a row range go in one statement:
``SELECT <item1> AS "v0", ... FROM "rexpr_input" WHERE "row" >= lo AND "row" < hi ORDER BY "row"``.
Result columns are read by position, so the aliases are generated (``v0``, ``v1``, ...): an
item's own alias may be one an engine rejects (MariaDB refuses astral characters in names).

Bisecting sends thousands of such statements over subsets of the same items, so
:class:`SelectBuilder` prints each item once with sqlglot and joins the printed pieces; a
select-list entry never needs parentheses, so the text equals what sqlglot prints for the
whole tree (:func:`select_items`, checked in the tests).
"""

from __future__ import annotations

from typing import Sequence

from sqlglot import exp


def quoted(name: str, dialect: str) -> str:
    """A quoted identifier, with the dialect's own escaping of the quote character."""
    return exp.to_identifier(name, quoted=True).sql(dialect=dialect)


def alias_of(position: int) -> str:
    return f"v{position}"


def select_items(expressions: Sequence[exp.Expression], table: str, row_number: str, dialect: str,
                 rows: tuple[int, int] | None = None) -> str:
    """The batched SELECT as one sqlglot tree; ``rows`` is a half-open row-number range."""
    order = exp.column(row_number, quoted=True)
    query = exp.select(*[exp.alias_(e, alias_of(i), quoted=True) for i, e in enumerate(expressions)])
    query = query.from_(exp.Table(this=exp.to_identifier(table, quoted=True)))
    if rows is not None:
        lo, hi = rows
        query = query.where(exp.and_(exp.GTE(this=order.copy(), expression=exp.Literal.number(lo)),
                                     exp.LT(this=order.copy(), expression=exp.Literal.number(hi))))
    return query.order_by(order).sql(dialect=dialect)


class SelectBuilder:
    """The same statements as :func:`select_items`, with each item printed only once."""

    def __init__(self, expressions: Sequence[exp.Expression | str], table: str, row_number: str, dialect: str) -> None:
        # An item given as text is taken as already printed in this dialect.
        self._items = [e if isinstance(e, str) else e.sql(dialect=dialect) for e in expressions]
        self._table = quoted(table, dialect)
        self._row = quoted(row_number, dialect)
        self._aliases = [quoted(alias_of(p), dialect) for p in range(len(expressions))]

    def sql(self, indexes: Sequence[int], rows: tuple[int, int] | None = None) -> str:
        listed = ", ".join(f"{self._items[i]} AS {self._aliases[p]}" for p, i in enumerate(indexes))
        where = "" if rows is None else f" WHERE {self._row} >= {int(rows[0])} AND {self._row} < {int(rows[1])}"
        return f"SELECT {listed} FROM {self._table}{where} ORDER BY {self._row}"


def create_table(table: str, columns: Sequence[tuple[str, str]], dialect: str, *, prefix: str = "CREATE TEMPORARY TABLE",
                 suffix: str = "") -> str:
    """DDL with quoted column names; ``columns`` pairs a name with its engine type text."""
    body = ", ".join(f"{quoted(name, dialect)} {type_sql}" for name, type_sql in columns)
    return f"{prefix} {quoted(table, dialect)} ({body}){suffix}"


def drop_table(table: str, dialect: str) -> str:
    """Drops only the session's temporary table, never a permanent table of the same name."""
    if dialect == "postgres":
        return f"DROP TABLE IF EXISTS pg_temp.{quoted(table, dialect)}"
    if dialect == "mysql":
        return f"DROP TEMPORARY TABLE IF EXISTS {quoted(table, dialect)}"
    return f"DROP TABLE IF EXISTS temp.{quoted(table, dialect)}"


def probe_names(table: str, dialect: str) -> str:
    """A statement whose result description lists the table's column names as stored."""
    return exp.select(exp.Star()).from_(exp.Table(this=exp.to_identifier(table, quoted=True))).limit(0).sql(
        dialect=dialect)
