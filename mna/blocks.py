"""Reusable blocks: definitions, part files, and their expansion into elements.

A block is defined in a netlist by a header line and the statements
indented under it::

    block rcd-clamp  a -> k
        parameter resistance  = 10 kohm
        parameter capacitance = 100 nF
        diode     D  a -> top
        capacitor C  top -> k  capacitance
        resistor  R  top -> k  resistance

and used like an element kind: ``rcd-clamp S1 drain -> bus resistance=4.7 kohm``.
``blocks from "parts/clamps.mna"`` brings the block definitions of another
file (and only those: its elements, analyses and checks stay there).

Blocks are flattened when the circuit is elaborated: each use adds the
body's elements with hierarchical names (``S1.D``, ``S1.R``) and internal
nodes (``S1.top``); the block's terminals become the nodes of the use. The
engine never sees a block. A parameter's unit is the unit of its default;
a use may set it (``resistance=4.7 kohm``), and so may an override by its
hierarchical name (``S1.resistance``).

This module knows the definitions and the scoping; the elaborator
(:mod:`mna.circuit`) builds each element, so a block's lines are checked
exactly as the same lines at the top level would be.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field, fields, is_dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterable

from . import netlist as nl
from .elements.base import ELECTRICAL, REFERENCE, REQUIRED, SHAFT, THERMAL, Arg, Port
from .elements.registry import lookup
from .errors import InputError, NetlistSyntaxError, Span, UnitsError, UnknownNameError
from .expressions import evaluate, is_quantity_call
from .units import ANGULAR_SPEED, Dimension, Quantity, UnitError, describe, parse_quantity

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import Elaborator

#: How deep uses of blocks may nest (each level is a few Python frames).
MAX_DEPTH = 40

#: A block parameter's default: computed inside the instance, in order.
DEFERRED = object()

#: Parameter names: lower-case words joined by "-", each word starting with
#: a letter (so ``gain-2`` can never be read as ``gain - 2`` inside the body).
PARAMETER_NAME = re.compile(r"[a-z][a-z0-9]*(-[a-z][a-z0-9]*)*")


@dataclass(frozen=True)
class BlockParameter:
    """A parameter of a block: its default (an expression) and its dimension."""

    name: str
    default: Any  # nl.Expr, or a Quantity for blocks built in Python
    dimension: Dimension
    span: Span | None = None
    text: str = ""  # the default as written

    def arg(self) -> Arg:
        """The parameter as an argument of the block's uses.

        A speed (1/s) whose default is not written in hertz is an angular
        speed: a use that writes it in hertz is refused, as for a machine's
        speed, rather than read as rad/s.
        """
        from .circuit import _is_hertz

        angular = self.dimension == ANGULAR_SPEED and not _is_hertz(self.text)
        return Arg(self.name, self.dimension, default=DEFERRED if self.default is not None else REQUIRED,
                   angular=angular)


@dataclass
class BlockDefinition:
    """A block: terminals, parameters and body, usable like an element kind.

    It offers what the elaborator reads from an element kind (``ports``,
    ``main``, ``arguments``, ``arg()``), so a use is checked by the same
    code as a built-in element. ``body`` holds netlist statements, or
    :class:`PythonElement` records for a block built with :class:`Block`.
    """

    keyword: str
    ports: tuple[Port, ...]
    parameters: dict[str, BlockParameter]
    body: tuple[Any, ...]
    span: Span | None = None
    file: str | None = None
    summary: str = ""
    main = None

    @property
    def arguments(self) -> tuple[Arg, ...]:
        return tuple(p.arg() for p in self.parameters.values())

    def arg(self, name: str) -> Arg | None:
        p = self.parameters.get(name)
        return p.arg() if p else None

    def where(self) -> str:
        return self.span.where() if self.span else "Python"


@dataclass
class Scope:
    """Names inside one block instance: its prefix, terminals and parameters."""

    prefix: str  # "S1." (or "S1.X2." for a block used inside S1)
    terminals: dict[str, str]  # terminal -> node of the use
    params: dict[str, Quantity] = field(default_factory=dict)
    kinds: tuple[str, ...] = ()  # the blocks being expanded, outermost first
    written: dict[str, Any] = field(default_factory=dict)  # parameter -> the expression that set it

    def value(self, expr: Any) -> Any:
        """A value written inside the instance, with its parameters replaced by their values."""
        return _rewrite(expr, self.params, self)

    def node(self, name: str) -> str:
        if name in self.terminals:
            return self.terminals[name]
        if name in REFERENCE.values():
            return name
        return self.prefix + name


# --------------------------------------------------------------------------
# Definitions from statements.


def define(st: nl.BlockStatement) -> BlockDefinition:
    """Check a ``block`` statement's header and body; return its definition."""
    if lookup(st.kind) is not None:
        raise InputError(f"block {st.kind}: a built-in element kind has this name", st.span,
                         hint="choose another name for the block")
    ports = _ports(st)
    if not st.body:
        raise InputError(f"block {st.kind} has no body", st.span,
                         hint="indent the block's statements under its header line")
    terminals = {n for p in ports for n in p.names}
    params: dict[str, BlockParameter] = {}
    scope: dict[str, Quantity] = {}
    for item in st.body:
        if isinstance(item, nl.ParameterStatement):
            _check_parameter_name(item, st.kind, params, scope, terminals)
            if item.value is None:  # required: a stand-in of its unit for the defaults below
                q = Quantity(1.0, _unit_dimension(item))
            else:
                q = evaluate(_rewrite(item.value, scope, None), scope)
            params[item.name] = BlockParameter(item.name, item.value, q.dim, item.span, _default_text(item))
            scope[item.name] = q
        elif isinstance(item, nl.LetStatement):
            _check_let_name(item, st.kind, scope)
            scope[item.name] = evaluate(_rewrite(item.value, scope, None), scope)
        elif not isinstance(item, nl.ElementStatement):
            word = _statement_word(item)
            raise InputError(
                f"a {word!r} line cannot be inside block {st.kind}", item.span,
                hint="a block holds 'parameter', 'let' and element lines; put the others at the top level, "
                     "without indentation",
            )
    return BlockDefinition(st.kind, ports, params, st.body, st.span, st.file)


