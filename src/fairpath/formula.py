"""Payoffs written as expressions, compiled safely: ``ast`` whitelist -> sympy -> numpy.

The language (see docs/products.md): numbers; the names of the product's assets and of its
constants; arithmetic ``+ - * / **`` and unary minus; comparisons ``< <= > >= == !=``;
``and``, ``or``, ``not`` between conditions; the functions ``min max mean abs exp log sqrt``
and ``where(condition, if_true, if_false)``; ``NAME[i]`` (an asset's level at observation
``i``, an integer literal; negative counts from the end) and ``NAME`` alone (the vector of its
levels over the observations). ``mean``, and ``min``/``max`` of one vector, reduce over the
observations; ``min``/``max`` of several arguments, and arithmetic, work element by element.
The result must be one amount per path.

Safety: the text is parsed by :func:`ast.parse` in ``eval`` mode and every node is checked
against a whitelist before anything else happens; attributes, calls to unlisted names,
lambdas, comprehensions, strings, subscripts other than an integer literal, dunder names,
starred or keyword arguments, exponents that are not small number literals, expressions nested
too deep or too long are all refused with one line saying what and where. The checked tree is
then translated node by node into a sympy expression (never ``sympify`` of text), and sympy
generates the numpy function from that expression. Nothing the user wrote is executed as
Python.
"""

from __future__ import annotations

import ast
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import sympy as sp

from fairpath.errors import InputError

FUNCTIONS = ("min", "max", "mean", "abs", "exp", "log", "sqrt", "where")
#: Limits that keep a hostile expression from exhausting memory or time before evaluation.
MAX_LENGTH = 4000
MAX_DEPTH = 40
MAX_NODES = 2000
MAX_EXPONENT = 64.0
MAX_LITERAL = 1e15

_BINOPS = (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow)
_CMPOPS = (ast.Lt, ast.LtE, ast.Gt, ast.GtE, ast.Eq, ast.NotEq)


@dataclass(frozen=True)
class CompiledFormula:
    """A checked expression compiled to ``f(levels) -> amount per path``."""

    text: str
    assets: tuple[str, ...]
    n_dates: int
    expression: sp.Expr
    function: Callable
    jumps: bool  # does the payoff contain comparisons (so it can jump)?

    def __call__(self, levels: np.ndarray) -> np.ndarray:
        """Amounts per path from levels shaped (paths, assets, dates)."""
        n = levels.shape[0]
        args = [levels[:, a, d] for a in range(len(self.assets)) for d in range(self.n_dates)]
        out = self.function(*args)
        return np.broadcast_to(np.asarray(out, dtype=float), (n,)).copy()


def _err(key: str, message: str, node: ast.AST | None = None) -> InputError:
    where = f" (column {node.col_offset + 1})" if node is not None and hasattr(
        node, "col_offset") else ""
    return InputError(message + where, key=key)


