"""Engine failures: the typed errors the runners raise, and how a driver error becomes a
per-row error class or a per-row engine limit.

An engine limit comes first: a row whose value the engine cannot represent is not an error of
the semantics, it is an :class:`~rexpr.values.EngineLimit` (see :func:`limit_of`):
0. MariaDB's own DOUBLE overflow (1690 "DOUBLE value is out of range"; our raise construct is a
   BIGINT overflow, so this one is always the engine's), or a ``rexpr-limit:<reason>`` tag the
   faithful lowering raises (reasons ``nan``, ``non_finite``, ``nul``). A limit tag next to a
   class tag, or two different limit reasons, is nothing we know: neither limit nor row error.

Otherwise, classification order (first match wins):
1. a ``rexpr:<class>`` tag in the message (the faithful lowering raises these on purpose;
   SQLite's ``rexpr_raise`` passes its tag on a side channel because the driver drops the text).
   Two different tags in one message is no row error we know, so it is not classified;
2. the SQLSTATE (ISO/IEC 9075-2 clause 24; psycopg's ``diag.sqlstate``);
3. the MariaDB error number;
4. DuckDB and SQLite message patterns (these engines have no SQLSTATE on their errors).

A failure that matches none of these is not a row error: :class:`EngineError` carries the SQL
and the engine message, so it is never mistaken for a null.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import EvaluationFailed, RexprError
from rexpr.values import EngineLimit, RowError


class EngineError(RexprError):
    """An engine refused or failed a statement for a reason that is not a per-row error."""

    code = "engine_error"

    def __init__(self, message: str, *, engine: str, sql: str | None = None,
                 engine_message: str | None = None, code: str | None = None) -> None:
        super().__init__(message, code=code)
        self.engine = engine
        self.sql = sql
        self.engine_message = engine_message

    def to_dict(self) -> dict[str, Any]:
        data = {**super().to_dict(), "engine": self.engine}
        if self.sql is not None:
            data["sql"] = self.sql
        if self.engine_message is not None:
            data["engine_message"] = self.engine_message
        return data


class UnstorableInput(EngineError):
    """The engine cannot hold an input value or column name exactly (NUL in PostgreSQL text,
    names MariaDB rejects, names an engine would rename or truncate)."""

    code = "engine_cannot_store"


class EngineLimitReached(EngineError):
    """A statement on a caller's table reached a value the engine cannot represent (the planner's
    pushed SQL): rexpr will not read a wrong row, so the query fails."""

    code = "engine_limit"

    def __init__(self, message: str, *, engine: str, reason: str, sql: str | None = None,
                 engine_message: str | None = None) -> None:
        super().__init__(message, engine=engine, sql=sql, engine_message=engine_message)
        self.reason = reason

    def to_dict(self) -> dict[str, Any]:
        return {**super().to_dict(), "reason": self.reason}


class SourceRowFailed(EvaluationFailed):
    """A statement on a caller's table raised a per-row error; the engine does not say which
    row, so ``row`` is -1."""

    def __init__(self, message: str, *, error_class: str, engine: str, sql: str) -> None:
        super().__init__(message, row=-1, error_class=error_class)
        self.engine = engine
        self.sql = sql


@dataclass(frozen=True)
class DriverFailure:
    """What a driver said when a statement failed, in driver-neutral form."""

    engine: str
    message: str
    kind: str = ""               # exception class name (DuckDB encodes the error type in it)
    sqlstate: str | None = None
    errno: int | None = None     # MariaDB error number
    tag: str | None = None       # tag passed on a side channel (SQLite rexpr_raise)


class StatementFailed(Exception):
    """Internal: one statement failed; the bisect decides what it means."""

    def __init__(self, failure: DriverFailure, sql: str) -> None:
        super().__init__(failure.message)
        self.failure = failure
        self.sql = sql


_CLASS_NAMES = "|".join(sorted((e.value for e in ErrorClass), key=len, reverse=True))
# The tag stands alone: not part of a longer word, so 'xrexpr:...' or '...:out_of_rangex' do not count.
_TAG = re.compile(rf"(?<![A-Za-z0-9_])rexpr:({_CLASS_NAMES})(?![A-Za-z0-9_])")

LIMIT_TAG = "rexpr-limit:"
_LIMIT = re.compile(r"(?<![A-Za-z0-9_])rexpr-limit:([a-z_]+)(?![A-Za-z0-9_])")
# Raised by the engine's own DOUBLE arithmetic (1e308 * 10, exp(1000)); the message quotes the
# expression, so tags inside it are quoted text, not raised.
_MARIADB_DOUBLE = re.compile(r"^DOUBLE value is out of range\b")
# What each limit reason says the engine cannot represent (for messages and reports).
LIMIT_WHAT: dict[str, str] = {
    "nan": "a NaN float64 (SQLite REAL has no NaN)",
    "non_finite": "a NaN or infinite float64 (MariaDB DOUBLE has neither)",
    "nul": "text containing U+0000 (SQLite's text functions stop at it)",
}

# ISO/IEC 9075-2 clause 24 (table 38, SQLSTATE class 22 "data exception"); 22P02 is
# PostgreSQL's own code for invalid text representation (PostgreSQL manual, appendix A).
SQLSTATE_CLASSES: dict[str, ErrorClass] = {
    "22003": ErrorClass.OUT_OF_RANGE,
    "22012": ErrorClass.DIVISION_BY_ZERO,
    "22018": ErrorClass.INVALID_CAST,
    "22P02": ErrorClass.INVALID_CAST,
    "22007": ErrorClass.INVALID_DATETIME,
    "22008": ErrorClass.INVALID_DATETIME,
    "2201E": ErrorClass.INVALID_ARGUMENT,
    "2201F": ErrorClass.INVALID_ARGUMENT,
    "22011": ErrorClass.INVALID_ARGUMENT,
    "22019": ErrorClass.INVALID_ESCAPE,
    "22025": ErrorClass.INVALID_ESCAPE,
}

# MariaDB server error numbers (MariaDB knowledge base, "MariaDB Error Codes").
MARIADB_ERRNO_CLASSES: dict[int, ErrorClass] = {
    1690: ErrorClass.OUT_OF_RANGE,       # ER_DATA_OUT_OF_RANGE: BIGINT value is out of range
    1264: ErrorClass.OUT_OF_RANGE,       # ER_WARN_DATA_OUT_OF_RANGE
    1365: ErrorClass.DIVISION_BY_ZERO,   # ER_DIVISION_BY_ZERO
    1366: ErrorClass.INVALID_CAST,       # ER_TRUNCATED_WRONG_VALUE_FOR_FIELD
}

# (engine, exception class name, message pattern) -> class. Kept narrow on purpose: an
# unknown message is an EngineError, never a guessed class.
_MESSAGE_PATTERNS: tuple[tuple[str, str, re.Pattern[str], ErrorClass], ...] = (
    ("duckdb", "InvalidInputException", re.compile(r"\bDivision by zero\b"), ErrorClass.DIVISION_BY_ZERO),
    ("duckdb", "OutOfRangeException", re.compile(r"\bOverflow in\b|\bout of range\b", re.I),
     ErrorClass.OUT_OF_RANGE),
    ("duckdb", "ConversionException", re.compile(r"\bout of range for the destination type\b"),
     ErrorClass.OUT_OF_RANGE),
    ("duckdb", "ConversionException", re.compile(r"Could not convert string .* to (DATE|TIMESTAMP)|"
                                                  r"date field value out of range|invalid date field format"),
     ErrorClass.INVALID_DATETIME),
    ("duckdb", "ConversionException", re.compile(r"Could not convert string .* to (INT|BIGINT|DOUBLE|BOOL)"),
     ErrorClass.INVALID_CAST),
    ("duckdb", "SyntaxException", re.compile(r"^Syntax Error: (Invalid escape string\. Escape string must be empty "
                                             r"or one character\.|Like pattern must not end with escape character!)$"),
     ErrorClass.INVALID_ESCAPE),
    ("sqlite", "OperationalError", re.compile(r"^integer overflow$"), ErrorClass.OUT_OF_RANGE),
    ("sqlite", "OperationalError", re.compile(r"^ESCAPE expression must be a single character$"),
     ErrorClass.INVALID_ESCAPE),
)


# DuckDB and PostgreSQL append the statement text around the failing spot ("LINE 1: ..."); tags
# quoted there are SQL the engine shows, not raised (generated seed 6 cases 2860 and 8045: a
# cast's failure quoted a division_by_zero raise construct beside it).
_CONTEXT = re.compile(r"\n\s*LINE \d+:.*", re.S)


def _raised_text(text: str | None) -> str | None:
    return _CONTEXT.sub("", text) if text else text


def _first_line(message: str) -> str:
    return message.splitlines()[0][:200] if message else ""


def limit_of(failure: DriverFailure) -> EngineLimit | None:
    """The engine limit a failure stands for, or None when it is not one."""
    if failure.engine == "mariadb" and failure.errno == 1690 and _MARIADB_DOUBLE.match(failure.message):
        return EngineLimit("non_finite", failure.engine, _first_line(failure.message))
    reasons: set[str] = set()
    classes: set[str] = set()
    for text in (failure.tag, _raised_text(failure.message)):
        if text:
            reasons |= {match[1] for match in _LIMIT.finditer(text)}
            classes |= {match[1] for match in _TAG.finditer(text)}
    if len(reasons) == 1 and not classes:
        return EngineLimit(reasons.pop(), failure.engine, _first_line(failure.message))
    return None


def _has_limit_tag(failure: DriverFailure) -> bool:
    return any(text and _LIMIT.search(text) for text in (failure.tag, _raised_text(failure.message)))


def row_outcome(failure: DriverFailure) -> RowError | EngineLimit | None:
    """What one failing (row, item) stands for: an engine limit, a row error, or None (neither)."""
    limit = limit_of(failure)
    if limit is not None:
        return limit
    error_class = classify(failure)
    return None if error_class is None else RowError(error_class, _first_line(failure.message))


def classify(failure: DriverFailure) -> ErrorClass | None:
    """The per-row error class a failure stands for, or None when it is not a row error (an
    engine limit is not one: see :func:`limit_of`)."""
    if limit_of(failure) is not None or _has_limit_tag(failure):
        return None
    for text in (failure.tag, _raised_text(failure.message)):
        if text:
            tagged = {match[1] for match in _TAG.finditer(text)}
            if len(tagged) > 1:  # a raise construct quotes only itself: two tags is no row error we know
                return None
            if tagged:
                return ErrorClass(tagged.pop())
    if failure.sqlstate and failure.sqlstate in SQLSTATE_CLASSES:
        return SQLSTATE_CLASSES[failure.sqlstate]
    if failure.engine == "mariadb" and failure.errno in MARIADB_ERRNO_CLASSES:
        return MARIADB_ERRNO_CLASSES[failure.errno]  # type: ignore[index]
    for engine, kind, pattern, error_class in _MESSAGE_PATTERNS:
        if engine == failure.engine and kind == failure.kind and pattern.search(failure.message):
            return error_class
    return None


def failure_from_exception(engine: str, exc: BaseException, tag: str | None = None) -> DriverFailure:
    """Read a driver exception without importing the driver (attributes are duck-typed)."""
    sqlstate = None
    diag = getattr(exc, "diag", None)  # psycopg
    if diag is not None:
        sqlstate = getattr(diag, "sqlstate", None)
    errno = None
    message = str(exc)
    args = getattr(exc, "args", ())
    if engine == "mariadb" and len(args) >= 2 and isinstance(args[0], int):  # PyMySQL: (errno, message)
        errno, message = args[0], str(args[1])
    return DriverFailure(engine, message, type(exc).__name__, sqlstate, errno, tag)


def classify_failure(engine: str, exc: BaseException, sql: str) -> RexprError:
    """One typed error for a failed statement on a caller's table (used by the planner)."""
    if isinstance(exc, RexprError):
        return exc
    return error_for(failure_from_exception(engine, exc), sql)


def error_for(failure: DriverFailure, sql: str) -> RexprError:
    """An engine limit becomes :class:`EngineLimitReached`, a row error class
    :class:`SourceRowFailed`; anything else :class:`EngineError`."""
    limit = limit_of(failure)
    if limit is not None:
        what = LIMIT_WHAT.get(limit.reason, f"a value ({limit.reason})")
        return EngineLimitReached(
            f"{failure.engine} cannot represent {what}, and a row of the pushed filter reached one; rexpr "
            "will not guess that row's answer. Keep the conjunct that computes it local (push only the "
            "other conjuncts and filter on it in rexpr after reading the rows)",
            engine=failure.engine, reason=limit.reason, sql=sql, engine_message=failure.message)
    error_class = classify(failure)
    if error_class is not None:
        return SourceRowFailed(f"{failure.engine}: a row raised {error_class.value}: {failure.message}",
                               error_class=error_class.value, engine=failure.engine, sql=sql)
    return EngineError(f"{failure.engine} failed the statement: {failure.message}", engine=failure.engine,
                       sql=sql, engine_message=failure.message)