def _unit_dimension(item: nl.ParameterStatement) -> Dimension:
    """The dimension of ``parameter NAME in UNIT``."""
    if item.unit == "1":
        return Quantity(1.0).dim
    try:
        return parse_quantity(f"1 {item.unit}").dim
    except UnitError as exc:
        raise UnitsError(f"{item.unit!r} is not a unit: {exc}", item.unit_span,
                         hint="write the unit alone, like ohm, V*s/rad or kg*m^2 (1 for a plain number)") from None


def _default_text(item: nl.ParameterStatement) -> str:
    """``parameter r = 10 kohm   # bleed`` -> ``10 kohm`` (for listings)."""
    if item.value is None:
        return item.unit or ""
    line = item.span.source_line or ""
    text = line.split("=", 1)[1] if "=" in line else ""
    return text.split("#", 1)[0].strip()


def _ports(st: nl.BlockStatement) -> tuple[Port, ...]:
    ports = []
    seen: dict[str, Span] = {}
    for bp in st.ports:
        for name, span in zip(bp.names, bp.spans):
            if name in REFERENCE.values():
                raise InputError(f"block {st.kind}: {name!r} is the {_domain_of_reference(name)} reference and "
                                 "cannot be a terminal", span,
                                 hint="elements inside a block connect to gnd and frame directly")
            if "." in name:
                raise InputError(f"block {st.kind}: a terminal name cannot contain '.'", span)
            if name in seen:
                raise InputError(f"block {st.kind}: terminal {name!r} is listed twice", span)
            seen[name] = span
        ports.append(Port(tuple(bp.names), bp.domain))
    return tuple(ports)


def _domain_of_reference(node: str) -> str:
    return next(d for d, n in REFERENCE.items() if n == node)


