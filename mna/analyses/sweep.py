"""Planning many runs of one circuit file: sweeps, spreads, Monte Carlo, corners.

A file asks for many runs with these statements (``grammar/README.md``,
"Many runs"):

    sweep Rs = 10 ohm, 22 ohm, 47 ohm                       # one axis
    sweep Cs = logarithmic(from=1 nF, to=100 nF, count=5)   # a second axis: a grid
    spread C1 uniform 10 %                                  # a component spread
    monte-carlo runs=200 seed=7                             # or: corners
    required-yield 95 %

This module turns them into a :class:`Study`: the circuit to vary, the
columns of the run table (:class:`Variable`) and one :class:`RunPlan` per
run, holding the parameter values that make the run. Nothing here
simulates; :mod:`mna.runner` runs the plans and :mod:`mna.study` gathers
their results.

How a spread reaches a value. The netlist is rewritten once, so that
every spread target reads a parameter of its own:

- a ``let`` parameter P becomes ``let P = (its expression) * P~factor``
  (a spread in %) or ``+ P~offset`` (a spread in P's unit);
- an element value (``spread C1``, ``spread resistance(L1)``) reads a new
  parameter named by the label, ``C1~``, defined just before the element as
  ``(its expression) * C1~factor`` (or ``+ C1~offset``).

``~`` cannot appear in a name written in a file, so these never clash with
the file's own names. A run sets ``~factor`` to ``1 + d`` or ``~offset``
to ``d``, so the nominal is whatever the file (and the run's swept values)
make it. Each run is then one :func:`circuit_for`: the nominal circuit of
the rewritten netlist with the run's values given to
:meth:`~mna.circuit.Circuit.with_parameters`, every value re-evaluated and
checked. A block parameter (``S1.capacitance``) is set through the same
call by its hierarchical name.

Random draws are made here, in the calling process, before any run starts:
Monte Carlo sample k draws from its own stream, ``SeedSequence(seed).spawn``
child k, so a run's values depend on its index and the seed only, never on
the number of workers or the order runs finish. A sweep combined with a
Monte Carlo run repeats the same samples at every sweep point (common random
numbers: the difference between two points is not blurred by different
draws).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace
from typing import Any, Mapping, Sequence

import numpy as np

from .. import netlist as nl
from ..errors import InputError, Span, UnitsError, UnknownNameError
from ..expressions import evaluate
from ..units import DIMENSIONLESS, Dimension, Quantity, describe, parse_quantity, unit_symbol

#: Statements that make a file a study of many runs.
STUDY_STATEMENTS = (nl.SweepStatement, nl.SpreadStatement, nl.MonteCarloStatement, nl.CornersStatement,
                    nl.YieldStatement)

MAX_RUNS = 100_000
"""More runs than this in one study is refused as a likely typo (``count=1e6``)."""

FACTOR, OFFSET = "~factor", "~offset"


# --------------------------------------------------------------------------
# What the study varies.


@dataclass(frozen=True)
class Variable:
    """A column of the run table that the study sets: a swept or spread value.

    ``label`` is the column name and the name ``--set`` takes (``Rs``,
    ``C1``, ``resistance(L1)``); ``parameter`` the parameter of the rewritten
    circuit that holds the value; ``dimension`` its unit.
    """

    label: str
    parameter: str
    dimension: Dimension
    role: str  # "sweep" or "spread"

    @property
    def unit(self) -> str:
        return unit_symbol(self.dimension)


@dataclass(frozen=True)
class Spread:
    """One ``spread`` line, in SI: a uniform half-width or a normal standard deviation.

    ``relative`` spreads are fractions of the nominal (``10 %`` is 0.1);
    the others are in the target's unit. ``clip`` (same kind as ``amount``)
    cuts a normal spread off at +-clip: values beyond are never drawn
    (a truncated normal, as parts screened at a limit).
    """

    label: str
    distribution: str  # "uniform" | "normal"
    amount: float
    relative: bool
    clip: float | None = None
    span: Span | None = None
    target: nl.SpreadTarget | None = None

    def deviation(self, u: float) -> float:
        """The deviation (fraction or absolute) for a uniform random number ``u`` in [0, 1)."""
        if self.distribution == "uniform":
            return self.amount * (2.0 * u - 1.0)
        from scipy.special import ndtr, ndtri

        if self.clip is None:
            return self.amount * float(ndtri(min(max(u, 1e-300), 1.0 - 1e-16)))
        edge = float(ndtr(self.clip / self.amount))
        p = (1.0 - edge) + u * (2.0 * edge - 1.0)  # u spread over [F(-c), F(c)]
        return float(np.clip(self.amount * ndtri(p), -self.clip, self.clip))

    def limits(self) -> tuple[float, float]:
        """The deviations of the two corners: +-half-width, or +-clip of a normal spread."""
        edge = self.amount if self.distribution == "uniform" else self.clip
        if edge is None:  # checked when the study is built
            raise InputError(f"spread {self.label}: a normal spread has no corners without clip=", self.span)
        return -edge, edge

    def overrides(self, deviation: float) -> dict[str, float]:
        key = self.label + (FACTOR if self.relative else OFFSET)
        return {key: 1.0 + deviation if self.relative else deviation}


@dataclass(frozen=True)
class RunPlan:
    """One run of a study: its index and the parameter overrides that make it (SI)."""

    index: int
    overrides: Mapping[str, float]
    sample: int | None = None  # Monte Carlo sample or corner number, None for a pure sweep


@dataclass
class Study:
    """A circuit file's runs: what varies, how, and one :class:`RunPlan` per run.

    ``netlist`` is the rewritten netlist (spread targets read parameters of
    their own); ``base_values`` the parameters' values in the file, used to
    check the units of overrides. ``mode`` is ``"sweep"``, ``"monte-carlo"``
    or ``"corners"`` (the last two may come with sweeps).
    """

    netlist: nl.Netlist
    variables: list[Variable]
    spreads: list[Spread]
    runs: list[RunPlan]
    mode: str
    seed: int | None = None
    required_yield: float = 1.0
    sweep_shape: tuple[int, ...] = ()
    sweep_scales: tuple[str, ...] = ()  # "linear" | "log" per axis (for plots)
    sweep_labels: tuple[tuple[str, ...], ...] = ()  # the labels of each axis (names joined by "and")
    base: Any = None  # the circuit of the rewritten netlist, every value nominal

    @property
    def file(self) -> str | None:
        return self.netlist.file

    @property
    def base_values(self) -> dict[str, Quantity]:
        """Every value a run may set: ``let`` parameters and block parameters (``S1.resistance``)."""
        return {**self.base.params, **self.base.block_parameters}

    def variable(self, label: str) -> Variable | None:
        return next((v for v in self.variables if v.label == label), None)

    def circuit_for(self, overrides: Mapping[str, float]):
        """A new circuit with ``overrides`` (parameter -> SI value) applied."""
        return circuit_for(self.base, overrides)

    def settings_for(self, values: Mapping[str, str | float]) -> dict[str, float]:
        """``--set`` values (label -> quantity text or SI float) as parameter overrides (SI).

        Labels are those of the run table (swept and spread values) or any
        ``let`` or block parameter of the file. Units are checked; a spread
        target named here takes exactly the value given.
        """
        known = self.base_values
        out: dict[str, float] = {}
        for label, value in values.items():
            var = self.variable(label)
            parameter = var.parameter if var is not None else label
            if parameter not in known:
                import difflib

                names = sorted({v.label for v in self.variables} | {p for p in known if "~" not in p})
                close = difflib.get_close_matches(label, names, n=1)
                raise UnknownNameError(f"--set {label}: no parameter or varied value named {label!r}",
                                       hint=f"did you mean {close[0]!r}?" if close else
                                       ("names: " + ", ".join(names)) if names else "the file has no parameters")
            out[parameter] = checked_value(value, known[parameter].dim, f"--set {label}")
        return out


def checked_value(value: str | float | Quantity, want: Dimension, what: str) -> float:
    """A value from the command line or Python (text, Quantity or SI float) in SI, unit-checked."""
    if isinstance(value, Quantity):
        q = value
    elif isinstance(value, str):
        try:
            q = parse_quantity(value.strip())
        except ValueError as exc:
            raise UnitsError(f"{what}: {exc}") from None
        if q.dim == DIMENSIONLESS and want != DIMENSIONLESS and _is_bare_number(value):
            raise UnitsError(f"{what}={value.strip()}: give the unit, {describe(want)}",
                             hint=f"for example {value.strip()} {unit_symbol(want)}")
    else:
        return float(value)
    if q.dim != want:
        raise UnitsError(f"{what} needs {describe(want)}, got {value} ({describe(q.dim)})")
    return q.value


def _is_bare_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


# --------------------------------------------------------------------------
# Elaborating a variant.


def circuit_for(base, overrides: Mapping[str, float]):
    """A new circuit: ``base`` with ``overrides`` (parameter -> SI value, in each parameter's
    own unit) applied through :meth:`~mna.circuit.Circuit.with_parameters`, so every value that
    depends on them is evaluated again and checked.

    A spread of a block parameter (``S1.resistance~factor``) is applied to the
    parameter's nominal in this run (after the run's other values), which
    takes a second elaboration.
    """
    direct = {k: v for k, v in overrides.items() if not _block_spread_key(k)}
    circuit = base.with_parameters(direct)
    spread = {k: v for k, v in overrides.items() if _block_spread_key(k)}
    if spread:
        values = {}
        for key, amount in spread.items():
            label, kind = key.rsplit("~", 1)
            nominal = circuit.block_parameters[label].value
            values[label] = nominal * amount if "~" + kind == FACTOR else nominal + amount
        circuit = base.with_parameters({**direct, **values})
    return circuit


def value_of(circuit, parameter: str) -> float:
    """The SI value of a ``let`` or block parameter in ``circuit``."""
    if parameter in circuit.params:
        return circuit.params[parameter].value
    return circuit.block_parameters[parameter].value


def _block_spread_key(key: str) -> bool:
    return "." in key and (key.endswith(FACTOR) or key.endswith(OFFSET))


def _parameter_values(netlist: nl.Netlist) -> dict[str, Quantity]:
    """Every ``let`` value of the (rewritten) netlist, evaluated in order."""
    values: dict[str, Quantity] = {}
    for st in netlist.statements:
        if isinstance(st, nl.LetStatement) and st.name not in values:
            values[st.name] = evaluate(st.value, values)
    return values


# --------------------------------------------------------------------------
# Rewriting spread targets.


@dataclass
class _Target:
    """Where a spread target's value is written in the file."""

    label: str
    statement: nl.LetStatement | nl.ElementStatement
    expr: nl.Expr
    where: str  # "let", "main" or an argument name