def check_tree(text: str, names: set[str], key: str = "expression") -> ast.Expression:
    """Parse ``text`` and check every node against the whitelist (raises InputError)."""
    if not isinstance(text, str):
        raise InputError(f"must be a string, got {type(text).__name__}", key=key)
    if not text.strip():
        raise InputError("is empty", key=key)
    if len(text) > MAX_LENGTH:
        raise InputError(f"is {len(text)} characters long; at most {MAX_LENGTH}", key=key)
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        col = f" at column {exc.offset}" if exc.offset else ""
        raise InputError(f"not a valid expression{col}: {exc.msg}", key=key) from None
    except (ValueError, RecursionError, MemoryError):
        raise InputError("cannot be parsed (too deep or not text)", key=key) from None
    count = 0

    def walk(node: ast.AST, depth: int) -> None:
        nonlocal count
        count += 1
        if count > MAX_NODES:
            raise _err(key, f"is too long: more than {MAX_NODES} parts")
        if depth > MAX_DEPTH:
            raise _err(key, f"is nested too deep (more than {MAX_DEPTH} levels)", node)
        if isinstance(node, ast.Expression):
            walk(node.body, depth + 1)
        elif isinstance(node, ast.Constant):
            v = node.value
            if isinstance(v, bool) or not isinstance(v, int | float):
                raise _err(key, f"only numbers are allowed as literals, not {v!r}", node)
            if not math.isfinite(float(v)) or abs(float(v)) > MAX_LITERAL:
                raise _err(key, f"the number {v!r} is out of range (at most {MAX_LITERAL:g})",
                           node)
        elif isinstance(node, ast.Name):
            if node.id.startswith("_"):
                raise _err(key, f"names starting with '_' are not allowed: {node.id!r}", node)
            if node.id not in names:
                raise _err(key, f"unknown name {node.id!r}; known: "
                           f"{', '.join(sorted(names)) or 'none'}", node)
        elif isinstance(node, ast.BinOp):
            if not isinstance(node.op, _BINOPS):
                raise _err(key, f"operator {type(node.op).__name__} is not allowed "
                           "(use + - * / **)", node)
            if isinstance(node.op, ast.Pow):
                e = node.right
                val = None
                if isinstance(e, ast.Constant):
                    val = e.value
                elif isinstance(e, ast.UnaryOp) and isinstance(e.op, ast.USub | ast.UAdd) \
                        and isinstance(e.operand, ast.Constant):
                    val = e.operand.value
                if isinstance(val, bool) or not isinstance(val, int | float) \
                        or not abs(float(val)) <= MAX_EXPONENT:
                    raise _err(key, "an exponent must be a number literal of at most "
                               f"{MAX_EXPONENT:g} in size", node)
            walk(node.left, depth + 1)
            walk(node.right, depth + 1)
        elif isinstance(node, ast.UnaryOp):
            if not isinstance(node.op, ast.USub | ast.UAdd | ast.Not):
                raise _err(key, f"operator {type(node.op).__name__} is not allowed", node)
            walk(node.operand, depth + 1)
        elif isinstance(node, ast.BoolOp):
            for v in node.values:
                walk(v, depth + 1)
        elif isinstance(node, ast.Compare):
            if not all(isinstance(op, _CMPOPS) for op in node.ops):
                raise _err(key, "only the comparisons < <= > >= == != are allowed", node)
            walk(node.left, depth + 1)
            for c in node.comparators:
                walk(c, depth + 1)
        elif isinstance(node, ast.Call):
            if not isinstance(node.func, ast.Name) or node.func.id not in FUNCTIONS:
                what = node.func.id if isinstance(node.func, ast.Name) else "this"
                raise _err(key, f"calling {what!r} is not allowed; the functions are "
                           f"{', '.join(FUNCTIONS)}", node)
            if node.keywords:
                raise _err(key, "keyword arguments are not allowed", node)
            for a in node.args:
                if isinstance(a, ast.Starred):
                    raise _err(key, "starred arguments are not allowed", node)
                walk(a, depth + 1)
        elif isinstance(node, ast.Subscript):
            if not isinstance(node.value, ast.Name):
                raise _err(key, "only an asset name can be indexed, as NAME[i]", node)
            idx = node.slice
            val = None
            if isinstance(idx, ast.Constant):
                val = idx.value
            elif isinstance(idx, ast.UnaryOp) and isinstance(idx.op, ast.USub) \
                    and isinstance(idx.operand, ast.Constant):
                val = idx.operand.value
                val = -val if isinstance(val, int) and not isinstance(val, bool) else None
            if isinstance(val, bool) or not isinstance(val, int):
                raise _err(key, "an index must be an integer literal, as NAME[0] or "
                           "NAME[-1]", node)
            walk(node.value, depth + 1)
        else:
            raise _err(key, f"{type(node).__name__} is not allowed in an expression", node)

    try:
        walk(tree, 0)
    except RecursionError:
        raise InputError("is nested too deep", key=key) from None
    return tree