def _check_parameter_name(item, kind, params, scope, terminals) -> None:
    if not PARAMETER_NAME.fullmatch(item.name):
        raise InputError(
            f"block {kind}: parameter name {item.name!r} must be lower-case words joined by '-', "
            "each word starting with a letter", item.span,
            hint="a use sets it as name=value, like the arguments of element kinds (clamp-voltage=24 V)",
        )
    if item.name in scope:
        raise InputError(f"block {kind}: {item.name!r} is already defined in this block", item.span)
    if item.name == "pi":
        raise InputError("'pi' is a built-in constant and cannot be redefined", item.span)


def _check_let_name(item, kind, scope) -> None:
    if "." in item.name:
        raise InputError(f"parameter name {item.name!r} cannot contain '.'", item.span)
    if item.name in scope:
        raise InputError(f"block {kind}: {item.name!r} is already defined in this block", item.span)
    if item.name == "pi":
        raise InputError("'pi' is a built-in constant and cannot be redefined", item.span)


def _statement_word(st) -> str:
    names = {
        nl.SimulateStatement: "simulate", nl.RecordStatement: "record", nl.MeasureStatement: "measure",
        nl.CheckStatement: "check", nl.CircuitStatement: "circuit", nl.BlocksFromStatement: "blocks from",
        nl.BlockStatement: "block",
    }
    return names.get(type(st), type(st).__name__)


# --------------------------------------------------------------------------
# Gathering the definitions of a file and the files it names.


def gather_definitions(netlist: nl.Netlist) -> dict[str, BlockDefinition]:
    """Every block a netlist may use: its own and those of the files it names."""
    found: dict[str, BlockDefinition] = {}
    start = Path(netlist.file).resolve() if netlist.file else None
    _gather(netlist, found, (start,) if start else (), {})
    return found


def _gather(netlist: nl.Netlist, found: dict[str, BlockDefinition], stack: tuple[Path, ...],
            cache: dict[Path, nl.Netlist]) -> None:
    for st in netlist.statements:
        if isinstance(st, nl.BlockStatement):
            _add(found, define(st))
        elif isinstance(st, nl.BlocksFromStatement):
            path = _resolve(st.path, netlist.file)
            key = path.resolve()
            if key in stack:
                names = " -> ".join(_short(p) for p in stack[stack.index(key):] + (key,))
                raise InputError(f"these files name each other in a loop: {names}", st.span,
                                 hint="a file of blocks cannot bring, directly or not, the file that brings it")
            if key not in cache:
                cache[key] = _read(path, st)
            try:
                _gather(cache[key], found, stack + (key,), cache)
            except InputError as exc:
                raise exc.inside(f'blocks from "{st.path}"', st.span) from None


def _add(found: dict[str, BlockDefinition], block: BlockDefinition) -> None:
    first = found.get(block.keyword)
    if first is None:
        found[block.keyword] = block
    elif (first.file, first.span) != (block.file, block.span):
        raise InputError(f"block {block.keyword} is defined twice: first at {first.where()}", block.span,
                         hint="rename one of them")


def _resolve(text: str, including: str | None) -> Path:
    base = Path(including).parent if including else Path.cwd()
    return base / text


def _short(path: Path) -> str:
    try:
        return str(path.relative_to(Path.cwd()))
    except ValueError:
        return str(path)


def _read(path: Path, st: nl.BlocksFromStatement) -> nl.Netlist:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"no file {str(path)!r} to bring blocks from", st.span,
                         hint="the path is relative to the folder of the file that names it") from None
    except IsADirectoryError:
        raise InputError(f"{str(path)!r} is a folder, not a netlist file", st.span) from None
    except UnicodeDecodeError as exc:
        raise NetlistSyntaxError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})", st.span) from None
    except OSError as exc:  # no permission, a broken device...
        raise InputError(f"cannot read {str(path)!r}: {exc.strerror or exc}", st.span) from None
    return nl.parse_netlist(text, str(path))


# --------------------------------------------------------------------------
# Expansion: one use of a block -> elements with hierarchical names.


