"""The auto backend: the residual filter that runs locally, over Arrow data, block by block.

The input is cut into cache-sized blocks (zero-copy slices of its record batches) so every
intermediate of a block stays in cache instead of being allocated at full length. Per node the
faster kernel family is chosen once: NumPy (``auto_vectors``) for numeric and boolean work on
zero-copy views of the Arrow buffers, and the arrow backend's compiled plan for whole subtrees
that involve strings, dates, casts from or to text and the other complex functions. The tree
is constant-folded first, and identical subtrees are evaluated once per block. Blocks run on a
small thread pool: NumPy and Arrow kernels release the GIL. Each thread reuses its blocks'
8-byte result buffers (``auto_scratch``), and a filter's blocks write straight into one mask.
With numba installed, the largest numeric subtrees are also compiled into one fused loop each
(``auto_jit``, :class:`JitOp`) for inputs large enough to repay the compile.

Semantics are the reference's exactly (rexpr/reference/); nothing here is a shortcut.
"""

from __future__ import annotations

import os
import threading
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Callable, Iterable, Iterator, Sequence, TypeVar

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from rexpr.backends import arrow as arrow_backend
from rexpr.backends import auto_jit
from rexpr.backends import auto_vectors as vx
from rexpr.backends.auto_scratch import ScratchSet
from rexpr.backends.auto_vectors import Vec
from rexpr.errors import EvaluationFailed, InputProblem
from rexpr.evaluation import ERROR_CODES, Evaluation
from rexpr.folding import fold_constants
from rexpr.schema import to_arrow_type
from rexpr.temporal_range import check_temporal_range, temporal_fields
from rexpr.typed import TField, TLiteral, Typed
from rexpr.types import Kind

T = TypeVar("T")
R = TypeVar("R")

BLOCK_ROWS = 256 * 1024  # 2 MiB per float64 column: a block's intermediates stay in L2 and L3
THREADS = max(1, min(2, os.cpu_count() or 1))

_POOL: ThreadPoolExecutor | None = None
_POOL_LOCK = threading.Lock()


def _pool() -> ThreadPoolExecutor:
    """One pool per process, made on first use (threads may ask at the same time)."""
    global _POOL
    with _POOL_LOCK:
        if _POOL is None:
            _POOL = ThreadPoolExecutor(THREADS, thread_name_prefix="rexpr-auto")
        return _POOL


# ------------------------------------------------------------------------------ plan
@dataclass
class Block:
    """One block being evaluated: the rows, the arrow frame, and results computed so far."""

    rows: pa.RecordBatch
    arrow_frame: arrow_backend.Frame
    done: dict[int, object] = field(default_factory=dict)

    @property
    def length(self) -> int:
        return self.rows.num_rows


class Op:
    """A compiled node; ``run`` is cached per block so a shared subtree runs once."""

    numeric = True  # the result is a Vec (else an arrow Column)

    def run(self, block: Block):
        key = id(self)
        result = block.done.get(key)
        if result is None:
            result = block.done[key] = self.compute(block)
        return result

    def vec(self, block: Block) -> Vec:
        return self.run(block)

    def compute(self, block: Block):  # pragma: no cover - abstract
        raise NotImplementedError


class ArrowOp(Op):
    """A whole subtree evaluated by the arrow backend's compiled plan."""

    numeric = False

    def __init__(self, node: Typed) -> None:
        self.plan = arrow_backend._compile(node)  # the same module family; compiled once
        self.kind = node.type.kind

    def compute(self, block: Block) -> arrow_backend.Column:
        return self.plan.step(block.arrow_frame)

    def vec(self, block: Block) -> Vec:
        column = self.run(block)
        return vx.from_arrow(column.values, column.codes, self.kind)


class FieldOp(Op):
    def __init__(self, node: TField) -> None:
        self.path, self.kind = node.path, node.type.kind
        self.target = to_arrow_type(node.type)

    def compute(self, block: Block) -> Vec:
        values = arrow_backend._read_field(block.rows, self.path, self.target)
        return vx.from_arrow(values, None, self.kind)


class LiteralOp(Op):
    def __init__(self, node: TLiteral) -> None:
        self.value, self.kind = node.value, node.type.kind

    def compute(self, block: Block) -> Vec:
        return vx.literal(self.value, self.kind, block.length)