def _element_value(st: nl.ElementStatement, target: nl.SpreadTarget) -> tuple[nl.Expr, str]:
    """The expression of the element argument a spread targets, and where it is written
    (``"main"`` for the value after the terminals, else the argument's name)."""
    from ..elements.registry import lookup

    cls = lookup(st.kind)
    argument = target.argument or (cls.main if cls is not None else None)
    if cls is None or argument is None:
        raise InputError(f"spread {target.label}: {st.kind} {st.name} has no value to spread", target.span)
    if cls.arg(argument) is None:
        raise UnknownNameError(f"spread {target.label}: {st.kind} has no argument {argument!r}", target.span,
                               hint="it takes " + ", ".join(f"{a.name}({st.name})" for a in cls.arguments))
    for a in st.arguments:
        if a.key == argument:
            return a.value, argument
    if argument == cls.main:
        k = _main_operand(cls, st)
        if k is not None:
            op = st.operands[k]
            return (nl.Name(op.name, op.span) if isinstance(op, nl.Node) else op), "main"
    raise InputError(f"spread {target.label}: {st.kind} {st.name} does not set {argument}= in the file, "
                     "so there is no value to spread", target.span,
                     hint=f"write {argument}=... on the {st.name} line")


def find_target(netlist: nl.Netlist, t: nl.SpreadTarget) -> _Target:
    """The statement and expression a spread (or ``corners``) target names."""
    lets = {st.name: st for st in netlist.statements if isinstance(st, nl.LetStatement)}
    elements = {st.name: st for st in netlist.statements if isinstance(st, nl.ElementStatement)}
    if t.argument is None and t.name in lets:
        if t.name in elements:
            raise InputError(f"spread {t.name}: {t.name} is both a parameter and an element", t.span,
                             hint=f"for the element write its argument, as in capacitance({t.name}); "
                                  "or rename one of them")
        return _Target(t.label, lets[t.name], lets[t.name].value, "let")
    if t.name in elements:
        st = elements[t.name]
        expr, where = _element_value(st, t)
        if _is_waveform_call(expr):
            raise InputError(f"spread {t.label}: the value of {st.name} is a waveform; spread a parameter "
                             "used inside it instead", t.span, hint="give the level a let parameter and spread that")
        return _Target(t.label, st, expr, where)
    import difflib

    close = difflib.get_close_matches(t.name, sorted(set(lets) | set(elements)), n=1)
    hint = f"did you mean {close[0]!r}?" if close else None
    if "." in t.name:
        hint = ("inside a block instance, spread one of its block parameters (S1.resistance), "
                "or give the value a block parameter")
    raise UnknownNameError(f"spread {t.label}: no parameter or element named {t.name!r}", t.span, hint=hint)


