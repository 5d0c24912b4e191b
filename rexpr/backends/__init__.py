"""Local evaluators, by name. Each module registers a ``prepare(typed) -> run(table)`` function;
adding a backend adds a module and one line here."""

from __future__ import annotations

import difflib
import importlib
from typing import Callable, Protocol

import pyarrow as pa

from rexpr.errors import EngineUnavailable, InputProblem
from rexpr.evaluation import Evaluation
from rexpr.typed import Typed


class Prepared(Protocol):
    def __call__(self, table: pa.Table | pa.RecordBatch) -> Evaluation: ...


_MODULES = {
    "reference": "rexpr.backends.reference",
    "arrow": "rexpr.backends.arrow",
    "numpy": "rexpr.backends.numpy",
    "auto": "rexpr.backends.auto",
}

LOCAL_BACKENDS = tuple(_MODULES)


def get_backend(name: str) -> Callable[[Typed], Prepared]:
    """The ``prepare`` function of a local backend; unknown names get a close-match suggestion."""
    module_name = _MODULES.get(name)
    if module_name is None:
        close = difflib.get_close_matches(name, list(_MODULES), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else f"; known: {', '.join(_MODULES)}"
        raise InputProblem(f"unknown backend {name!r}{hint}", code="unknown_backend")
    try:
        return importlib.import_module(module_name).prepare
    except ImportError as exc:
        raise EngineUnavailable(f"backend {name!r} cannot be loaded: {exc}") from None
