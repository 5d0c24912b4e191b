"""The one error hierarchy users see.

    RexprError                      every error carries a stable ``code``
    ├── ExpressionError             points into the expression text (span, caret)
    │   ├── SyntaxProblem           code ``syntax_error``
    │   ├── LimitExceeded           codes ``too_long``, ``too_deep``
    │   └── TypeProblem             codes ``unknown_field``, ``unknown_function``,
    │                               ``type_mismatch``, ``wrong_arity``, ``invalid_literal``
    ├── SchemaProblem               code ``invalid_schema``
    ├── InputProblem                code ``invalid_input`` (rows files, options)
    ├── EvaluationFailed            code ``evaluation_error``: a row raised a semantic error
    ├── NotPushable                 code ``not_pushable``: a lowering refuses
    └── EngineUnavailable           code ``engine_unavailable``
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Span:
    """Half-open character range ``[start, end)`` in the expression text."""

    start: int
    end: int

    def union(self, other: "Span") -> "Span":
        return Span(min(self.start, other.start), max(self.end, other.end))


def line_and_column(text: str, offset: int) -> tuple[int, int]:
    """1-based line and column of a character offset."""
    line = text.count("\n", 0, offset) + 1
    column = offset - (text.rfind("\n", 0, offset) + 1) + 1
    return line, column


def caret_excerpt(text: str, span: Span) -> str:
    """The offending line with carets under the span (first line of the span only)."""
    start = max(0, min(span.start, len(text)))
    line_start = text.rfind("\n", 0, start) + 1
    line_end = text.find("\n", start)
    if line_end == -1:
        line_end = len(text)
    line = text[line_start:line_end]
    end = max(start + 1, min(span.end, line_end))
    # Keep long lines readable: show a window around the span.
    left = max(line_start, start - 60)
    right = min(line_end, max(end, start + 1) + 60)
    shown = text[left:right].replace("\t", " ")
    prefix = "..." if left > line_start else ""
    suffix = "..." if right < line_end else ""
    pad = len(prefix) + (start - left)
    width = max(1, min(end, right) - start)
    del line
    return f"{prefix}{shown}{suffix}\n{' ' * pad}{'^' * width}"


class RexprError(Exception):
    """Base of every error rexpr raises on purpose."""

    code: str = "error"

    def __init__(self, message: str, *, code: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        if code is not None:
            self.code = code

    def to_dict(self) -> dict[str, Any]:
        return {"code": self.code, "message": self.message}

    def render(self) -> str:
        return f"error[{self.code}]: {self.message}"


class ExpressionError(RexprError):
    """An error located in the expression text."""

    def __init__(self, message: str, *, code: str | None = None, span: Span | None = None,
                 text: str | None = None, hint: str | None = None) -> None:
        super().__init__(message, code=code)
        self.span = span
        self.text = text
        self.hint = hint

    def with_text(self, text: str) -> "ExpressionError":
        if self.text is None:
            self.text = text
        return self

    def to_dict(self) -> dict[str, Any]:
        data = super().to_dict()
        if self.hint:
            data["hint"] = self.hint
        if self.span is not None:
            data["span"] = {"start": self.span.start, "end": self.span.end}
            if self.text is not None:
                line, column = line_and_column(self.text, self.span.start)
                data["span"].update(line=line, column=column)
        return data

    def render(self) -> str:
        out = [f"error[{self.code}]: {self.message}"]
        if self.span is not None and self.text is not None:
            line, column = line_and_column(self.text, self.span.start)
            out.append(f" --> line {line}, column {column}")
            out.append(caret_excerpt(self.text, self.span))
        if self.hint:
            out.append(f"hint: {self.hint}")
        return "\n".join(out)

    def __str__(self) -> str:
        return self.render()


class SyntaxProblem(ExpressionError):
    code = "syntax_error"


class LimitExceeded(ExpressionError):
    code = "too_long"


class TypeProblem(ExpressionError):
    code = "type_mismatch"


class SchemaProblem(RexprError):
    code = "invalid_schema"


class InputProblem(RexprError):
    code = "invalid_input"


class EvaluationFailed(RexprError):
    """Raised when a caller asks for values and some row produced a semantic error."""

    code = "evaluation_error"

    def __init__(self, message: str, *, row: int, error_class: str) -> None:
        super().__init__(message)
        self.row = row
        self.error_class = error_class

    def to_dict(self) -> dict[str, Any]:
        return {**super().to_dict(), "row": self.row, "error_class": self.error_class}


class NotPushable(RexprError):
    code = "not_pushable"


class EngineUnavailable(RexprError):
    code = "engine_unavailable"