def _main_operand(cls, st: nl.ElementStatement) -> int | None:
    """The index of the operand that holds the main value (after the terminals), or None.

    Follows the elaborator: each port takes one operand (a node or an
    ``a -> b`` pair); a variadic port takes names while more than one
    operand is left.
    """
    k = 0
    for port in cls.ports:
        if port.keyword:
            continue
        if port.variadic:
            while k < len(st.operands) - 1 and isinstance(st.operands[k], (nl.Node, nl.Name)):
                k += 1
            continue
        k += 1
    return k if k < len(st.operands) else None


def _replace_value(st: nl.ElementStatement, where: str, new: nl.Expr) -> nl.ElementStatement:
    if where == "main":
        from ..elements.registry import lookup

        operands = list(st.operands)
        operands[_main_operand(lookup(st.kind), st)] = new
        return replace(st, operands=tuple(operands))
    arguments = tuple(replace(a, value=new) if a.key == where else a for a in st.arguments)
    return replace(st, arguments=arguments)


def _is_waveform_call(expr: nl.Expr) -> bool:
    return isinstance(expr, nl.Call) and expr.func in ("step", "pwm", "sine", "piecewise", "schedule")


def rewrite_spreads(netlist: nl.Netlist, spreads: Sequence["Spread"],
                    dims: Mapping[str, Dimension]) -> tuple[nl.Netlist, dict[str, str]]:
    """The netlist with every spread target reading its own parameter; label -> parameter.

    A relative spread multiplies the file's value by ``LABEL~factor`` (1 by
    default); an absolute one adds ``LABEL~offset`` (0 of the target's unit).
    """
    by_statement: dict[int, list[tuple[Spread, _Target]]] = {}
    for sp in spreads:
        target = find_target(netlist, sp.target)
        by_statement.setdefault(id(target.statement), []).append((sp, target))
    parameters: dict[str, str] = {}
    out: list = []
    for st in netlist.statements:
        for sp, target in by_statement.get(id(st), []):
            span = sp.span
            if sp.relative:
                out.append(nl.LetStatement(sp.label + FACTOR, nl.Number(Quantity(1.0), "1", span), span))
                value = nl.BinaryOp("*", target.expr, nl.Name(sp.label + FACTOR, span), span)
            else:
                zero = Quantity(0.0, dims[sp.label])
                out.append(nl.LetStatement(sp.label + OFFSET, nl.Number(zero, "0", span), span))
                value = nl.BinaryOp("+", target.expr, nl.Name(sp.label + OFFSET, span), span)
            if target.where == "let":
                st = replace(st, value=value)
                parameters[sp.label] = st.name
            else:
                name = sp.label + "~"
                out.append(nl.LetStatement(name, value, span))
                st = _replace_value(st, target.where, nl.Name(name, target.expr.span))
                parameters[sp.label] = name
        out.append(st)
    return nl.Netlist(out, netlist.file, netlist.text), parameters


