"""Evaluating parameter expressions by walking the parse tree.

``let f_ring = 1 / (2*pi*sqrt(Lcoil * 47 nF))`` is evaluated here: numbers
carry units through arithmetic and every step is checked. Nothing here
calls Python's ``eval``; the only functions a netlist can call are the ones
in :data:`FUNCTIONS`.
"""

from __future__ import annotations

import math
from fractions import Fraction
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Mapping, Optional, Union

import numpy as np

from .errors import InputError, Span, UnitsError, UnknownNameError
from .netlist import BinaryOp, Call, Compare, Expr, Name, Negate, NodePair, Number, Pair, String, Word
from .units import DIMENSIONLESS, MAX_UNIT_EXPONENT, Dimension, DimensionError, Quantity, describe

CONSTANTS: dict[str, Quantity] = {"pi": Quantity(math.pi, DIMENSIONLESS)}


@dataclass(frozen=True)
class Samples:
    """A waveform inside an expression: SI values at the run's time points, with a dimension.

    A call handler returns it for a circuit quantity (``i(F1)`` in
    ``integral(i(F1)^2)``); arithmetic on it follows the parameter rules
    sample by sample.
    """

    value: np.ndarray
    dim: Dimension


Value = Union[Quantity, Samples]


def _value(value: Any, dim: Dimension) -> Value:
    return Samples(value, dim) if np.ndim(value) else Quantity(float(value), dim)


def _plain(fn: Callable[[float], float], name: str, array_fn: Callable | None = None
           ) -> Callable[[list[Value], Span], Value]:
    def apply(args: list[Value], span: Span) -> Value:
        _arity(name, args, 1, span)
        (x,) = args
        if not x.dim.is_dimensionless:
            raise UnitsError(f"{name}() needs a plain number (angle in rad), got {describe(x.dim)}", span)
        if isinstance(x, Samples):
            return Samples(array_fn(x.value), DIMENSIONLESS)
        try:
            return Quantity(fn(x.value), DIMENSIONLESS)
        except (ValueError, OverflowError) as exc:
            raise InputError(f"{name}({x.value:g}) is not defined: {exc}", span) from None

    return apply


def _arity(name: str, args: list, n: int, span: Span) -> None:
    if len(args) != n:
        raise InputError(f"{name}() takes {n} argument{'s' if n != 1 else ''}, got {len(args)}", span)


def _sqrt(args: list[Value], span: Span) -> Value:
    _arity("sqrt", args, 1, span)
    (x,) = args
    if isinstance(x, Samples):
        return Samples(np.sqrt(x.value), x.dim ** Fraction(1, 2))
    if x.value < 0:
        raise InputError(f"sqrt of a negative value ({x.value:g})", span)
    return Quantity(math.sqrt(x.value), x.dim ** Fraction(1, 2))


def _abs(args: list[Value], span: Span) -> Value:
    _arity("abs", args, 1, span)
    return _value(np.abs(args[0].value), args[0].dim)


def _extreme(name: str, pick: Callable) -> Callable[[list[Value], Span], Value]:
    def apply(args: list[Value], span: Span) -> Value:
        if not args:
            raise InputError(f"{name}() needs at least one argument", span)
        dim = args[0].dim
        for a in args[1:]:
            if a.dim != dim:
                raise UnitsError(
                    f"{name}() compares values of one unit; got {describe(dim)} and {describe(a.dim)}", span
                )
        if any(isinstance(a, Samples) for a in args):
            raise InputError(f"{name}() of waveforms: measure each on its own line first, then use "
                             "the names", span)
        return Quantity(pick(a.value for a in args), dim)

    return apply


FUNCTIONS: dict[str, Callable[[list[Value], Span], Value]] = {
    "sqrt": _sqrt,
    "exp": _plain(math.exp, "exp", np.exp),
    "ln": _plain(math.log, "ln", np.log),
    "log10": _plain(math.log10, "log10", np.log10),
    "sin": _plain(math.sin, "sin", np.sin),
    "cos": _plain(math.cos, "cos", np.cos),
    "tan": _plain(math.tan, "tan", np.tan),
    "atan": _plain(math.atan, "atan", np.arctan),
    "abs": _abs,
    "min": _extreme("min", min),
    "max": _extreme("max", max),
}


# --------------------------------------------------------------------------
# Walking: the one traversal every search over an expression uses.


def children(expr: Expr) -> tuple[Expr, ...]:
    """The sub-expressions of ``expr``, left to right (call arguments, then named values)."""
    if isinstance(expr, (BinaryOp, Compare)):
        return (expr.left, expr.right)
    if isinstance(expr, Negate):
        return (expr.operand,)
    if isinstance(expr, Pair):
        return (expr.key, expr.value)
    if isinstance(expr, Call):
        return (*expr.args, *(value for _, value, _ in expr.named))
    return ()


def walk(expr: Expr, enter: Callable[[Expr], tuple[Expr, ...]] = children) -> Iterator[Expr]:
    """Every node of ``expr``, parents before children, left to right.

    ``enter(node)`` gives the children to descend into (default: all of
    them); a search that must not look inside some calls passes its own.
    """
    stack = [expr]
    while stack:
        node = stack.pop()
        yield node
        stack.extend(reversed(enter(node)))


