"""Logical types: the closed set of value kinds an expression can carry."""

from __future__ import annotations

import enum
from dataclasses import dataclass, field, replace


class Kind(enum.Enum):
    NULL = "null"  # the type of the bare literal ``null``; coerces to any kind
    BOOL = "bool"
    INT64 = "int64"
    FLOAT64 = "float64"
    STRING = "string"
    DATE = "date"
    TIMESTAMP = "timestamp"  # microseconds, no time zone
    STRUCT = "struct"


SCALAR_KINDS = (Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP)
NUMERIC_KINDS = (Kind.INT64, Kind.FLOAT64)

# Spellings accepted in schemas and in ``cast(x as ...)``; the first of each kind is canonical.
TYPE_NAMES: dict[str, Kind] = {
    "bool": Kind.BOOL, "boolean": Kind.BOOL,
    "int64": Kind.INT64, "int": Kind.INT64, "integer": Kind.INT64, "bigint": Kind.INT64,
    "float64": Kind.FLOAT64, "double": Kind.FLOAT64, "float": Kind.FLOAT64,
    "string": Kind.STRING, "text": Kind.STRING, "varchar": Kind.STRING,
    "date": Kind.DATE,
    "timestamp": Kind.TIMESTAMP,
}


@dataclass(frozen=True)
class DataType:
    """A logical type with its nullability; ``fields`` is set only for structs."""

    kind: Kind
    nullable: bool = True
    fields: tuple[tuple[str, "DataType"], ...] = field(default=())

    def with_nullable(self, nullable: bool) -> "DataType":
        return self if self.nullable == nullable else replace(self, nullable=nullable)

    def field(self, name: str) -> "DataType | None":
        for field_name, field_type in self.fields:
            if field_name == name:
                return field_type
        return None

    @property
    def name(self) -> str:
        if self.kind is Kind.STRUCT:
            inner = ", ".join(f"{n}: {t.spelling}" for n, t in self.fields)
            return f"struct<{inner}>"
        return self.kind.value

    @property
    def spelling(self) -> str:
        """Name plus nullability, as accepted by :func:`parse_type`."""
        return self.name if self.nullable else f"{self.name} not null"

    def same_kind(self, other: "DataType") -> bool:
        return self.kind is other.kind and self.fields == other.fields

    def __str__(self) -> str:
        return self.spelling


BOOL = DataType(Kind.BOOL)
INT64 = DataType(Kind.INT64)
FLOAT64 = DataType(Kind.FLOAT64)
STRING = DataType(Kind.STRING)
DATE = DataType(Kind.DATE)
TIMESTAMP = DataType(Kind.TIMESTAMP)
NULL = DataType(Kind.NULL)

INT64_MIN = -(2**63)  # two's-complement 64-bit bounds (common practice, no source)
INT64_MAX = 2**63 - 1


def scalar(kind: Kind, nullable: bool = True) -> DataType:
    return DataType(kind, nullable)


def parse_type(spec: str) -> DataType:
    """Parse ``int64``, ``string not null``, ``struct<port: string, berth: int64>`` and aliases.

    Raises ``ValueError`` with a readable message; callers wrap it in their own error.
    """
    parser = _TypeSpecParser(spec)
    result = parser.parse_type()
    parser.skip_space()
    if parser.pos != len(spec):
        raise ValueError(f"unexpected {spec[parser.pos:]!r} after type in {spec!r}")
    return result


class _TypeSpecParser:
    def __init__(self, text: str) -> None:
        self.text = text
        self.pos = 0

    def skip_space(self) -> None:
        while self.pos < len(self.text) and self.text[self.pos].isspace():
            self.pos += 1

    def word(self) -> str:
        self.skip_space()
        start = self.pos
        while self.pos < len(self.text) and (self.text[self.pos].isalnum() or self.text[self.pos] == "_"):
            self.pos += 1
        return self.text[start:self.pos]

    def expect(self, char: str) -> None:
        self.skip_space()
        if not self.text.startswith(char, self.pos):
            raise ValueError(f"expected {char!r} at position {self.pos} in type {self.text!r}")
        self.pos += 1

    def peek(self, char: str) -> bool:
        self.skip_space()
        return self.text.startswith(char, self.pos)

    def parse_type(self) -> DataType:
        name = self.word().lower()
        if name == "struct":
            self.expect("<")
            fields: list[tuple[str, DataType]] = []
            while True:
                field_name = self.field_name()
                self.expect(":")
                fields.append((field_name, self.parse_type()))
                if self.peek(","):
                    self.pos += 1
                    continue
                self.expect(">")
                break
            if len({n for n, _ in fields}) != len(fields):
                raise ValueError(f"duplicate field name in {self.text!r}")
            result = DataType(Kind.STRUCT, True, tuple(fields))
        elif name in TYPE_NAMES:
            result = DataType(TYPE_NAMES[name])
        else:
            known = ", ".join(sorted({k.value for k in TYPE_NAMES.values()} | {"struct<...>"}))
            raise ValueError(f"unknown type {name or self.text!r}; known types: {known}")
        save = self.pos
        if self.word().lower() == "not":
            if self.word().lower() != "null":
                raise ValueError(f"expected 'not null' in {self.text!r}")
            return result.with_nullable(False)
        self.pos = save
        return result

    def field_name(self) -> str:
        self.skip_space()
        if self.peek('"'):
            self.pos += 1
            out = []
            while True:
                end = self.text.find('"', self.pos)
                if end == -1:
                    raise ValueError(f"unterminated quoted field name in {self.text!r}")
                out.append(self.text[self.pos:end])
                self.pos = end + 1
                if self.text.startswith('"', self.pos):
                    out.append('"')
                    self.pos += 1
                    continue
                return "".join(out)
        name = self.word()
        if not name:
            raise ValueError(f"expected a field name at position {self.pos} in {self.text!r}")
        return name