def _target_dimension(netlist: nl.Netlist, t: nl.SpreadTarget, params: Mapping[str, Quantity]) -> Dimension:
    """The unit of a spread target's value as the file writes it."""
    target = find_target(netlist, t)
    return evaluate(target.expr, params).dim


# --------------------------------------------------------------------------
# Sweep values.


def _count(expr: nl.Expr, params, what: str) -> int:
    q = evaluate(expr, params)
    if not q.dim.is_dimensionless or q.value != int(q.value) or q.value < 1:
        raise InputError(f"{what} needs a whole number of values (1 or more), got {q}", expr.span)
    return int(q.value)


def _range_values(call: nl.Call, params: Mapping[str, Quantity]) -> tuple[list[Quantity], str]:
    args = call.named_dict()
    spans = {k: s for k, _, s in call.named}
    allowed = {"linear": ("from", "to", "count", "step"), "logarithmic": ("from", "to", "count", "per-decade")}
    keys = allowed[call.func]
    for key in args:
        if key not in keys:
            raise UnknownNameError(f"{call.func}() has no argument {key!r}", spans[key],
                                   hint="it takes " + ", ".join(f"{k}=" for k in keys))
    if call.args:
        raise InputError(f"{call.func}() takes named arguments only, like {call.func}(from=..., to=..., count=...)",
                         call.args[0].span)
    for key in ("from", "to"):
        if key not in args:
            raise InputError(f"{call.func}() needs {key}=", call.span)
    start, stop = evaluate(args["from"], params), evaluate(args["to"], params)
    if start.dim != stop.dim:
        raise UnitsError(f"{call.func}(): from= is in {describe(start.dim)} but to= in {describe(stop.dim)}",
                         args["to"].span)
    steps = [k for k in ("count", "step", "per-decade") if k in args]
    if len(steps) != 1:
        raise InputError(f"{call.func}() needs exactly one of " + ", ".join(f"{k}=" for k in keys[2:]), call.span)
    if call.func == "linear":
        if "count" in args:
            n = _count(args["count"], params, "linear() count=")
            values = np.linspace(start.value, stop.value, n) if n > 1 else np.array([start.value])
        else:
            step = evaluate(args["step"], params)
            if step.dim != start.dim or step.value == 0 or (stop.value - start.value) * step.value < 0:
                raise InputError(f"linear() step= must be in {describe(start.dim)} and lead from from= to to=",
                                 args["step"].span)
            n = int(math.floor((stop.value - start.value) / step.value * (1 + 1e-12))) + 1
            values = start.value + step.value * np.arange(n)
        scale = "linear"
    else:
        if not (start.value > 0 and stop.value > 0):
            raise InputError("logarithmic() needs from= and to= both above zero", call.span)
        if "count" in args:
            n = _count(args["count"], params, "logarithmic() count=")
        else:
            per = _count(args["per-decade"], params, "logarithmic() per-decade=")
            n = int(round(abs(math.log10(stop.value / start.value)) * per)) + 1
        values = np.geomspace(start.value, stop.value, n) if n > 1 else np.array([start.value])
        scale = "log"
    if len(values) > MAX_RUNS:
        raise InputError(f"{call.func}() gives {len(values)} values; at most {MAX_RUNS} runs are allowed", call.span)
    return [Quantity(float(v), start.dim) for v in values], scale