class PlainOp(Op):
    """A null-propagating call done by one NumPy kernel."""

    def __init__(self, kernel: vx.Kernel, args: Sequence[Op]) -> None:
        self.kernel, self.args = kernel, tuple(args)

    def compute(self, block: Block) -> Vec:
        return vx.plain(self.kernel, [a.vec(block) for a in self.args], block.length)


class LogicOp(Op):
    def __init__(self, args: Sequence[Op], absorbing: bool) -> None:
        self.args, self.absorbing = tuple(args), absorbing

    def compute(self, block: Block) -> Vec:
        return vx.logic([a.vec(block) for a in self.args], block.length, self.absorbing)


class IsNullOp(Op):
    def __init__(self, arg: Op) -> None:
        self.arg = arg

    def compute(self, block: Block) -> Vec:
        return vx.is_null(self.arg.vec(block), block.length)


class DistinctOp(Op):
    def __init__(self, a: Op, b: Op, kind: Kind) -> None:
        self.a, self.b, self.kind = a, b, kind

    def compute(self, block: Block) -> Vec:
        return vx.is_distinct(self.a.vec(block), self.b.vec(block), self.kind, block.length)


class NullifOp(Op):
    def __init__(self, a: Op, b: Op) -> None:
        self.a, self.b = a, b

    def compute(self, block: Block) -> Vec:
        return vx.nullif(self.a.vec(block), self.b.vec(block), block.length)


class CoalesceOp(Op):
    def __init__(self, args: Sequence[Op], kind: Kind) -> None:
        self.args, self.kind = tuple(args), kind

    def compute(self, block: Block) -> Vec:
        chooser = vx.Chooser(self.kind, block.length)
        for arg in self.args:
            if not chooser.pending.any():
                break  # later arguments are not evaluated: their errors cannot count
            vec = arg.vec(block)
            chooser.take(chooser.pending, vec)
            if vec.valid is not None:
                chooser.pending &= ~vec.valid
            else:
                chooser.pending[:] = False
            if vec.codes is not None:
                chooser.pending &= vec.codes == 0
        return chooser.result()


class JitOp(Op):
    """A numeric subtree as one compiled loop (auto_jit), once it is compiled; until then (and
    for small inputs, which never compile it) the same subtree's NumPy ops."""

    def __init__(self, node: Typed, fallback: Op) -> None:
        self.node, self.fallback = node, fallback
        self.fields: list[tuple[tuple[str, ...], pa.DataType, Kind]] = []  # the kernel's inputs, in order
        self.kernel: auto_jit.Kernel | None = None
        self.failed = False

    def compile(self, required: bool) -> None:
        """Builds the kernel; a failure makes this op keep its NumPy ops, unless the caller
        asked for the compiled path, which then sees the error."""
        if self.kernel is not None or self.failed:
            return
        try:
            source = auto_jit.source_of(self.node)  # only written for an input that is worth it
            self.fields = [(f.path, to_arrow_type(f.type), f.type.kind) for f in source.fields]
            self.kernel = auto_jit.Kernel(source)
        except Exception as exc:  # numba's errors have no common base; the NumPy ops stay exact
            self.failed = True
            if required:
                raise
            warnings.warn(f"rexpr: the compiled path is off for one subtree ({type(exc).__name__}: {exc})",
                          RuntimeWarning, stacklevel=2)

    def arguments(self, block: Block) -> list[object]:
        arrays = [arrow_backend._read_field(block.rows, path, target) for path, target, _ in self.fields]
        return auto_jit.Kernel.arguments(arrays, [kind for _, _, kind in self.fields])

    def compute(self, block: Block) -> Vec:
        if self.kernel is None:
            return self.fallback.run(block)
        values, valid, codes = self.kernel.values(block.length, self.arguments(block))
        return Vec(values, valid, codes)


class CaseOp(Op):
    def __init__(self, args: Sequence[Op], kind: Kind) -> None:
        self.pairs = [(args[i], args[i + 1]) for i in range(0, len(args) - 1, 2)]
        self.default, self.kind = args[-1], kind

    def compute(self, block: Block) -> Vec:
        chooser = vx.Chooser(self.kind, block.length)
        for condition, value in self.pairs:
            if not chooser.pending.any():
                break  # branches no row reaches are not evaluated
            test = condition.vec(block)
            if test.codes is not None:
                failed = chooser.pending & (test.codes != 0)
                chooser.fail(failed, test.codes)
                chooser.pending &= ~failed
            taken = chooser.pending & vx.ones(test.valid, block.length) & test.values
            if taken.any():
                chooser.take(taken, value.vec(block))
                chooser.pending &= ~taken
        if chooser.pending.any():
            chooser.take(chooser.pending, self.default.vec(block))
        return chooser.result()