def expand(el: "Elaborator", block: BlockDefinition, st: nl.ElementStatement) -> None:
    """Add the elements of one use of ``block`` to the circuit, named ``NAME.x``."""
    outer = el.scope
    scope, given = _open_instance(el, block, st)
    el.scope = scope
    try:
        _place_body(el, block, scope, given)
    except InputError as exc:
        _explain_scope(exc, block)
        raise exc.inside(f"{st.kind} {scope.prefix[:-1]}", st.kind_span) from None
    finally:
        el.scope = outer
    for name in block.parameters:
        el.circuit.block_parameters[scope.prefix + name] = scope.params[name]


def _open_instance(el: "Elaborator", block: BlockDefinition, st: nl.ElementStatement) -> tuple[Scope, dict]:
    """Check a use (nesting, terminals, arguments, name) and give the instance's scope."""
    kinds = el.scope.kinds if el.scope else ()
    if block.keyword in kinds:
        loop = " -> ".join(kinds[kinds.index(block.keyword):] + (block.keyword,))
        raise InputError(f"block {block.keyword} uses itself ({loop})", st.kind_span)
    if len(kinds) >= MAX_DEPTH:
        raise InputError(f"blocks are nested more than {MAX_DEPTH} deep here", st.kind_span,
                         hint="a block inside a block inside a block... stops at this depth")
    nodes, given, spans = el.bind(block, st)
    instance = el.element_name(st.name)
    _check_terminal_domains(el, block, st, nodes, spans)
    instances = el.circuit.block_instances
    if instance in el.circuit.elements or instance in instances:
        first = instances.get(instance) or el.circuit.elements[instance].span
        where = f" (first defined at {first.where()})" if first else ""
        raise InputError(f"duplicate element name {instance!r}{where}", st.name_span)
    instances[instance] = st.name_span
    scope = Scope(instance + ".", {n: nodes[n] for p in block.ports for n in p.names},
                  kinds=kinds + (block.keyword,), written={a.key: a.value for a in st.arguments})
    return scope, given


def _place_body(el: "Elaborator", block: BlockDefinition, scope: Scope, given: dict[str, Any]) -> None:
    """Set the instance's parameters and place its elements, in the body's order."""
    for param in block.parameters.values():
        if isinstance(param.default, Quantity):  # a block built in Python
            scope.params[param.name] = _parameter_value(el, param, given, scope)
    for item in block.body:
        if isinstance(item, nl.ParameterStatement):
            scope.params[item.name] = _parameter_value(el, block.parameters[item.name], given, scope)
            scope.written.setdefault(item.name, item.value)
        elif isinstance(item, nl.LetStatement):
            scope.params[item.name] = evaluate(_rewrite(item.value, scope.params, None, scope.written),
                                               scope.params)
            scope.written[item.name] = item.value
        elif isinstance(item, nl.ElementStatement):
            el.place(_rewrite_statement(item, scope))
        else:
            item.place(el, scope)  # a PythonElement


def _explain_scope(exc: InputError, block: BlockDefinition) -> None:
    """An unknown parameter inside a body: say that a block sees only its own names."""
    if isinstance(exc, UnknownNameError) and exc.message.startswith("unknown parameter") and not exc.chain:
        exc.hint = (f"block {block.keyword} sees only its own parameters and lets; add a "
                    f"'parameter' line to it and give the value where the block is used")
        exc.args = (exc.render(),)


def _parameter_value(el, param: BlockParameter, given: dict[str, Any], scope: Scope) -> Quantity:
    """A parameter's value in one instance: override, else the use's value, else the default."""
    name, dim = scope.prefix + param.name, param.dimension
    override = el.circuit.block_overrides.get(name)
    if isinstance(override, (int, float)):  # an SI number given from Python
        override = Quantity(float(override), dim)
    if override is not None:
        if override.dim != dim:
            raise UnitsError(f"the override of {name} needs {describe(dim)}, got {describe(override.dim)}",
                             param.span)
        return override
    value = given.get(param.name, DEFERRED)
    if value is not DEFERRED:
        return Quantity(value, dim)
    if isinstance(param.default, Quantity):
        return param.default
    q = evaluate(_rewrite(param.default, scope.params, None), scope.params)
    if q.dim != dim:  # a default computed from other parameters, which a use changed
        raise UnitsError(f"the default of {param.name} needs {describe(dim)}, got {describe(q.dim)}", param.span)
    return q