def axis_values(axis: nl.SweepAxis, params: Mapping[str, Quantity], want: Dimension) -> tuple[list[float], str]:
    """The SI values of one swept name, unit-checked against the parameter's own unit."""
    out: list[float] = []
    scale = "linear"
    for expr in axis.values:
        if isinstance(expr, nl.Call) and expr.func in ("linear", "logarithmic"):
            qs, scale = _range_values(expr, params)
        else:
            qs = [evaluate(expr, params)]
        for q in qs:
            if q.dim != want:
                raise UnitsError(f"sweep {axis.name}: {axis.name} is in {describe(want)}, "
                                 f"this value is in {describe(q.dim)}", expr.span)
            out.append(q.value)
    if len(axis.values) > 1:
        # A list drawn on a log axis when it spans a decade or more of positive values (22, 47, 100...).
        positive = all(v > 0 for v in out)
        scale = "log" if positive and len(out) > 2 and max(out) >= 10 * min(out) else "linear"
    return out, scale


# --------------------------------------------------------------------------
# Building a study.


def has_study(netlist: nl.Netlist) -> bool:
    """Whether the file asks for many runs (any sweep, spread, monte-carlo or corners line)."""
    return any(isinstance(st, STUDY_STATEMENTS) for st in netlist.statements)


def _settings(st: nl.MonteCarloStatement, params) -> tuple[int, int]:
    known = {"runs", "seed"}
    got: dict[str, int] = {}
    for a in st.arguments:
        if a.key not in known:
            raise UnknownNameError(f"monte-carlo has no setting {a.key!r}", a.span, hint="it takes runs= and seed=")
        if a.key in got:
            raise InputError(f"{a.key}= is given twice", a.span)
        q = evaluate(a.value, params)
        if not q.dim.is_dimensionless or q.value != int(q.value) or q.value < (1 if a.key == "runs" else 0):
            raise InputError(f"monte-carlo {a.key}= needs a whole number" + (" (1 or more)" if a.key == "runs"
                             else " (0 or more)") + f", got {q}", a.value.span)
        got[a.key] = int(q.value)
    if "runs" not in got:
        raise InputError("monte-carlo needs runs=N, the number of random samples", st.span,
                         hint="monte-carlo runs=200 seed=1")
    return got["runs"], got.get("seed", 1)


