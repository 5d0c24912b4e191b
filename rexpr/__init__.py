"""rexpr: one expression language, one semantics, every engine."""

from rexpr.api import CompiledExpression, compile
from rexpr.errors import (EvaluationFailed, ExpressionError, InputProblem, LimitExceeded, NotPushable,
                          RexprError, SchemaProblem, SyntaxProblem, TypeProblem)
from rexpr.evaluation import Evaluation
from rexpr.schema import Schema
from rexpr.types import DataType, Kind
from rexpr.values import RowError

__version__ = "0.1.0"

__all__ = ["CompiledExpression", "DataType", "Evaluation", "EvaluationFailed", "ExpressionError",
           "InputProblem", "Kind", "LimitExceeded", "NotPushable", "RexprError", "RowError", "Schema",
           "SchemaProblem", "SyntaxProblem", "TypeProblem", "compile", "__version__"]
