"""The rule-file expression language: parse, check, evaluate. Never eval/exec.

A criterion such as ``p_value_above(tone_hi, 0.6) >= 0.95 and trials_in_block >= 40``
is parsed by :func:`ast.parse` (mode ``eval``) only as a tokeniser; the Python tree is
walked once, every node is checked against a whitelist and converted into this
package's own small node types, and the result is type-checked against a fixed table
of names and functions. Evaluation is a tiny interpreter over that checked tree; the
unexplained test of a criterion, run on every trial, uses the same tree turned once
into nested Python closures (still no eval/exec).

Grammar (Python syntax, a strict subset):
  numbers, ``true``/``false``, ``+ - * / %``, ``**`` with a constant exponent,
  comparisons (chains allowed), ``and``/``or``/``not``, parentheses, and calls of the
  functions in :data:`FUNCTIONS`. Cue ids appear as bare identifiers (``tone_hi``) or
  strings (``"tone_hi"``); ``all`` means every condition.

Runtime arithmetic never raises: a division by zero gives NaN, an overflow gives
infinity, and every comparison involving NaN is false.

  vocab   NAMES, FUNCTIONS (NameSpec, FuncSpec), types NUM/BOOL, the size limits
  tree    the checked node types and Expr
  check   parse: whitelist, convert, type-check; Problem, Context, ExprError
  run     evaluate (the interpreter that explains), compiled / explain_if (closures), Env;
          cheap_first (compiled, model-free operands of and/or first: the engine's tests)
  show    fmt: a number as reasons and messages show it
"""

from .check import Context, ExprError, Problem, parse
from .run import Env, Lookup, cheap_first, compiled, evaluate, explain_if
from .run import _arith as _arith  # private: the tests check the interpreter's arithmetic
from .run import _Eval as _Eval  # private: the tests hold the compiled form equal to it
from .show import fmt
from .tree import Binary, BoolOp, Call, Compare, Const, CueRef, Expr, Name, Node, Unary, constant
from .vocab import (
    BOOL,
    FUNCTIONS,
    INF,
    MAX_ARGS,
    MAX_CONSTANT,
    MAX_DEPTH,
    MAX_EXPONENT,
    MAX_LENGTH,
    NAMES,
    NUM,
    FuncSpec,
    NameSpec,
    allowed_hint,
)

__all__ = [
    "BOOL",
    "FUNCTIONS",
    "INF",
    "MAX_ARGS",
    "MAX_CONSTANT",
    "MAX_DEPTH",
    "MAX_EXPONENT",
    "MAX_LENGTH",
    "NAMES",
    "NUM",
    "Binary",
    "BoolOp",
    "Call",
    "Compare",
    "Const",
    "Context",
    "CueRef",
    "Env",
    "Expr",
    "ExprError",
    "FuncSpec",
    "Lookup",
    "Name",
    "NameSpec",
    "Node",
    "Problem",
    "Unary",
    "allowed_hint",
    "cheap_first",
    "compiled",
    "constant",
    "evaluate",
    "explain_if",
    "fmt",
    "parse",
]