def _spread(st: nl.SpreadStatement, params, target_dim: Dimension) -> Spread:
    label = st.target.label
    if st.distribution not in ("uniform", "normal"):
        raise InputError(f"spread {label}: unknown distribution {st.distribution!r}", st.distribution_span,
                         hint="uniform HALF-WIDTH or normal STANDARD-DEVIATION, each in % or in the value's unit")
    amount = evaluate(st.amount, params)
    for expr in [st.amount] + [a.value for a in st.arguments]:
        if target_dim != DIMENSIONLESS and _is_bare_number(expr.text if isinstance(expr, nl.Number) else "x"):
            raise UnitsError(f"spread {label}: {expr.text} has no unit; write {expr.text} % for a share of the "
                             f"nominal or {expr.text} {unit_symbol(target_dim)} for an absolute spread", expr.span)
    relative = amount.dim == DIMENSIONLESS and target_dim != DIMENSIONLESS or _is_percent(st.amount)
    if not relative and amount.dim != target_dim:
        raise UnitsError(f"spread {label}: the spread is a percentage or a value in {describe(target_dim)}; "
                         f"got {describe(amount.dim)}", st.amount.span)
    if not amount.value > 0:
        raise InputError(f"spread {label}: the spread must be above zero, got {amount}", st.amount.span)
    clip = None
    for a in st.arguments:
        if a.key != "clip":
            raise UnknownNameError(f"spread has no setting {a.key!r}", a.span, hint="it takes clip=")
        if st.distribution != "normal":
            raise InputError("clip= applies to a normal spread only (a uniform spread has its own limits)", a.span)
        c = evaluate(a.value, params)
        c_relative = _is_percent(a.value) or (c.dim == DIMENSIONLESS and target_dim != DIMENSIONLESS)
        if c_relative != relative or (not relative and c.dim != target_dim):
            raise UnitsError("clip= must be given like the spread itself (both in %, or both in "
                             f"{describe(target_dim)})", a.value.span)
        if not c.value > 0:
            raise InputError("clip= must be above zero", a.value.span)
        clip = c.value
    return Spread(label, st.distribution, amount.value, relative, clip, st.target.span, st.target)


def _is_percent(expr: nl.Expr) -> bool:
    return isinstance(expr, nl.Number) and expr.text.rstrip().endswith("%")


def build_study(netlist: nl.Netlist) -> Study:
    """The :class:`Study` a parsed file asks for (raises :class:`InputError` with the line)."""
    from ..circuit import elaborate

    as_written = elaborate(netlist)  # the file as written must be valid before anything is varied
    lines = _study_lines(netlist)
    original = _parameter_values(netlist)
    blocks = as_written.block_parameters
    spreads, dims = _spreads(netlist, lines[nl.SpreadStatement], original, blocks)
    in_blocks = [sp for sp in spreads if sp.label in blocks]
    rewritten, spread_params = rewrite_spreads(netlist, [sp for sp in spreads if sp not in in_blocks], dims)
    spread_params.update({sp.label: sp.label for sp in in_blocks})
    grid = _grid(lines[nl.SweepStatement], original, blocks, spread_params)
    for name in grid.nominal_of:  # swept and spread: the sweep sets the nominal the spread varies around
        rewritten = _split_nominal(rewritten, name)
    variables = grid.variables + [Variable(sp.label, spread_params[sp.label], dims[sp.label], "spread")
                                  for sp in spreads]
    mode, seed, samples = _samples(lines, spreads, original)
    total = len(grid.points) * len(samples)
    if total > MAX_RUNS:
        first = (lines[nl.SweepStatement] + lines[nl.MonteCarloStatement] + lines[nl.CornersStatement])[0]
        raise InputError(f"the file asks for {total} runs; at most {MAX_RUNS} are allowed in one study", first.span)
    plans = []
    for point in grid.points:
        for k, deviations in enumerate(samples):
            overrides = dict(point)
            for sp, d in zip(spreads, deviations or ()):
                overrides.update(sp.overrides(d))
            plans.append(RunPlan(len(plans), overrides, None if deviations is None else k))
    return Study(rewritten, variables, spreads, plans, mode, seed, _required_yield(lines, original), grid.shape,
                 grid.scales, grid.labels, elaborate(rewritten))