def is_quantity_call(expr: Expr) -> bool:
    """True for the shape of a circuit quantity: ``v(out)``, ``v(a -> b)``, ``i(L1)``
    (and the refused ``v(a, b)``), not a function of :data:`FUNCTIONS`."""
    return (
        isinstance(expr, Call)
        and expr.func not in FUNCTIONS
        and not expr.named
        and bool(expr.args)
        and all(isinstance(a, (Name, NodePair)) for a in expr.args)
    )


# --------------------------------------------------------------------------
# Evaluating.

#: ``handler(call, evaluate_argument) -> Quantity | Samples | None``: a hook
#: for calls this module does not know (measurements such as
#: ``max(v(out))``, circuit quantities). It is asked first for every call;
#: ``None`` means "not mine", and the call is then evaluated as one of
#: :data:`FUNCTIONS`. ``evaluate_argument`` evaluates a sub-expression under
#: the same names and the same hook.
CallHandler = Callable[[Call, Callable[[Expr], Value]], Optional[Value]]


def evaluate(expr: Expr, params: Mapping[str, Quantity], call_handler: CallHandler | None = None) -> Value:
    """Evaluate an expression to a :class:`~mna.units.Quantity` (or :class:`Samples`).

    ``params`` maps names (``let`` parameters, and for ``measure``/``check``
    lines the measurements above) to their values. ``call_handler`` (see
    :data:`CallHandler`) evaluates calls this module does not know; when it
    returns :class:`Samples`, the arithmetic around it runs sample by
    sample. Raises :class:`~mna.errors.InputError` subclasses with the
    expression's span.
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

    def sub(e: Expr) -> Value:
        return evaluate(e, params, call_handler)

    if isinstance(expr, BinaryOp):
        left, right = sub(expr.left), sub(expr.right)
        return _finite(_binary(expr, left, right), expr, (left, right))
    if isinstance(expr, Negate):
        operand = sub(expr.operand)
        try:
            return -operand if isinstance(operand, Quantity) else Samples(-operand.value, operand.dim)
        except DimensionError as exc:  # (an absolute temperature cannot be negated)
            raise UnitsError(str(exc), expr.span) from None
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
        return _finite(fn(args, expr.span), expr, args)
    raise InputError("expected a number or quantity here", getattr(expr, "span", None))


def _finite(result: Value, expr: Expr, operands) -> Value:
    """``result``, unless finite numbers gave one that is not finite (an input error at ``expr``).

    ``1e200 * 1e200`` is an error here rather than inf in a circuit. (A
    placeholder NaN, used while measure lines are checked before a run,
    passes through; so do waveform samples.)
    """
    if (isinstance(result, Quantity) and not math.isfinite(result.value)
            and all(isinstance(a, Quantity) and math.isfinite(a.value) for a in operands)):
        raise InputError(f"this gives {result.value!r}, not a finite number (a result beyond 1e308, "
                         "or inf - inf)", expr.span)
    return result


def _binary(expr: BinaryOp, left: Value, right: Value) -> Value:
    if isinstance(left, Quantity) and isinstance(right, Quantity):
        return _scalar_binary(expr, left, right)
    op = expr.op
    if op in "+-":
        if left.dim != right.dim:
            verb = "add" if op == "+" else "subtract"
            raise UnitsError(f"cannot {verb} {describe(left.dim)} and {describe(right.dim)}", expr.span)
        return _value(left.value + right.value if op == "+" else left.value - right.value, left.dim)
    if op == "*":
        return _value(left.value * right.value, left.dim * right.dim)
    if op == "/":
        with np.errstate(divide="ignore", invalid="ignore"):
            return _value(left.value / right.value, left.dim / right.dim)
    if isinstance(right, Samples) or not right.dim.is_dimensionless:
        raise UnitsError("an exponent must be a plain number, not a waveform", expr.right.span)
    power = right.value
    if not left.dim.is_dimensionless and abs(power) > MAX_UNIT_EXPONENT:
        raise UnitsError(f"a waveform with a unit raised to the power {power:g}: units take exponents "
                         f"up to {MAX_UNIT_EXPONENT} either way", expr.right.span)
    exponent: Any = int(power) if float(power).is_integer() else power
    if not left.dim.is_dimensionless and not isinstance(exponent, int):
        raise UnitsError("a waveform with a unit takes whole-number powers only", expr.right.span)
    return Samples(left.value ** power, left.dim ** exponent if isinstance(exponent, int) else left.dim)


def _scalar_binary(expr: BinaryOp, left: Quantity, right: Quantity) -> Quantity:
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
        if not right.dim.is_dimensionless:
            raise UnitsError(f"an exponent must be a plain number, got {describe(right.dim)}", expr.right.span)
        exponent = right.value
        if left.value < 0 and not float(exponent).is_integer():
            raise InputError(f"a negative number ({left.value:g}) to the fractional power {exponent:g} has "
                             "no real value", expr.span)
        if not left.dim.is_dimensionless:
            if abs(exponent) > MAX_UNIT_EXPONENT:
                raise UnitsError(f"a quantity with a unit raised to the power {exponent:g}: units take "
                                 f"exponents up to {MAX_UNIT_EXPONENT} either way", expr.right.span)
            if float(exponent).is_integer():
                exponent = int(exponent)
            else:
                exponent = Fraction(exponent).limit_denominator(12)
        return left ** exponent
    except DimensionError as exc:
        raise UnitsError(str(exc), expr.span) from None
    except InputError:
        raise
    except (OverflowError, ZeroDivisionError, ValueError) as exc:
        raise InputError(f"cannot compute {expr.op}: {exc}", expr.span) from None
