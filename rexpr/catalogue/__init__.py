"""The function catalogue: one declarative entry per function (see ``entries``)."""

from __future__ import annotations

from rexpr.catalogue.casts import CAST_RULES, CastRule, cast_rule
from rexpr.catalogue.entries import ENTRIES
from rexpr.catalogue.model import ErrorClass, ErrorRule, Form, FunctionSpec, Signature

BY_ID: dict[str, FunctionSpec] = {spec.id: spec for spec in ENTRIES}
assert len(BY_ID) == len(ENTRIES), "duplicate catalogue id"

# Functions written as name(...) in the language, by lower-case name.
CALLABLE: dict[str, FunctionSpec] = {spec.spelling: spec for spec in ENTRIES if spec.form.value == "call"}


def function(function_id: str) -> FunctionSpec:
    return BY_ID[function_id]


__all__ = ["BY_ID", "CALLABLE", "CAST_RULES", "CastRule", "ENTRIES", "ErrorClass", "ErrorRule", "Form",
           "FunctionSpec", "Signature", "cast_rule", "function"]
