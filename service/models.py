"""Request and response bodies. Requests are validated here; responses are built as plain dicts
for speed and these models document them (the OpenAPI tests check that they agree)."""

from __future__ import annotations

from typing import Any, Literal, Optional, Union

from pydantic import BaseModel, ConfigDict, Field

# Names only: a request picks from these and can never name a connection, a file or a setting.
SqlEngine = Literal["duckdb", "sqlite", "postgres", "mariadb"]
EmbeddedEngine = Literal["reference", "arrow", "numpy", "duckdb", "sqlite"]
Source = Literal["duckdb", "sqlite", "postgres", "mariadb", "dataset"]
Lowering = Literal["faithful", "native"]
SQL_ENGINES: tuple[str, ...] = ("duckdb", "sqlite", "postgres", "mariadb")
EMBEDDED_ENGINES: tuple[str, ...] = ("reference", "arrow", "numpy", "duckdb", "sqlite")
MAX_ROWS = 10_000

SchemaSpec = dict[str, Union[str, dict[str, Any]]]
_SCHEMA_DESCRIPTION = ('Field name to type spelling, e.g. {"price": "float64", "name": "string not null"}; '
                       'a nested object is a struct: {"ship": {"port": "string"}}')
_SCHEMA_EXAMPLE = {"price": "float64", "qty": "int64", "name": "string"}


class _Request(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)


class CompileRequest(_Request):
    expression: str = Field(description="the expression text", examples=["price * qty > 100.0"])
    schema_: SchemaSpec = Field(alias="schema", description=_SCHEMA_DESCRIPTION, examples=[_SCHEMA_EXAMPLE])
    engines: list[SqlEngine] = Field(default=list(SQL_ENGINES), max_length=len(SQL_ENGINES) * 4,
                                     description="SQL dialects to lower to (default: all)")
    lowering: Lowering = Field(default="faithful",
                               description="faithful reproduces rexpr's semantics; native is the plain mapping")


class PlanRequest(_Request):
    expression: str = Field(description="a bool filter", examples=["price > 10.0 and trim(name) = 'ab'"])
    schema_: SchemaSpec = Field(alias="schema", description=_SCHEMA_DESCRIPTION, examples=[_SCHEMA_EXAMPLE])
    source: Source = Field(description="where the data lives")
    columns: Optional[list[str]] = Field(default=None, max_length=10_000,
                                         description="output columns wanted (default: every schema field)")


class CheckRequest(_Request):
    expression: str = Field(examples=["trim(name) = 'ab'"])
    schema_: SchemaSpec = Field(alias="schema", description=_SCHEMA_DESCRIPTION, examples=[_SCHEMA_EXAMPLE])
    rows: Optional[list[dict[str, Any]]] = Field(
        default=None, max_length=MAX_ROWS,
        description='rows typed by the schema (float64 may be "NaN", "Infinity", "-Infinity"; dates '
                    '"YYYY-MM-DD"; timestamps "YYYY-MM-DD HH:MM:SS"); default: edge values for each type')
    engines: list[EmbeddedEngine] = Field(default=list(EMBEDDED_ENGINES), max_length=len(EMBEDDED_ENGINES) * 4,
                                          description="embedded engines only (default: all)")


# ---------------------------------------------------------------------------------- responses
JsonScalar = Union[bool, int, float, str, None]


class Span(BaseModel):
    start: int
    end: int
    line: Optional[int] = None
    column: Optional[int] = None


class ValidationIssue(BaseModel):
    loc: list[Union[str, int]]
    message: str
    type: str


class Problem(BaseModel):
    """RFC 9457 problem details plus rexpr's stable ``code``."""

    model_config = ConfigDict(extra="allow")
    type: str = Field(description="URI reference naming the problem type")
    title: str
    status: int
    detail: str
    code: str = Field(description="stable machine-readable code")
    span: Optional[Span] = Field(default=None, description="where in the expression (expression errors)")
    hint: Optional[str] = None
    errors: Optional[list[ValidationIssue]] = Field(default=None, description="request validation issues")
    row: Optional[int] = None
    error_class: Optional[str] = None


