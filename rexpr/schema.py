"""Schemas: named, typed input columns, built from Arrow, a mapping, a JSON file or CLI specs."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping

import pyarrow as pa

from rexpr.errors import SchemaProblem
from rexpr.types import DataType, Kind, parse_type

MAX_SCHEMA_FIELDS = 10_000


@dataclass(frozen=True)
class Schema:
    fields: tuple[tuple[str, DataType], ...]

    def __post_init__(self) -> None:
        names = [name for name, _ in self.fields]
        if len(set(names)) != len(names):
            dupes = sorted({n for n in names if names.count(n) > 1})
            raise SchemaProblem(f"duplicate field names in schema: {', '.join(map(repr, dupes))}")

    # construction -----------------------------------------------------------------------
    @classmethod
    def of(cls, source: "Schema | pa.Schema | Mapping[str, Any] | str | Path") -> "Schema":
        """Accept any of the supported schema forms."""
        if isinstance(source, Schema):
            return source
        if isinstance(source, pa.Schema):
            return cls.from_arrow(source)
        if isinstance(source, Mapping):
            return cls.from_mapping(source)
        if isinstance(source, (str, Path)):
            return cls.from_json_file(source)
        raise SchemaProblem(f"cannot make a schema from {type(source).__name__}; pass a pyarrow.Schema, "
                            "a mapping of name to type, or a JSON file path")

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any]) -> "Schema":
        if len(mapping) > MAX_SCHEMA_FIELDS:
            raise SchemaProblem(f"schema has {len(mapping)} fields; the limit is {MAX_SCHEMA_FIELDS}")
        return cls(tuple((_check_name(name), _type_from_spec(name, spec)) for name, spec in mapping.items()))

    @classmethod
    def from_json_file(cls, path: str | Path) -> "Schema":
        try:
            data = json.loads(Path(path).read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise SchemaProblem(f"schema file {str(path)!r} does not exist") from None
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise SchemaProblem(f"cannot read schema file {str(path)!r}: {exc}") from None
        return cls.from_json(data)

    @classmethod
    def from_json(cls, data: Any) -> "Schema":
        """``{"fields": {"name": "string", ...}}`` or the bare mapping."""
        if isinstance(data, dict) and set(data) == {"fields"} and isinstance(data["fields"], dict):
            data = data["fields"]
        if not isinstance(data, dict):
            raise SchemaProblem('a JSON schema is an object mapping field name to type, e.g. '
                                '{"price": "float64", "name": "string not null"}')
        return cls.from_mapping(data)

    @classmethod
    def from_field_specs(cls, specs: Iterable[str]) -> "Schema":
        """``name:type`` strings, split at the last colon so any name works."""
        fields = []
        for spec in specs:
            name, sep, type_text = spec.rpartition(":")
            if not sep or not name:
                raise SchemaProblem(f"field spec {spec!r} must be NAME:TYPE, e.g. price:float64")
            fields.append((name, _type_from_spec(name, type_text)))
        return cls(tuple(fields))

    @classmethod
    def from_arrow(cls, schema: pa.Schema) -> "Schema":
        return cls(tuple((f.name, from_arrow_type(f.type, f.nullable, f.name)) for f in schema))

    # use ---------------------------------------------------------------------------------
    @property
    def names(self) -> list[str]:
        return [name for name, _ in self.fields]

    def get(self, name: str) -> DataType | None:
        for field_name, field_type in self.fields:
            if field_name == name:
                return field_type
        return None

    def to_arrow(self) -> pa.Schema:
        return pa.schema([pa.field(name, to_arrow_type(t), nullable=t.nullable) for name, t in self.fields])

    def to_json(self) -> dict[str, str]:
        return {name: t.spelling for name, t in self.fields}


def _check_name(name: Any) -> str:
    if not isinstance(name, str) or not name:
        raise SchemaProblem(f"field names must be non-empty strings, not {name!r}")
    if "\x00" in name:
        raise SchemaProblem(f"field name {name!r} contains a NUL character")
    return name


def _type_from_spec(name: str, spec: Any) -> DataType:
    if isinstance(spec, dict):  # nested struct written as a JSON object
        inner = Schema.from_mapping(spec)
        return DataType(Kind.STRUCT, True, inner.fields)
    if not isinstance(spec, str):
        raise SchemaProblem(f"type of field {name!r} must be a type name string, not {spec!r}")
    try:
        return parse_type(spec)
    except ValueError as exc:
        raise SchemaProblem(f"field {name!r}: {exc}") from None


_ARROW_INTS = {pa.int8(), pa.int16(), pa.int32(), pa.int64(), pa.uint8(), pa.uint16(), pa.uint32()}


def from_arrow_type(arrow_type: pa.DataType, nullable: bool, name: str) -> DataType:
    t = arrow_type
    if pa.types.is_boolean(t):
        kind = Kind.BOOL
    elif t in _ARROW_INTS:
        kind = Kind.INT64
    elif pa.types.is_floating(t) and t != pa.float16():
        kind = Kind.FLOAT64
    elif pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_string_view(t):
        kind = Kind.STRING
    elif pa.types.is_date(t):
        kind = Kind.DATE
    elif pa.types.is_timestamp(t) and t.tz is None:
        kind = Kind.TIMESTAMP
    elif pa.types.is_struct(t):
        return DataType(Kind.STRUCT, nullable,
                        tuple((f.name, from_arrow_type(f.type, f.nullable, f"{name}.{f.name}")) for f in t))
    elif pa.types.is_dictionary(t):
        return from_arrow_type(t.value_type, nullable, name)
    else:
        hint = " (uint64 does not fit in int64)" if t == pa.uint64() else ""
        hint = " (time-zoned timestamps are not supported; convert to naive UTC)" if pa.types.is_timestamp(t) else hint
        raise SchemaProblem(f"column {name!r} has Arrow type {t}, which rexpr does not support{hint}")
    return DataType(kind, nullable)


def to_arrow_type(t: DataType) -> pa.DataType:
    if t.kind is Kind.STRUCT:
        return pa.struct([pa.field(n, to_arrow_type(ft), nullable=ft.nullable) for n, ft in t.fields])
    return {
        Kind.BOOL: pa.bool_(), Kind.INT64: pa.int64(), Kind.FLOAT64: pa.float64(), Kind.STRING: pa.string(),
        Kind.DATE: pa.date32(), Kind.TIMESTAMP: pa.timestamp("us"), Kind.NULL: pa.null(),
    }[t.kind]