def _study_lines(netlist: nl.Netlist) -> dict[type, list]:
    """The study statements by kind, with the rules on how they combine checked."""
    lines: dict[type, list] = {kind: [st for st in netlist.statements if isinstance(st, kind)]
                               for kind in STUDY_STATEMENTS}
    mc, corners, spreads = lines[nl.MonteCarloStatement], lines[nl.CornersStatement], lines[nl.SpreadStatement]
    for kind, word in ((nl.MonteCarloStatement, "monte-carlo"), (nl.CornersStatement, "corners"),
                       (nl.YieldStatement, "required-yield")):
        if len(lines[kind]) > 1:
            raise InputError(f"only one {word} line per file", lines[kind][1].span)
    if mc and corners:
        raise InputError("a file runs either monte-carlo or corners, not both", corners[0].span,
                         hint="keep the spreads and put the other in a copy of the file")
    if spreads and not (mc or corners):
        raise InputError("spread lines need a 'monte-carlo runs=N seed=S' line or a 'corners' line "
                         "to say how to use them", spreads[0].span)
    if (mc or corners) and not spreads:
        raise InputError(f"{'monte-carlo' if mc else 'corners'} needs at least one spread line",
                         (mc or corners)[0].span, hint="spread C1 uniform 10 %")
    labels: dict[str, nl.SpreadStatement] = {}
    for st in spreads:
        first = labels.setdefault(st.target.label, st)
        if first is not st:
            raise InputError(f"{st.target.label} has two spread lines (the first at line {first.span.line})",
                             st.target.span)
    return lines


def _spreads(netlist: nl.Netlist, lines: Sequence[nl.SpreadStatement], original: Mapping[str, Quantity],
             blocks: Mapping[str, Quantity]) -> tuple[list[Spread], dict[str, Dimension]]:
    """The spreads in SI and each target's unit (a block parameter's, or its value's in the file)."""
    dims = {st.target.label: blocks[st.target.name].dim if st.target.argument is None and st.target.name in blocks
            else _target_dimension(netlist, st.target, original) for st in lines}
    return [_spread(st, original, dims[st.target.label]) for st in lines], dims


@dataclass
class _Grid:
    """The sweep lines as a grid: one dict of parameter values per point, first line slowest."""

    points: list[dict[str, float]]
    variables: list[Variable]
    shape: tuple[int, ...]
    scales: tuple[str, ...]
    labels: tuple[tuple[str, ...], ...]
    nominal_of: list[str]  # parameters both swept and spread


def _grid(sweeps: Sequence[nl.SweepStatement], original: Mapping[str, Quantity], blocks: Mapping[str, Quantity],
          spread_params: Mapping[str, str]) -> _Grid:
    axes: list[list[dict[str, float]]] = []
    grid = _Grid([], [], (), (), (), [])
    seen: set[str] = set()
    for st in sweeps:
        columns: list[tuple[str, list[float]]] = []
        for axis in st.axes:
            parameter, dim = _swept_parameter(axis, original, blocks, spread_params, seen)
            vals, scale = axis_values(axis, original, dim)
            if columns and len(vals) != len(columns[0][1]):
                raise InputError(f"sweep: {axis.name} has {_values(len(vals))} but {st.axes[0].name} has "
                                 f"{_values(len(columns[0][1]))}; names joined by 'and' step together",
                                 axis.span)
            columns.append((parameter, vals))
            nominal = parameter != axis.name
            grid.variables.append(Variable(f"nominal({axis.name})" if nominal else axis.name, parameter, dim,
                                           "sweep"))
            if nominal:
                grid.nominal_of.append(axis.name)
        count = len(columns[0][1])
        axes.append([{p: v[i] for p, v in columns} for i in range(count)])
        grid.labels += (tuple(v.label for v in grid.variables[-len(columns):]),)
        grid.shape += (count,)
        grid.scales += (scale,)
    grid.points = [dict(itertools.chain.from_iterable(d.items() for d in combo)) for combo in itertools.product(*axes)]
    return grid


def _swept_parameter(axis: nl.SweepAxis, original: Mapping[str, Quantity], blocks: Mapping[str, Quantity],
                     spread_params: Mapping[str, str], seen: set[str]) -> tuple[str, Dimension]:
    """The parameter a sweep axis sets (``P~nominal`` when P is also spread) and its unit."""
    if axis.name in seen:
        raise InputError(f"{axis.name} is swept twice", axis.span)
    seen.add(axis.name)
    if axis.name in blocks:
        if axis.name in spread_params:
            raise InputError(f"{axis.name} is a block parameter with a spread line; sweep a let parameter "
                             "that sets it instead", axis.span)
        return axis.name, blocks[axis.name].dim
    if axis.name not in original:
        import difflib

        close = difflib.get_close_matches(axis.name, [p for p in original if "~" not in p], n=1)
        raise UnknownNameError(f"sweep: no parameter named {axis.name!r}", axis.span,
                               hint=f"did you mean {close[0]!r}?" if close else
                               "sweeps set let parameters; add 'let NAME = VALUE' and use it")
    spread_too = spread_params.get(axis.name) == axis.name
    return (axis.name + "~nominal" if spread_too else axis.name), original[axis.name].dim