class TreeNode(BaseModel):
    """One node of the typed tree (rexpr.typed.to_json)."""

    node: Literal["literal", "field", "call"]
    type: str
    nullable: bool
    span: list[int] = Field(min_length=2, max_length=2)
    value: JsonScalar = None
    path: Optional[list[str]] = None
    function: Optional[str] = None
    args: Optional[list["TreeNode"]] = None


class SqlLowering(BaseModel):
    status: Literal["ok", "not_pushable", "unavailable"]
    sql: Optional[str] = None
    reason: Optional[str] = None


class CompileResult(BaseModel):
    expression: str
    canonical: str = Field(description="the expression printed back, implicit casts explicit")
    type: str
    nullable: bool
    fields: list[str] = Field(description="dotted field paths read")
    functions: list[str] = Field(description="catalogue function ids used")
    tree: TreeNode
    lowering: Lowering
    sql: dict[str, SqlLowering]
    warnings: list[str]


class Conjunct(BaseModel):
    text: str
    pushed: bool
    reason: str
    sql: Optional[str] = None


class PlanResult(BaseModel):
    expression: str
    source: Source
    pushed: Optional[str] = Field(description="the filter the source runs (SQL, or a dataset filter)")
    residual: Optional[str] = Field(description="what must run locally, as expression text")
    columns: list[str]
    conjuncts: list[Conjunct]
    evidence: str
    verified: str


class RowErrorValue(BaseModel):
    error: str
    detail: str


ResultValue = Union[RowErrorValue, bool, int, float, str, None]  # expression results are never structs


class Disagreement(BaseModel):
    row: int
    expected: ResultValue
    observed: ResultValue
    inputs: dict[str, Any] = Field(description="the row's values of the fields the expression reads")


class EngineResult(BaseModel):
    status: Literal["agree", "disagree", "unavailable", "not_pushable"]
    rows: int
    reason: Optional[str] = None
    sql: Optional[str] = None
    disagreement_count: int
    disagreements: list[Disagreement] = Field(description="the first disagreeing rows")


class CheckResult(BaseModel):
    expression: str
    type: str
    nullable: bool
    fields: list[str]
    rows: int
    rows_source: Literal["request", "edge_values"]
    results: dict[str, EngineResult]
    values: Optional[list[ResultValue]] = Field(
        description="the reference semantics' value for each sent row; null for edge values")
    verified: str


class Capability(BaseModel):
    status: str = Field(description="faithful, conditional or not_pushable")
    reason: Optional[str] = None


class ErrorRuleInfo(BaseModel):
    error: str
    when: str


class FunctionInfo(BaseModel):
    id: str
    spelling: str
    form: str
    category: str
    signatures: list[str]
    semantics: str
    standard: str
    null_behaviour: str
    errors: list[ErrorRuleInfo]
    capabilities: Optional[dict[str, Capability]] = Field(description="per SQL engine; null when the "
                                                                       "capability table is not available")


class CastInfo(BaseModel):
    source: str
    target: str
    semantics: str
    errors: list[str]


class FunctionsResult(BaseModel):
    functions: list[FunctionInfo]
    casts: list[CastInfo]
    capabilities_available: bool
    note: Optional[str] = None


class ReportPair(BaseModel):
    function: str
    engine: str


class ReportResult(BaseModel):
    source: str
    generated: Optional[str]
    about: Optional[str] = None
    disagreement_count: int
    faithful_disagreements: list[ReportPair]


class HealthResult(BaseModel):
    status: Literal["ok"]
    components: dict[str, bool] = Field(description="optional parts of rexpr this build can load")


class VersionResult(BaseModel):
    rexpr: str
    api: str


class ProblemTypeInfo(BaseModel):
    type: str
    code: str
    status: int
    title: str


class ProblemTypes(BaseModel):
    problems: list[ProblemTypeInfo]