# ------------------------------------------------------------------------------ compiling
def _key(node: Typed) -> tuple:
    """Structural identity of a subtree, spans left out; repr keeps -0.0, 0.0 and 0 apart."""
    if isinstance(node, TLiteral):
        return ("literal", node.type, type(node.value).__name__, repr(node.value))
    if isinstance(node, TField):
        return ("field", node.path, node.type)
    return ("call", node.function, node.type, tuple(_key(a) for a in node.args))


class Compiler:
    def __init__(self, jit: bool = False, min_calls: int = auto_jit.MIN_CALLS) -> None:
        self.ops: dict[tuple, Op] = {}
        self.jit, self.min_calls = jit, min_calls
        self.jit_ops: list[JitOp] = []

    def op(self, node: Typed) -> Op:
        key = _key(node)
        found = self.ops.get(key)
        if found is None:
            if self.jit and auto_jit.fusable(node, self.min_calls):
                self.jit = False  # the largest fusable subtree is the one kernel; its parts are NumPy ops
                try:
                    found = JitOp(node, self._build(node))
                finally:
                    self.jit = True
                self.jit_ops.append(found)
            else:
                found = self._build(node)
            self.ops[key] = found
        return found

    def _build(self, node: Typed) -> Op:
        if not vx.runs_in_numpy(node):
            return ArrowOp(node)
        if isinstance(node, TLiteral):
            return LiteralOp(node)
        if isinstance(node, TField):
            return FieldOp(node)
        fid, kind = node.function, node.type.kind
        args = [self.op(a) for a in node.args]
        if fid in ("and", "or"):
            return LogicOp(args, absorbing=fid == "or")
        if fid == "not":
            return PlainOp(vx.NOT_KERNEL, args)
        if fid in vx.COMPARE_KERNELS:
            return PlainOp(vx.COMPARE_KERNELS[fid], args)
        if fid == "in":  # x in (a, b) is x = a or x = b (reference _in)
            tests = [PlainOp(vx.COMPARE_KERNELS["eq"], [args[0], item]) for item in args[1:]]
            return LogicOp(tests, absorbing=True)
        if fid == "between":  # the and of >= and <= (reference _between)
            return LogicOp([PlainOp(vx.COMPARE_KERNELS["ge"], [args[0], args[1]]),
                            PlainOp(vx.COMPARE_KERNELS["le"], [args[0], args[2]])], absorbing=False)
        if fid == "is_null":
            return IsNullOp(args[0])
        if fid == "is_distinct_from":
            return DistinctOp(args[0], args[1], node.args[0].type.kind)
        if fid == "nullif":
            return NullifOp(args[0], args[1])
        if fid == "coalesce":
            return CoalesceOp(args, kind)
        if fid == "case":
            return CaseOp(args, kind)
        if fid == "cast":
            source = node.args[0].type.kind
            return args[0] if source is kind else PlainOp(vx.CAST_KERNELS[(source, kind)], args)
        if fid in ("floor", "ceil") and kind is Kind.INT64:
            return args[0]  # int64 input is returned unchanged
        if kind is Kind.INT64 and fid in vx.INT_KERNELS:
            return PlainOp(vx.INT_KERNELS[fid], args)
        return PlainOp(vx.FLOAT_KERNELS[fid], args)


# ------------------------------------------------------------------------------ running
def _blocks(data: pa.Table | pa.RecordBatch, block_rows: int) -> list[pa.RecordBatch]:
    """Zero-copy slices of the input's record batches, none longer than ``block_rows``."""
    if isinstance(data, pa.RecordBatch):
        batches = [data]
    elif isinstance(data, pa.Table):
        batches = data.to_batches()
    else:
        raise InputProblem(f"expected a pyarrow Table or RecordBatch, got {type(data).__name__}")
    out = [b.slice(start, block_rows) for b in batches for start in range(0, b.num_rows, block_rows)]
    if not out:  # still one (empty) block, so the result has the right type and columns are checked
        out = [pa.RecordBatch.from_pylist([], schema=data.schema)]
    return out