def compile_formula(text: str, assets: tuple[str, ...], n_dates: int,
                    constants: dict[str, float] | None = None, *,
                    key: str = "expression") -> CompiledFormula:
    """Check, translate and compile an expression over ``assets`` observed ``n_dates`` times.

    Examples
    --------
    >>> f = compile_formula("max(mean(NORDA) / NORDA[0] - 1, 0) * 1000", ("NORDA",), 4)
    >>> levels = np.array([[[100.0, 104.0, 110.0, 106.0]]])
    >>> round(float(f(levels)[0]), 6)
    50.0
    >>> compile_formula("NORDA.__class__", ("NORDA",), 4)
    Traceback (most recent call last):
    ...
    fairpath.errors.InputError: expression: Attribute is not allowed in an expression (column 1)
    """
    constants = dict(constants or {})
    for name in constants:
        if name in assets:
            raise InputError(f"{name!r} is both an asset and a constant", key="constants")
        if name in FUNCTIONS:
            raise InputError(f"{name!r} is a function name; choose another", key="constants")
    clash = [a for a in assets if a in FUNCTIONS]
    if clash:
        raise InputError(f"asset {clash[0]!r} has a function's name and cannot be used in an "
                         "expression", key="assets")
    names = set(assets) | set(constants) | set(FUNCTIONS)
    tree = check_tree(text, names, key)
    symbols = [[sp.Symbol(f"x{a}_{d}", positive=True) for d in range(n_dates)]
               for a in range(len(assets))]
    index = {a: i for i, a in enumerate(assets)}
    jumps = False

    def vec(x):
        return isinstance(x, list)

    def lift(f, *xs):
        """Apply ``f`` element by element (vectors of equal length, scalars broadcast)."""
        n = {len(x) for x in xs if vec(x)}
        if len(n) > 1:
            raise _err(key, "vectors of different lengths cannot be combined")
        if not n:
            return f(*xs)
        m = n.pop()
        return [f(*(x[i] if vec(x) else x for x in xs)) for i in range(m)]

    def tr(node: ast.AST):
        nonlocal jumps
        if isinstance(node, ast.Expression):
            return tr(node.body)
        if isinstance(node, ast.Constant):
            v = node.value
            return sp.Integer(v) if isinstance(v, int) else sp.Float(v)
        if isinstance(node, ast.Name):
            if node.id in index:
                return list(symbols[index[node.id]])
            if node.id in constants:
                return sp.Float(constants[node.id])
            raise _err(key, f"the function {node.id!r} must be called", node)
        if isinstance(node, ast.Subscript):
            name = node.value.id
            if name not in index:
                raise _err(key, f"only assets can be indexed; {name!r} is not an asset", node)
            idx = node.slice
            i = idx.value if isinstance(idx, ast.Constant) else -idx.operand.value
            if not -n_dates <= i < n_dates:
                raise _err(key, f"{name}[{i}] is out of range: there are {n_dates} "
                           f"observations (0 to {n_dates - 1})", node)
            return symbols[index[name]][i]
        if isinstance(node, ast.UnaryOp):
            x = tr(node.operand)
            if isinstance(node.op, ast.USub):
                return lift(lambda a: -a, x)
            if isinstance(node.op, ast.UAdd):
                return x
            jumps = True
            return lift(lambda a: sp.Not(_cond(a, node)), x)
        if isinstance(node, ast.BinOp):
            a, b = tr(node.left), tr(node.right)
            op = node.op
            if isinstance(op, ast.Add):
                return lift(lambda u, v: u + v, a, b)
            if isinstance(op, ast.Sub):
                return lift(lambda u, v: u - v, a, b)
            if isinstance(op, ast.Mult):
                return lift(lambda u, v: u * v, a, b)
            if isinstance(op, ast.Div):
                return lift(lambda u, v: u / v, a, b)
            return lift(lambda u, v: u ** v, a, b)
        if isinstance(node, ast.BoolOp):
            jumps = True
            parts = [tr(v) for v in node.values]
            f = sp.And if isinstance(node.op, ast.And) else sp.Or
            return lift(lambda *xs: f(*(_cond(x, node) for x in xs)), *parts)
        if isinstance(node, ast.Compare):
            jumps = True
            ops = {ast.Lt: sp.StrictLessThan, ast.LtE: sp.LessThan,
                   ast.Gt: sp.StrictGreaterThan, ast.GtE: sp.GreaterThan, ast.Eq: sp.Eq,
                   ast.NotEq: sp.Ne}
            terms = [tr(node.left)] + [tr(c) for c in node.comparators]
            rels = [ops[type(op)] for op in node.ops]
            pieces = [lift(lambda u, v, rel=rel: rel(u, v), terms[i], terms[i + 1])
                      for i, rel in enumerate(rels)]
            return pieces[0] if len(pieces) == 1 else lift(lambda *xs: sp.And(*xs), *pieces)
        if isinstance(node, ast.Call):
            fn = node.func.id
            args = [tr(a) for a in node.args]
            if fn == "where":
                if len(args) != 3:
                    raise _err(key, "where takes three arguments: where(condition, if_true, "
                               "if_false)", node)
                jumps = True
                return lift(lambda c, u, v: sp.Piecewise((u, _cond(c, node)), (v, True)),
                            *args)
            if fn in ("abs", "exp", "log", "sqrt"):
                if len(args) != 1:
                    raise _err(key, f"{fn} takes one argument", node)
                f = {"abs": sp.Abs, "exp": sp.exp, "log": sp.log, "sqrt": sp.sqrt}[fn]
                if fn == "abs":
                    jumps = True  # a kink, not a jump: pathwise-unsafe all the same
                return lift(f, args[0])
            if fn == "mean":
                if len(args) != 1 or not vec(args[0]):
                    raise _err(key, "mean takes one vector, as mean(NORDA) or "
                               "mean(NORDA / NORDA[0])", node)
                return sp.Add(*args[0]) / len(args[0])
            # min / max
            if not args:
                raise _err(key, f"{fn} needs at least one argument", node)
            f = sp.Min if fn == "min" else sp.Max
            if len(args) == 1:
                if not vec(args[0]):
                    raise _err(key, f"{fn} of one number is that number; give a vector or "
                               "several arguments", node)
                return f(*args[0])
            return lift(lambda *xs: f(*xs), *args)
        raise _err(key, f"{type(node).__name__} is not allowed", node)  # pragma: no cover

    try:
        expr = tr(tree)
    except RecursionError:
        raise InputError("is nested too deep", key=key) from None
    if vec(expr):
        raise InputError("gives a vector over the observations, not one amount per path: use "
                         "NAME[i], mean(...), min(...) or max(...)", key=key)
    for num in expr.atoms(sp.Number):
        try:
            big = not abs(float(num)) <= 1e300
        except (OverflowError, TypeError):
            big = True
        if big:
            raise InputError(f"a constant part of it is out of range ({sp.sstr(num)[:40]})",
                             key=key)
    if _is_condition(expr):
        expr = sp.Piecewise((sp.Integer(1), expr), (sp.Integer(0), True))
    flat = [s for row in symbols for s in row]
    try:
        fn = sp.lambdify(flat, expr, modules="numpy", cse=True)
    except (TypeError, ValueError, RecursionError) as exc:
        raise InputError(f"cannot be compiled: {exc}", key=key) from None
    return CompiledFormula(text, tuple(assets), n_dates, expr, fn, jumps)


def _is_condition(x) -> bool:
    """A sympy truth value (a comparison or a combination of them), not a number or symbol."""
    return isinstance(x, sp.core.relational.Relational | sp.logic.boolalg.BooleanFunction
                      | sp.logic.boolalg.BooleanAtom)


def _cond(x, node):
    """A sympy condition from a comparison (or a number: non-zero is true)."""
    if _is_condition(x):
        return x
    if isinstance(x, list):
        raise InputError("a condition must be one value per path, not a vector",
                         key="expression")
    return sp.Ne(x, 0)
