"""The function catalogue with, per SQL engine, whether the faithful lowering keeps the semantics."""

from __future__ import annotations

import logging
from typing import Any

from rexpr.catalogue import CAST_RULES, ENTRIES

NO_CAPABILITIES = "the capability table is not available in this build; capabilities are null"
_STATUSES = frozenset({"faithful", "conditional", "not_pushable"})


def _capability_rows() -> dict[str, dict[str, dict[str, Any]]] | None:
    """function id -> engine -> {status, reason}, or None when the table cannot be had.
    A table of an unexpected shape counts as absent: showing it would be a guess."""
    try:
        from rexpr.sql.capabilities import capability_table
    except ImportError:
        return None
    table = capability_table(None)
    rows = table.get("functions") if isinstance(table, dict) else table
    out: dict[str, dict[str, dict[str, Any]]] = {}
    try:
        for row in rows:
            cells = {}
            for engine, cell in row["engines"].items():
                if cell["status"] not in _STATUSES:
                    raise ValueError(f"unknown status {cell['status']!r}")
                cells[str(engine)] = {"status": cell["status"], "reason": cell.get("reason") or None}
            out[str(row["id"])] = cells
    except (KeyError, TypeError, ValueError, AttributeError):
        logging.getLogger("rexpr.service.error").warning("capability table has an unexpected shape",
                                                         exc_info=True)
        return None
    return out


def functions_payload() -> dict[str, Any]:
    capabilities = _capability_rows()
    functions = [{
        "id": spec.id,
        "spelling": spec.spelling,
        "form": spec.form.value,
        "category": spec.category,
        "signatures": [s.describe() for s in spec.signatures],
        "semantics": spec.semantics,
        "standard": spec.standard,
        "null_behaviour": spec.null_behaviour,
        "errors": [{"error": rule.error.value, "when": rule.when} for rule in spec.errors],
        "capabilities": capabilities.get(spec.id) if capabilities is not None else None,
    } for spec in ENTRIES]
    casts = [{"source": rule.source.value, "target": rule.target.value, "semantics": rule.semantics,
              "errors": [e.value for e in rule.errors]} for rule in CAST_RULES]
    return {"functions": functions, "casts": casts, "capabilities_available": capabilities is not None,
            **({} if capabilities is not None else {"note": NO_CAPABILITIES})}