def _check_terminal_domains(el, block: BlockDefinition, st, nodes: dict[str, Any], spans: dict[str, Span]) -> None:
    """A shaft terminal needs a shaft node, an electrical one an electrical node."""
    for port in block.ports:
        for name in port.names:
            node = nodes[name]
            have = el.circuit.nodes.get(node)
            if have is not None and have != port.domain:
                raise InputError(
                    f"{st.kind} {el.element_name(st.name)}: terminal {name} is {_a(port.domain)} {port.domain} "
                    f"terminal, but {node!r} is {_a(have)} {have} node", spans.get(name, st.name_span),
                )


def _a(word: str) -> str:
    return "an" if word[:1] in "aeiou" else "a"


# --------------------------------------------------------------------------
# Renaming inside an instance.


def _rewrite_statement(st: nl.ElementStatement, scope: Scope) -> nl.ElementStatement:
    """An element line of a block body, with its values resolved in ``scope``.

    Nodes and element names are renamed by the elaborator (through the
    scope); here parameter names inside argument values become their
    values, and the names in ``v(...)``, ``i(...)``... become hierarchical,
    so an expression the element reads later (a switch gate) means the
    same thing as it did inside the block.
    """
    operands = tuple(op if isinstance(op, (nl.Node, nl.NodePair)) else _rewrite(op, scope.params, scope)
                     for op in st.operands)
    arguments = tuple(replace(a, value=_rewrite(a.value, scope.params, scope)) for a in st.arguments)
    return replace(st, operands=operands, arguments=arguments)


def _rewrite(expr: Any, params: dict[str, Quantity], scope: Scope | None,
             written: dict[str, Any] | None = None) -> Any:
    """Replace parameter names in an expression by their values; rename signals.

    ``written`` maps a parameter to the expression that set it, so that a
    value written in hertz keeps saying so (an angular speed refuses it).
    """
    if written is None and scope is not None:
        written = scope.written
    if isinstance(expr, (nl.Name, nl.Word)):
        name = expr.name if isinstance(expr, nl.Name) else expr.word
        if name in params:
            return nl.Number(params[name], _value_text(name, (written or {}).get(name)), expr.span)
        return expr
    if scope is not None and is_quantity_call(expr):
        return replace(expr, args=tuple(_signal_name(a, scope) for a in expr.args))
    return _map_children(expr, lambda e: _rewrite(e, params, scope, written))


def _value_text(name: str, source: Any) -> str:
    """How a parameter's value reads in messages: its name, and its hertz if written so."""
    from .circuit import _hertz_literal  # (circuit imports this module only inside functions)

    found = _hertz_literal(source, {}) if source is not None else None
    return f"{name} = {found[0].text}" if found else name


def _signal_name(arg: Any, scope: Scope) -> Any:
    if isinstance(arg, nl.Name):
        return nl.Name(scope.node(arg.name), arg.span)
    if isinstance(arg, nl.NodePair):
        return replace(arg, a=scope.node(arg.a), b=scope.node(arg.b))
    return arg


def _map_children(expr: Any, fn) -> Any:
    if isinstance(expr, Span) or not is_dataclass(expr) or isinstance(expr, (nl.Number, Quantity)):
        return expr
    changes = {}
    for f in fields(expr):
        value = getattr(expr, f.name)
        new = _map_value(value, fn)
        if new is not value:
            changes[f.name] = new
    return replace(expr, **changes) if changes else expr


def _map_value(value: Any, fn) -> Any:
    if isinstance(value, Span):
        return value
    if isinstance(value, tuple):
        items = tuple(_map_value(v, fn) for v in value)
        return items if any(a is not b for a, b in zip(items, value)) else value
    if is_dataclass(value) and not isinstance(value, type):
        return fn(value)
    return value