def _samples(lines: Mapping[type, list], spreads: Sequence[Spread],
             original: Mapping[str, Quantity]) -> tuple[str, int | None, list[list[float] | None]]:
    """The mode, the seed and each sample's deviations (one ``None`` sample for a plain sweep)."""
    if lines[nl.MonteCarloStatement]:
        runs, seed = _settings(lines[nl.MonteCarloStatement][0], original)
        return "monte-carlo", seed, monte_carlo_deviations(spreads, runs, seed)
    if lines[nl.CornersStatement]:
        return "corners", None, corner_deviations(spreads, lines[nl.CornersStatement][0])
    return "sweep", None, [None]


def _required_yield(lines: Mapping[type, list], original: Mapping[str, Quantity]) -> float:
    if not lines[nl.YieldStatement]:
        return 1.0
    st = lines[nl.YieldStatement][0]
    q = evaluate(st.value, original)
    if not q.dim.is_dimensionless or not 0.0 < q.value <= 1.0:
        raise InputError(f"required-yield needs a share of the runs above 0 % and up to 100 %, got {q}",
                         st.value.span)
    return q.value


def _values(n: int) -> str:
    return f"{n} value{'s' if n != 1 else ''}"


def _split_nominal(netlist: nl.Netlist, name: str) -> nl.Netlist:
    """``let P = (e) * P~factor`` -> ``let P~nominal = e`` and ``let P = P~nominal * P~factor``
    (likewise with an offset), so a sweep of P sets the nominal the spread varies around."""
    out = []
    for st in netlist.statements:
        if isinstance(st, nl.LetStatement) and st.name == name:
            out.append(nl.LetStatement(name + "~nominal", st.value.left, st.span))
            st = replace(st, value=replace(st.value, left=nl.Name(name + "~nominal", st.span)))
        out.append(st)
    return nl.Netlist(out, netlist.file, netlist.text)


def monte_carlo_deviations(spreads: Sequence[Spread], runs: int, seed: int) -> list[list[float]]:
    """Sample k's deviation of every spread, from child k of ``SeedSequence(seed)``.

    One uniform number per spread per sample, in file order, mapped
    through the spread's distribution (inverse CDF for a normal spread), so
    sample k is the same however many samples or workers there are.
    """
    children = np.random.SeedSequence(seed).spawn(runs)
    out = []
    for child in children:
        u = np.random.default_rng(child).random(len(spreads))
        out.append([sp.deviation(float(x)) for sp, x in zip(spreads, u)])
    return out


def corner_deviations(spreads: Sequence[Spread], st: nl.CornersStatement) -> list[list[float]]:
    """Every combination of the named spreads (default: all) at their two limits; the others at nominal."""
    labels = [sp.label for sp in spreads]
    chosen = labels
    if st.targets:
        chosen = []
        for t in st.targets:
            if t.label not in labels:
                raise UnknownNameError(f"corners: {t.label} has no spread line", t.span,
                                       hint="spreads: " + ", ".join(labels))
            if t.label in chosen:
                raise InputError(f"corners: {t.label} is named twice", t.span)
            chosen.append(t.label)
    by_label = {sp.label: sp for sp in spreads}
    for label in chosen:
        sp = by_label[label]
        if sp.distribution == "normal" and sp.clip is None:
            raise InputError(f"corners need the limits of every spread: {label} is normal without clip=",
                             sp.span, hint="add clip=, for example clip=3 times the standard deviation")
    if len(chosen) > 16:
        raise InputError(f"corners of {len(chosen)} spreads make {2 ** len(chosen)} runs; name at most 16",
                         st.span)
    out = []
    for combo in itertools.product((0, 1), repeat=len(chosen)):
        limits = dict(zip(chosen, combo))
        out.append([sp.limits()[limits[sp.label]] if sp.label in limits else 0.0 for sp in spreads])
    return out
