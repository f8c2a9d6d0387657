"""The checked tree: the expression language's own small node types, and ``Expr``, a
checked expression with its source text and result type.

Only the checker builds these nodes; evaluation walks nothing else, so no Python
object from the parsed text survives the check.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Node:
    """Base of the checked tree; ``col``/``end`` locate it in ``Expr.text``."""

    col: int
    end: int


@dataclass(frozen=True, slots=True)
class Const(Node):
    value: float | bool


@dataclass(frozen=True, slots=True)
class CueRef(Node):
    """A cue id (or ``all``, or the per-cue placeholder ``cue``) passed to a function."""

    cue: str


@dataclass(frozen=True, slots=True)
class Name(Node):
    name: str


@dataclass(frozen=True, slots=True)
class Call(Node):
    func: str
    args: tuple[Node, ...]


@dataclass(frozen=True, slots=True)
class Unary(Node):
    op: str  # '-', '+', 'not'
    operand: Node


@dataclass(frozen=True, slots=True)
class Binary(Node):
    op: str
    left: Node
    right: Node


@dataclass(frozen=True, slots=True)
class BoolOp(Node):
    op: str  # 'and' | 'or'
    values: tuple[Node, ...]


@dataclass(frozen=True, slots=True)
class Compare(Node):
    ops: tuple[str, ...]
    operands: tuple[Node, ...]


@dataclass(frozen=True, slots=True)
class Expr:
    """A checked expression: its source text, tree and result type."""

    text: str
    tree: Node
    type: str

    def source(self, node: Node) -> str:
        return self.text[node.col : node.end]

    def names_used(self) -> set[str]:
        out: set[str] = set()
        stack = [self.tree]
        while stack:
            node = stack.pop()
            if isinstance(node, Name):
                out.add(node.name)
            elif isinstance(node, Call):
                out.add(node.func + "()")
                stack.extend(node.args)
            elif isinstance(node, Unary):
                stack.append(node.operand)
            elif isinstance(node, Binary):
                stack += [node.left, node.right]
            elif isinstance(node, (BoolOp,)):
                stack.extend(node.values)
            elif isinstance(node, Compare):
                stack.extend(node.operands)
        return out


def constant(expr: Expr) -> float | None:
    """The value of an expression that is a bare number, else None."""
    return float(expr.tree.value) if isinstance(expr.tree, Const) and not isinstance(expr.tree.value, bool) else None