def describe_block(block: BlockDefinition) -> Iterable[str]:
    """Lines for ``mna kinds``: the use, then each parameter with its unit and default."""
    ports = []
    for port in block.ports:
        text = " -> ".join(port.names)
        ports.append(text if port.domain == ELECTRICAL else f"{port.domain} {text}")
    yield f"{block.keyword} NAME {' '.join(ports)}    (block, {block.where()})"
    for p in block.parameters.values():
        text = "required" if p.default is None else f"default {p.text or p.default}"
        yield f"    {p.name}=  {describe(p.dimension)}; {text}"


# --------------------------------------------------------------------------
# Blocks from Python, without text.


class Block:
    """A block built in Python, the way :meth:`mna.Circuit.add` builds a circuit::

        snubber = mna.Block("rc-snubber", "a -> b", resistance="10 ohm", capacitance="47 nF")
        snubber.add("resistor", "R", "a", "mid", "resistance")    # a value may name a parameter
        snubber.add("capacitor", "C", "mid", "b", "capacitance")
        circuit.define(snubber)
        circuit.add("rc-snubber", "S1", "sw", "gnd", resistance="22 ohm")

    ``terminals`` are ``"a -> b"`` (a pair, used as ``a -> b`` in a
    netlist) or ``"g"`` (one node); ``shafts`` and ``thermals`` list shaft
    and thermal terminals the same way. ``parameters`` are defaults as quantity text (``"10 ohm"``),
    :class:`~mna.units.Quantity` or plain numbers (dimensionless); their
    unit is the unit of the default. Parameter names use ``_`` for ``-``.
    A value given to :meth:`add` as text is an expression in the block's
    parameters (``"2 * resistance"``, ``"10 mH"``).
    """

    def __init__(self, keyword: str, *terminals: str, shafts: Iterable[str] = (), thermals: Iterable[str] = (),
                 **parameters: Any):
        self.keyword = keyword
        self.ports = (tuple(_python_port(t, ELECTRICAL) for t in terminals)
                      + tuple(_python_port(t, SHAFT) for t in shafts)
                      + tuple(_python_port(t, THERMAL) for t in thermals))
        self.parameters: dict[str, BlockParameter] = {}
        for key, value in parameters.items():
            name = key.replace("_", "-")
            q = _python_quantity(value, {}, f"default of {name}")
            self.parameters[name] = BlockParameter(name, q, q.dim)
        self.body: list[PythonElement] = []

    def add(self, kind: str, name: str, *terminals: str, value: Any = None, **arguments: Any) -> "Block":
        """Add an element (or a use of another block) to the body, as :meth:`Circuit.add` does."""
        if "." in name:
            raise InputError(f"{kind} {name}: an element's name cannot contain '.'")
        self.body.append(PythonElement(kind, name, tuple(terminals), value, dict(arguments)))
        return self

    def definition(self) -> BlockDefinition:
        if lookup(self.keyword) is not None:
            raise InputError(f"block {self.keyword}: a built-in element kind has this name")
        if not self.body:
            raise InputError(f"block {self.keyword} has no body; add elements with .add()")
        return BlockDefinition(self.keyword, self.ports, dict(self.parameters), tuple(self.body))


