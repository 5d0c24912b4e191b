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
        prepare = importlib.import_module(module_name).prepare
    except ImportError as exc:
        raise EngineUnavailable(f"backend {name!r} cannot be loaded: {exc}") from None
    return _range_checked(prepare)


def _range_checked(prepare: Callable[[Typed], Prepared]) -> Callable[[Typed], Prepared]:
    """``prepare`` whose runs first refuse dates and timestamps outside years 0001-9999
    (:mod:`rexpr.temporal_range`): every backend then sees only values the semantics define."""
    from rexpr.temporal_range import check_temporal_range, temporal_fields

    def prepare_checked(tree: Typed) -> Prepared:
        run = prepare(tree)
        paths = temporal_fields(tree)
        if not paths:
            return run

        def run_checked(table):  # type: ignore[no-untyped-def]
            if isinstance(table, (pa.Table, pa.RecordBatch)):
                check_temporal_range(table, paths)  # type: ignore[arg-type]
            else:  # NumPy columns by name: check the temporal ones in Arrow form
                from rexpr.backends import numpy_inputs

                fields = [(p, t) for p, t in numpy_inputs.fields_of(tree) if p in paths]
                check_temporal_range(numpy_inputs.to_arrow_table(table, fields), paths)
            return run(table)

        return run_checked

    return prepare_checked
