"""A small arithmetic grammar for derived properties, parsed into a tree (never ``eval``).

Grammar (EBNF; blanks between tokens are ignored)::

    formula  = expr END
    expr     = term { ("+" | "-" | "−") term }
    term     = unary { ("*" | "×" | "/" | "÷") unary }
    unary    = { "+" | "-" | "−" } primary
    primary  = number | code | call | "(" expr ")"
    call     = ("min" | "max") "(" expr "," expr { "," expr } ")"
    number   = digits [ "." [ digits ] ] [ exponent ] | "." digits [ exponent ]
    exponent = ("e" | "E") [ "+" | "-" ] digits
    code     = letter_or_underscore { letter_or_underscore | digit }

``min`` and ``max`` are recognised in any letter case and cannot be property
codes; property codes are compared in upper case, as the registry stores
them. Anything else is refused with an :class:`~registry.errors.InputError`
(``field="formula"``) that names the 1-based character position.

:func:`evaluate` returns the value and its first derivatives with respect to
every property code (forward-mode differentiation over the tree), which is
what first-order uncertainty propagation needs.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from registry.errors import InputError

MAX_LENGTH = 2000
MAX_DEPTH = 64
FUNCTIONS = ("MIN", "MAX")
_TOKEN = re.compile(r"""
    (?P<space>\s+)
  | (?P<number>(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)
  | (?P<name>[A-Za-z_][A-Za-z0-9_]*)
  | (?P<op>[-+−*×/÷(),])
""", re.VERBOSE)
_CANONICAL_OP = {"−": "-", "×": "*", "÷": "/"}


@dataclass(frozen=True)
class Num:
    value: float


@dataclass(frozen=True)
class Code:
    code: str


@dataclass(frozen=True)
class Neg:
    operand: "Node"


@dataclass(frozen=True)
class BinOp:
    op: str  # one of + - * /
    left: "Node"
    right: "Node"


@dataclass(frozen=True)
class Call:
    function: str  # MIN or MAX
    args: tuple["Node", ...]


Node = Num | Code | Neg | BinOp | Call


@dataclass(frozen=True)
class _Token:
    kind: str  # number, name, op, end
    text: str
    pos: int  # 0-based


def _error(pos: int, message: str) -> InputError:
    err = InputError(f"formula position {pos + 1}: {message}", field="formula")
    err.position = pos + 1
    return err


def _tokens(formula: str) -> list[_Token]:
    out, pos = [], 0
    while pos < len(formula):
        m = _TOKEN.match(formula, pos)
        if m is None:
            # reported when the parser reaches it, so an earlier error is named first
            out.append(_Token("bad", formula[pos], pos))
            return out
        if m.lastgroup != "space":
            text = m.group()
            out.append(_Token(m.lastgroup, _CANONICAL_OP.get(text, text), pos))
        pos = m.end()
    out.append(_Token("end", "", len(formula)))
    return out


class _Parser:
    def __init__(self, formula: str):
        self.tokens = _tokens(formula)
        self.i = 0
        self.depth = 0

    @property
    def tok(self) -> _Token:
        tok = self.tokens[self.i]
        if tok.kind == "bad":
            raise _error(tok.pos, f"{tok.text!r} is not allowed (use numbers, property codes, "
                                  "+ − × ÷, parentheses, min and max)")
        return tok

    def _describe(self, tok: _Token) -> str:
        return "the end of the formula" if tok.kind == "end" else repr(tok.text)

    def expect(self, text: str) -> None:
        if self.tok.kind != "op" or self.tok.text != text:
            raise _error(self.tok.pos, f"expected {text!r}, found {self._describe(self.tok)}")
        self.i += 1

    def formula(self) -> Node:
        node = self.expr()
        if self.tok.kind != "end":
            raise _error(self.tok.pos, f"expected an operator or the end of the formula, "
                                       f"found {self._describe(self.tok)}")
        return node

    def expr(self) -> Node:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise _error(self.tok.pos, f"formula nested deeper than {MAX_DEPTH} levels")
        node = self.term()
        while self.tok.kind == "op" and self.tok.text in "+-":
            op = self.tok.text
            self.i += 1
            node = BinOp(op, node, self.term())
        self.depth -= 1
        return node

    def term(self) -> Node:
        node = self.unary()
        while self.tok.kind == "op" and self.tok.text in "*/":
            op = self.tok.text
            self.i += 1
            node = BinOp(op, node, self.unary())
        return node

    def unary(self) -> Node:
        negate = False
        while self.tok.kind == "op" and self.tok.text in "+-":
            negate ^= self.tok.text == "-"
            self.i += 1
        node = self.primary()
        return Neg(node) if negate else node

    def primary(self) -> Node:
        tok = self.tok
        if tok.kind == "number":
            self.i += 1
            value = float(tok.text)
            if not np.isfinite(value):
                raise _error(tok.pos, f"number {tok.text} is too large")
            return Num(value)
        if tok.kind == "name":
            self.i += 1
            name = tok.text.upper()
            if name in FUNCTIONS:
                return self.call(name, tok)
            if self.tok.kind == "op" and self.tok.text == "(":
                raise _error(tok.pos, f"{tok.text!r} is not a function (only min and max are)")
            return Code(name)
        if tok.kind == "op" and tok.text == "(":
            self.i += 1
            node = self.expr()
            self.expect(")")
            return node
        raise _error(tok.pos, f"expected a number, a property code, '(' , min or max, "
                              f"found {self._describe(tok)}")

    def call(self, name: str, name_tok: _Token) -> Node:
        if not (self.tok.kind == "op" and self.tok.text == "("):
            raise _error(name_tok.pos, f"{name_tok.text} must be followed by '(' "
                                       "(it cannot be a property code)")
        self.i += 1
        args = [self.expr()]
        while self.tok.kind == "op" and self.tok.text == ",":
            self.i += 1
            args.append(self.expr())
        self.expect(")")
        if len(args) < 2:
            raise _error(name_tok.pos, f"{name_tok.text} needs at least two arguments")
        return Call(name, tuple(args))


def parse(formula: str) -> Node:
    """Parse ``formula`` into a tree; InputError (field ``formula``) names the position."""
    if not isinstance(formula, str):
        raise InputError("formula must be text", field="formula")
    if len(formula) > MAX_LENGTH:
        raise _error(MAX_LENGTH, f"formula longer than {MAX_LENGTH} characters")
    if not formula.strip():
        raise _error(0, "formula is empty")
    return _Parser(formula).formula()


def codes(node: Node) -> list[str]:
    """Property codes the tree uses, sorted, each once."""
    found: set[str] = set()
    stack = [node]
    while stack:
        n = stack.pop()
        if isinstance(n, Code):
            found.add(n.code)
        elif isinstance(n, Neg):
            stack.append(n.operand)
        elif isinstance(n, BinOp):
            stack.extend((n.left, n.right))
        elif isinstance(n, Call):
            stack.extend(n.args)
    return sorted(found)


Gradient = dict[str, np.ndarray]


def _combine(ga: Gradient, wa, gb: Gradient, wb) -> Gradient:
    """wa·ga + wb·gb, code by code (missing entries are zero)."""
    out = {k: wa * v for k, v in ga.items()}
    for k, v in gb.items():
        out[k] = out[k] + wb * v if k in out else wb * v
    return out


def evaluate(node: Node, inputs: dict[str, np.ndarray]) -> tuple[np.ndarray, Gradient]:
    """Value of the tree and ∂value/∂code for every code, elementwise over samples.

    A non-finite intermediate result (division by zero, overflow) makes the
    value NaN: undefined, never silently finite.

    ``min``/``max`` take the derivative of the argument that is selected (the
    first one on a tie, where the derivative is not defined).
    """
    if isinstance(node, Num):
        return np.asarray(node.value, dtype=np.float64), {}
    if isinstance(node, Code):
        x = inputs[node.code]
        return x, {node.code: np.ones_like(x)}
    if isinstance(node, Neg):
        v, g = evaluate(node.operand, inputs)
        return -v, {k: -d for k, d in g.items()}
    if isinstance(node, BinOp):
        a, ga = evaluate(node.left, inputs)
        b, gb = evaluate(node.right, inputs)
        if node.op == "+":
            value, grad = a + b, _combine(ga, 1.0, gb, 1.0)
        elif node.op == "-":
            value, grad = a - b, _combine(ga, 1.0, gb, -1.0)
        elif node.op == "*":
            value, grad = a * b, _combine(ga, b, gb, a)
        else:
            value, grad = a / b, _combine(ga, 1.0 / b, gb, -a / (b * b))
        # a division by zero or an overflow anywhere leaves the whole value
        # undefined (NaN propagates; IEEE would turn 1/(1/0) into 0)
        return np.where(np.isfinite(value), value, np.nan), grad
    values, grads = zip(*(evaluate(arg, inputs) for arg in node.args))
    stacked = np.stack(np.broadcast_arrays(*values))
    pick = (np.argmin if node.function == "MIN" else np.argmax)(stacked, axis=0)
    value = np.take_along_axis(stacked, pick[None], axis=0)[0]
    grad: Gradient = {}
    for j, g in enumerate(grads):
        chosen = pick == j
        grad = _combine(grad, 1.0, g, chosen.astype(np.float64))
    return value, grad
