"""Evaluating parameter expressions by walking the parse tree.

``let f_ring = 1 / (2*pi*sqrt(Lcoil * 47 nF))`` is evaluated here: numbers
carry units through arithmetic and every step is checked. Nothing here
calls Python's ``eval``; the only functions a netlist can call are the ones
in :data:`FUNCTIONS`.
"""

from __future__ import annotations

import math
from fractions import Fraction
from typing import Callable, Mapping, Optional

from .errors import InputError, Span, UnitsError, UnknownNameError
from .netlist import BinaryOp, Call, Compare, Expr, Name, Negate, Number, Pair, String, Word
from .units import DIMENSIONLESS, DimensionError, Quantity, describe

CONSTANTS: dict[str, Quantity] = {"pi": Quantity(math.pi, DIMENSIONLESS)}


def _plain(fn: Callable[[float], float], name: str) -> Callable[[list[Quantity], Span], Quantity]:
    def apply(args: list[Quantity], span: Span) -> Quantity:
        _arity(name, args, 1, span)
        (x,) = args
        if not x.dim.is_dimensionless:
            raise UnitsError(f"{name}() needs a plain number (angle in rad), got {describe(x.dim)}", span)
        try:
            return Quantity(fn(x.value), DIMENSIONLESS)
        except (ValueError, OverflowError) as exc:
            raise InputError(f"{name}({x.value:g}) is not defined: {exc}", span) from None

    return apply


def _arity(name: str, args: list, n: int, span: Span) -> None:
    if len(args) != n:
        raise InputError(f"{name}() takes {n} argument{'s' if n != 1 else ''}, got {len(args)}", span)


def _sqrt(args: list[Quantity], span: Span) -> Quantity:
    _arity("sqrt", args, 1, span)
    (x,) = args
    if x.value < 0:
        raise InputError(f"sqrt of a negative value ({x.value:g})", span)
    return Quantity(math.sqrt(x.value), x.dim ** Fraction(1, 2))


def _abs(args: list[Quantity], span: Span) -> Quantity:
    _arity("abs", args, 1, span)
    return Quantity(abs(args[0].value), args[0].dim)


def _extreme(name: str, pick: Callable) -> Callable[[list[Quantity], Span], Quantity]:
    def apply(args: list[Quantity], span: Span) -> Quantity:
        if not args:
            raise InputError(f"{name}() needs at least one argument", span)
        dim = args[0].dim
        for a in args[1:]:
            if a.dim != dim:
                raise UnitsError(
                    f"{name}() compares values of one unit; got {describe(dim)} and {describe(a.dim)}", span
                )
        return Quantity(pick(a.value for a in args), dim)

    return apply


FUNCTIONS: dict[str, Callable[[list[Quantity], Span], Quantity]] = {
    "sqrt": _sqrt,
    "exp": _plain(math.exp, "exp"),
    "ln": _plain(math.log, "ln"),
    "log10": _plain(math.log10, "log10"),
    "sin": _plain(math.sin, "sin"),
    "cos": _plain(math.cos, "cos"),
    "tan": _plain(math.tan, "tan"),
    "atan": _plain(math.atan, "atan"),
    "abs": _abs,
    "min": _extreme("min", min),
    "max": _extreme("max", max),
}


#: ``handler(call, evaluate_argument) -> Quantity | None``: a hook for calls
#: this module does not know (measurements such as ``max(v(out))``). It is
#: asked first for every call; ``None`` means "not mine", and the call is
#: then evaluated as one of :data:`FUNCTIONS`. ``evaluate_argument``
#: evaluates a sub-expression under the same names and the same hook.
CallHandler = Callable[[Call, Callable[[Expr], Quantity]], Optional[Quantity]]


def evaluate(expr: Expr, params: Mapping[str, Quantity], call_handler: CallHandler | None = None) -> Quantity:
    """Evaluate a parameter expression to a :class:`~mna.units.Quantity`.

    ``params`` maps names (``let`` parameters, and for ``measure``/``check``
    lines the measurements above) to their values. ``call_handler`` (see
    :data:`CallHandler`) evaluates calls this module does not know. Raises
    :class:`~mna.errors.InputError` subclasses with the expression's span.
    """
    if isinstance(expr, Number):
        return expr.value
    if isinstance(expr, Name):
        if expr.name in params:
            return params[expr.name]
        if expr.name in CONSTANTS:
            return CONSTANTS[expr.name]
        import difflib

        close = difflib.get_close_matches(expr.name, list(params) + list(CONSTANTS), n=1)
        hint = f"did you mean {close[0]!r}?" if close else "define it with a 'let' line above this one"
        raise UnknownNameError(f"unknown parameter {expr.name!r}", expr.span, hint=hint)

    def sub(e: Expr) -> Quantity:
        return evaluate(e, params, call_handler)

    if isinstance(expr, BinaryOp):
        left = sub(expr.left)
        right = sub(expr.right)
        try:
            if expr.op == "+":
                return left + right
            if expr.op == "-":
                return left - right
            if expr.op == "*":
                return left * right
            if expr.op == "/":
                if right.value == 0:
                    raise InputError("division by zero", expr.right.span)
                return left / right
            if expr.op == "^":
                if not right.dim.is_dimensionless:
                    raise UnitsError(f"an exponent must be a plain number, got {describe(right.dim)}", expr.right.span)
                exponent = right.value
                if not left.dim.is_dimensionless:
                    if float(exponent).is_integer():
                        exponent = int(exponent)
                    else:
                        exponent = Fraction(exponent).limit_denominator(12)
                return left ** exponent
        except DimensionError as exc:
            raise UnitsError(str(exc), expr.span) from None
        except (OverflowError, ZeroDivisionError, ValueError) as exc:
            raise InputError(f"cannot compute {expr.op}: {exc}", expr.span) from None
    if isinstance(expr, Negate):
        return -sub(expr.operand)
    if isinstance(expr, Call):
        if call_handler is not None:
            handled = call_handler(expr, sub)
            if handled is not None:
                return handled
        fn = FUNCTIONS.get(expr.func)
        if fn is None:
            raise UnknownNameError(
                f"{expr.func}() is not a function of parameter expressions",
                expr.span,
                hint="available: " + ", ".join(sorted(FUNCTIONS)),
            )
        if expr.named:
            raise InputError(f"{expr.func}() takes no named arguments", expr.named[0][2])
        args = [sub(a) for a in expr.args]
        return fn(args, expr.span)
    if isinstance(expr, (Word, String, Pair, Compare)):
        raise InputError("expected a number or quantity here", expr.span)
    raise InputError("expected a number or quantity here", getattr(expr, "span", None))