@dataclass(frozen=True)
class Prepared:
    """A compiled tree: call it for an :class:`Evaluation`, or use :meth:`keep` for a filter mask."""

    root: Op
    node: Typed
    block_rows: int
    threads: int
    jit: bool | None = None  # None: compile fused kernels for inputs of auto_jit.MIN_ROWS rows or more
    jit_ops: tuple[JitOp, ...] = ()

    def _arm(self, rows: int) -> None:
        """Compiles the fused kernels this input is worth (all of them when asked to)."""
        if self.jit is False:
            return
        for op in self.jit_ops:
            if self.jit or rows >= auto_jit.MIN_ROWS:
                op.compile(required=bool(self.jit))

    def _map(self, function: Callable[[T, ScratchSet], R], items: list[T]) -> list[R]:
        """``function`` over one item per block, results in order, on the thread pool when
        there is more than one block."""
        scratch = ScratchSet()  # this call's reusable buffers, dropped when it ends
        try:
            if self.threads <= 1 or len(items) <= 1:
                return [function(item, scratch) for item in items]
            return list(_pool().map(lambda item: function(item, scratch), items))
        finally:
            scratch.close()

    def _run(self, rows: pa.RecordBatch):
        block = Block(rows, arrow_backend.Frame(rows, rows.num_rows))
        with np.errstate(all="ignore"):  # garbage in null rows may overflow; it is discarded
            return self.root.run(block)

    def _values(self, rows: pa.RecordBatch, scratch: ScratchSet) -> tuple[pa.Array, np.ndarray | None]:
        with scratch.block():
            result = self._run(rows)
            if self.root.numeric:  # copied out: the block's buffers are reused by the next block
                own = Vec(np.array(result.values), result.valid, result.codes)
                return vx.to_arrow(own, self.node.type.kind), result.codes
            return result.values, result.codes

    def _keep(self, rows: pa.RecordBatch, scratch: ScratchSet, out: np.ndarray) -> np.ndarray | None:
        """Writes where the predicate is true in one block to ``out`` (that block's slice of the
        whole mask, so no per-block masks are held and joined); returns the error codes."""
        root = self.root
        if isinstance(root, JitOp) and root.kernel is not None:  # one pass: the mask and the codes
            codes = np.zeros(rows.num_rows, dtype=np.int8)  # the kernel writes only the failing rows
            with np.errstate(all="ignore"):
                failed = root.kernel.keep(rows.num_rows, root.arguments(Block(rows, None)), out, codes)  # type: ignore[arg-type]
            return codes if failed else None
        with scratch.block():
            result = self._run(rows)
            if self.root.numeric:
                if result.valid is None:
                    out[:] = result.values
                else:
                    np.logical_and(result.values, result.valid, out=out)
            else:
                out[:] = pc.fill_null(result.values, False).to_numpy(zero_copy_only=False)
            return result.codes

    def __call__(self, data: pa.Table | pa.RecordBatch) -> Evaluation:
        self._arm(data.num_rows)
        parts = self._map(self._values, _blocks(data, self.block_rows))
        values = pa.concat_arrays([v for v, _ in parts]) if len(parts) > 1 else parts[0][0]
        target = to_arrow_type(self.node.type)
        if values.type != target:  # only an untyped null literal: its values are all null
            values = pa.nulls(len(values), target)
        codes = None
        if any(c is not None for _, c in parts):
            codes = np.concatenate([np.zeros(len(v), np.int8) if c is None else c for v, c in parts])
        return Evaluation.from_codes(self.node.type, values, codes)

    def keep(self, data: pa.Table | pa.RecordBatch, first_row: int = 0) -> np.ndarray:
        """Boolean mask of the rows to keep; raises :class:`EvaluationFailed` on any row error
        (an error beats a guess), naming the row counted from ``first_row``."""
        _require_predicate(self.node)
        self._arm(data.num_rows)
        blocks = _blocks(data, self.block_rows)
        starts = np.cumsum([0] + [b.num_rows for b in blocks]).tolist()
        mask = np.empty(starts[-1], dtype=bool)
        codes = self._map(lambda item, scratch: self._keep(item[1], scratch, mask[starts[item[0]]:starts[item[0] + 1]]),
                          list(enumerate(blocks)))
        for start, block_codes in zip(starts, codes):
            if block_codes is not None and block_codes.any():
                _raise_first(block_codes, first_row + start)
        return mask


    def filter(self, table: pa.Table | pa.RecordBatch) -> pa.Table:
        """The rows where the predicate is true: the mask in blocks, then each column taken on
        the thread pool (Arrow's filter kernel releases the GIL; one column at a time left the
        second core idle for most of a filter)."""
        if isinstance(table, pa.RecordBatch):
            table = pa.Table.from_batches([table])
        check_temporal_range(table, temporal_fields(self.node))
        keep = self.keep(table)
        if self.threads <= 1 or table.num_rows < 2 * self.block_rows:
            return table.filter(pa.array(keep))
        # One task per column and row range, so a wide string column does not run alone.
        bounds = np.linspace(0, table.num_rows, self.threads + 1).astype(int).tolist()
        ranges = list(zip(bounds[:-1], bounds[1:]))
        masks = [pa.array(keep[lo:hi]) for lo, hi in ranges]
        tasks = [(column, lo, hi, mask) for column in table.columns for (lo, hi), mask in zip(ranges, masks)]
        parts = list(_pool().map(lambda task: task[0].slice(task[1], task[2] - task[1]).filter(task[3]), tasks))
        per_column = len(ranges)
        columns = [pa.chunked_array([c for piece in parts[i:i + per_column] for c in piece.chunks], type=field.type)
                   for i, field in zip(range(0, len(parts), per_column), table.schema)]
        return pa.Table.from_arrays(columns, schema=table.schema)