def _python_port(text: str, domain: str) -> Port:
    names = tuple(part.strip() for part in text.split("->"))
    if len(names) > 2 or not all(re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", n) for n in names):
        raise InputError(f"a block terminal is a node name or 'a -> b', got {text!r}")
    if any(n in REFERENCE.values() for n in names):
        raise InputError(f"{text!r}: gnd, frame and ambient cannot be terminals of a block")
    return Port(names, domain)


def _python_quantity(value: Any, params: dict[str, Quantity], what: str) -> Quantity:
    """A value from Python -> Quantity: text is an expression in ``params``."""
    if isinstance(value, Quantity):
        return value
    if isinstance(value, str):
        return evaluate(_parse_expression(value), params)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return Quantity(float(value))
    raise InputError(f"{what}: expected a quantity (text like '10 ohm', or a number), got {value!r}")


def _parse_expression(text: str) -> Any:
    st = nl.parse_netlist(f"let x = {text}").statements[0]
    return st.value


@dataclass(frozen=True)
class PythonElement:
    """One :meth:`Block.add` call, placed when an instance is expanded."""

    kind: str
    name: str
    terminals: tuple[str, ...]
    value: Any
    arguments: dict[str, Any]

    def place(self, el: "Elaborator", scope: Scope) -> None:
        block = el.circuit.blocks.get(self.kind)
        if block is not None:
            el.place(python_statement(block, self.name, self.terminals, self.value, self.arguments, scope.params))
            return
        cls = lookup(self.kind)
        keyword_ports = {p.names[0] for p in cls.ports if p.keyword} if cls else set()
        terminals = [scope.node(t) for t in self.terminals]
        arguments = {}
        for key, value in self.arguments.items():
            netlist_key = key.replace("_", "-")
            if netlist_key in keyword_ports:
                arguments[key] = scope.node(value)
            else:
                arguments[key] = self._value(cls.arg(netlist_key) if cls else None, value, scope)
        value = self._value(cls.arg(cls.main) if cls and cls.main else None, self.value, scope)
        if value is None and terminals and cls is not None and len(terminals) > _terminal_count(cls):
            value = self._value(cls.arg(cls.main) if cls.main else None, self.terminals[-1], scope)
            terminals = terminals[:-1]
        el.circuit._add(self.kind, scope.prefix + self.name, *terminals, value=value, **arguments)

    @staticmethod
    def _value(arg: Arg | None, value: Any, scope: Scope) -> Any:
        if not isinstance(value, str) or arg is None:
            return value
        if arg.kind in ("quantity", "waveform"):
            return _python_quantity(value, scope.params, arg.name)
        if arg.kind == "expr":
            return _rewrite(_parse_expression(value), scope.params, scope)
        return value


def _terminal_count(cls) -> int:
    return sum(len(p.names) for p in cls.ports if not p.keyword and not p.variadic)


def python_statement(block: BlockDefinition, name: str, terminals: Iterable[str], value: Any,
                     arguments: dict[str, Any], params: dict[str, Quantity]) -> nl.ElementStatement:
    """A use of a block from Python, as the statement a netlist line would give."""
    if value is not None:
        raise InputError(f"{block.keyword} takes no value after its terminals; use name=value")
    flat = [str(t) for t in terminals]
    operands: list[Any] = []
    for port in block.ports:
        if len(flat) < len(port.names):
            wanted = " ".join(" -> ".join(p.names) for p in block.ports)
            raise InputError(f"{block.keyword} {name} needs terminals {wanted}")
        taken, flat = flat[: len(port.names)], flat[len(port.names):]
        operands.append(nl.NodePair(taken[0], taken[1], None, None, None) if len(taken) == 2
                        else nl.Node(taken[0], None))
    if flat:
        raise InputError(f"{block.keyword} {name}: too many terminals {flat}")
    args = []
    for key, raw in arguments.items():
        key = key.replace("_", "-")
        param = block.parameters.get(key)
        if param is not None and isinstance(raw, (int, float)) and not isinstance(raw, bool):
            q = Quantity(float(raw), param.dimension)  # a plain number is in SI units
        else:
            q = _python_quantity(raw, params, f"{key} of {block.keyword} {name}")
        args.append(nl.Argument(key, nl.Number(q, str(raw), None), None))
    return nl.ElementStatement(block.keyword, name, tuple(operands), tuple(args), None, None, None)


def check_overrides(circuit) -> None:
    """Every override of a block parameter must name one (after expansion)."""
    for name in circuit.block_overrides:
        if name not in circuit.block_parameters:
            import difflib

            close = difflib.get_close_matches(name, list(circuit.block_parameters), n=1)
            hint = (f"did you mean {close[0]!r}?" if close else
                    "block parameters are named INSTANCE.PARAMETER, like S1.resistance")
            raise UnknownNameError(f"no block parameter {name!r} to override", hint=hint)
