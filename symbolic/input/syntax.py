"""The character and syntax-tree limits every design-file string passes first.

A string is checked character by character (length, ASCII, control characters,
bracket depth), parsed by :func:`ast.parse` in ``eval`` mode, and its tree is
sized (nodes and nesting depth) before anything is built from it.  The limit
values are engineering judgement (common practice, no source).
"""

from __future__ import annotations

import ast
import re
import warnings

from ..runtime.errors import ExpressionError

__all__ = [
    "MAX_DEPTH",
    "MAX_NODES",
    "MAX_TEXT_LENGTH",
    "check_text",
    "check_tree_size",
    "operator_group",
    "parse_tree",
    "quote",
    "type_name",
]

MAX_TEXT_LENGTH = 2000
MAX_DEPTH = 50
MAX_NODES = 500
_QUOTE_LIMIT = 40

_CONTROL = re.compile(r"[\x00-\x1f\x7f]")

_ADDITIVE = (ast.Add, ast.Sub)
_MULTIPLICATIVE = (ast.Mult, ast.Div)


def quote(text: str, limit: int = _QUOTE_LIMIT) -> str:
    """Quote at most ``limit`` characters of ``text`` for an error message."""
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    escaped = text.encode("unicode_escape", errors="backslashreplace").decode("ascii")
    return "'" + escaped + "'"


def type_name(value: object) -> str:
    """The name of the type of ``value``, for an error message."""
    return type(value).__name__


def check_text(text: str, what: str) -> str:
    """Apply the cheap character-level limits; return the text without outer spaces."""
    if len(text) > MAX_TEXT_LENGTH:
        raise ExpressionError(
            f"{what} is too long ({len(text)} characters; at most {MAX_TEXT_LENGTH})"
        )
    if not text.isascii():
        position, char = next((i, c) for i, c in enumerate(text) if ord(c) > 127)
        raise ExpressionError(
            f"non-ASCII character U+{ord(char):04X} at position {position} of {what}; "
            "write names and numbers in plain ASCII"
        )
    control = _CONTROL.search(text)
    if control is not None:
        raise ExpressionError(
            f"control character U+{ord(control.group()):04X} at position {control.start()} "
            f"of {what}"
        )
    stripped = text.strip(" ")
    if not stripped:
        raise ExpressionError(f"{what} is empty")
    depth = 0
    for char in stripped:
        if char in "([{":
            depth += 1
            if depth > MAX_DEPTH:
                raise ExpressionError(
                    f"{what} nests brackets more than {MAX_DEPTH} deep: {quote(stripped)}"
                )
        elif char in ")]}":
            depth -= 1
    return stripped


def parse_tree(text: str, what: str) -> ast.expr:
    """Parse checked text with :func:`ast.parse` in ``eval`` mode; return the body."""
    try:
        with warnings.catch_warnings():
            # e.g. "1(2)" warns "'int' object is not callable"; such text is rejected anyway.
            warnings.simplefilter("ignore")
            tree = ast.parse(text, mode="eval")
    except SyntaxError as error:
        detail = error.msg or "invalid syntax"
        column = f" at column {error.offset}" if error.offset else ""
        raise ExpressionError(
            f"{what} is not valid syntax ({detail}{column}): {quote(text)}"
        ) from error
    except (RecursionError, MemoryError, ValueError, OverflowError) as error:
        raise ExpressionError(f"{what} is too complex to parse: {quote(text)}") from error
    return tree.body


def check_tree_size(body: ast.expr, text: str, what: str) -> None:
    """Count expression nodes and nesting depth without recursion.

    A left-leaning chain of additive (``+ -``) or multiplicative (``* /``)
    operators is one nesting level, so ``a + b + ... + z`` stays shallow.
    """
    stack: list[tuple[ast.AST, int]] = [(body, 1)]
    nodes = 0
    while stack:
        node, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise ExpressionError(f"{what} nests more than {MAX_DEPTH} deep: {quote(text)}")
        if isinstance(node, ast.expr):
            nodes += 1
            if nodes > MAX_NODES:
                raise ExpressionError(
                    f"{what} has more than {MAX_NODES} terms and operations: {quote(text)}"
                )
        for child in ast.iter_child_nodes(node):
            chained = (
                isinstance(node, ast.BinOp)
                and isinstance(child, ast.BinOp)
                and child is node.left
                and operator_group(node.op) is not None
                and operator_group(node.op) == operator_group(child.op)
            )
            stack.append((child, depth if chained else depth + 1))


def operator_group(op: ast.operator) -> str | None:
    """``"additive"`` for ``+ -``, ``"multiplicative"`` for ``* /``, else None."""
    if isinstance(op, _ADDITIVE):
        return "additive"
    if isinstance(op, _MULTIPLICATIVE):
        return "multiplicative"
    return None