def _require_predicate(node: Typed) -> None:
    if node.type.kind is not Kind.BOOL:
        raise InputProblem(f"a filter needs a bool expression; this one is {node.type.name}",
                           code="not_a_predicate")


def _raise_first(codes: np.ndarray, offset: int) -> None:
    row = int(np.flatnonzero(codes)[0])
    error = ERROR_CODES[int(codes[row])]
    assert error is not None
    raise EvaluationFailed(f"row {offset + row}: {error.value}", row=offset + row, error_class=error.value)


def prepare(node: Typed, block_rows: int = BLOCK_ROWS, threads: int = THREADS, jit: bool | None = None) -> Prepared:
    """Fold constants, share identical subtrees, choose a kernel family per node; compile once.

    ``jit``: None compiles fused numeric kernels (numba, when installed) for inputs of at least
    ``auto_jit.MIN_ROWS`` rows; True compiles them whatever the size (an error if numba is
    missing); False never does."""
    if block_rows < 1:
        raise InputProblem(f"block_rows must be positive, not {block_rows}")
    if jit and not auto_jit.available():
        raise InputProblem("jit=True needs numba: pip install 'rexpr[jit]' (and REXPR_JIT not set to 0)",
                           code="jit_unavailable")
    folded = fold_constants(node)
    # Asked for, every numeric subtree with a call is compiled (the tests cover each kernel so).
    compiler = Compiler(jit=jit is not False and auto_jit.available(), min_calls=1 if jit else auto_jit.MIN_CALLS)
    return Prepared(compiler.op(folded), folded, block_rows, threads, jit, tuple(compiler.jit_ops))


# ------------------------------------------------------------------------------ filtering
def _tree(compiled: object) -> Typed:
    return getattr(compiled, "tree", compiled)  # a CompiledExpression or a typed tree


def filter_table(compiled: object, table: pa.Table | pa.RecordBatch, block_rows: int = BLOCK_ROWS,
                 jit: bool | None = None) -> pa.Table:
    """The rows where the predicate is true. The mask is computed in blocks, the take once."""
    return prepare(_tree(compiled), block_rows, jit=jit).filter(table)


def filter_batches(compiled: object, batches: Iterable[pa.RecordBatch],
                   block_rows: int = BLOCK_ROWS, jit: bool | None = None) -> Iterator[pa.RecordBatch]:
    """Stream the kept rows: each incoming batch is masked in blocks and filtered, so a large
    scan (``pyarrow.dataset`` ``to_batches``) never holds more than the current batch. Batches
    with no kept row are skipped. A row error raises :class:`EvaluationFailed` with the row
    counted across the whole stream. The fused kernels are compiled once the stream has
    passed ``auto_jit.MIN_ROWS`` rows (a scan's batches are each far smaller)."""
    prepared = prepare(_tree(compiled), block_rows, jit=jit)
    _require_predicate(prepared.node)
    temporal = temporal_fields(prepared.node)
    seen = 0
    for batch in batches:
        check_temporal_range(batch, temporal)
        prepared._arm(seen + batch.num_rows)
        keep = prepared.keep(batch, first_row=seen)
        seen += batch.num_rows
        if keep.any():
            yield batch.filter(pa.array(keep))
