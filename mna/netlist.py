"""Netlist text -> :class:`Netlist`: statements with source spans.

This module knows the language's syntax and nothing of circuits: it does
not know which element kinds exist, what their arguments mean or which
names are defined. Those checks happen in :mod:`mna.circuit`.

A file is split into statements by a plain line scan (a line that starts
with a space or tab continues the statement above; blank and comment-only
lines end nothing), then each statement is parsed with the lark grammar in
``grammar/netlist.lark``. The most common statement shape in generated
netlists -- ``KIND NAME a -> b VALUE key=value ...`` with plain quantities --
takes a regular-expression fast path that builds exactly the objects the
grammar would (``tests/test_netlist.py`` checks the two agree), so netlists
of tens of thousands of lines parse in well under a second.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Union

import lark
from lark import Lark, Token, Transformer

from .errors import InputError, NetlistSyntaxError, Span, UnitsError
from .units import Quantity, UnitError, parse_quantity

# --------------------------------------------------------------------------
# Expression tree. Evaluated by mna.expressions, never by Python's eval.


@dataclass(slots=True)
class Number:
    """A literal quantity: ``10 mH``, ``0.98``."""

    value: Quantity
    text: str
    span: Span


@dataclass(slots=True)
class Name:
    """A bare name: a parameter, a node, an element or a word like ``closed``."""

    name: str
    span: Span


@dataclass(slots=True)
class Word:
    """A hyphenated lower-case word used as a value: ``backward-euler``."""

    word: str
    span: Span


@dataclass(slots=True)
class String:
    text: str
    span: Span


@dataclass(slots=True)
class Call:
    """``func(arg, ..., key=value, ..., a: b, ...)``; ``items`` keeps order."""

    func: str
    args: tuple["Expr", ...]
    named: tuple[tuple[str, "Expr", Span], ...]
    span: Span

    def named_dict(self) -> dict[str, "Expr"]:
        return {k: v for k, v, _ in self.named}


@dataclass(slots=True)
class Pair:
    """``key: value`` inside a call: a breakpoint of ``piecewise`` or ``schedule``."""

    key: "Expr"
    value: "Expr"
    span: Span


@dataclass(slots=True)
class BinaryOp:
    op: str  # + - * / ^
    left: "Expr"
    right: "Expr"
    span: Span


@dataclass(slots=True)
class Negate:
    operand: "Expr"
    span: Span


@dataclass(slots=True)
class Compare:
    op: str  # < <= > >=
    left: "Expr"
    right: "Expr"
    span: Span


Expr = Union[Number, Name, Word, String, Call, Pair, BinaryOp, Negate, Compare, "NodePair"]

# --------------------------------------------------------------------------
# Statements.


@dataclass(slots=True)
class Node:
    """A single terminal operand: ``rotor`` (or an element name for ``coupling``)."""

    name: str
    span: Span


@dataclass(slots=True)
class NodePair:
    """``a -> b``: a two-terminal connection (reference direction a to b), or
    the pair of nodes of a voltage between them, ``v(a -> b)``."""

    a: str
    b: str
    span: Span
    a_span: Span
    b_span: Span


Operand = Union[Node, NodePair, Expr]


@dataclass(slots=True)
class Argument:
    key: str
    value: Expr
    span: Span  # of the key


@dataclass(slots=True)
class ElementStatement:
    kind: str
    name: str
    operands: tuple[Operand, ...]
    arguments: tuple[Argument, ...]
    span: Span
    kind_span: Span
    name_span: Span


@dataclass(slots=True)
class LetStatement:
    name: str
    value: Expr
    span: Span


@dataclass(slots=True)
class CircuitStatement:
    name: str
    title: str | None
    span: Span


@dataclass(slots=True)
class LossesStatement:
    """``losses input=Vbus output=Rload from=10 ms to=20 ms``: ask for the loss table."""

    arguments: tuple[Argument, ...]
    span: Span


@dataclass(slots=True)
class SimulateStatement:
    analysis: str
    arguments: tuple[Argument, ...]
    span: Span
    analysis_span: Span


@dataclass(slots=True)
class RecordStatement:
    quantities: tuple[Expr, ...]
    span: Span


@dataclass(slots=True)
class UnconnectedStatement:
    """``unconnected NODE, ...``: nodes meant to be touched by one terminal only."""

    names: tuple[str, ...]
    spans: tuple[Span, ...]
    span: Span


@dataclass(slots=True)
class MeasureStatement:
    """``measure NAME = EXPR``; ``text`` is ``NAME = EXPR`` as written, blanks tidied."""

    name: str
    value: Expr
    span: Span
    text: str = ""


@dataclass(slots=True)
class CheckStatement:
    """``check LEFT OP RIGHT`` or ``check LEFT within TOLERANCE of TARGET``.

    ``text`` is the statement as written after the word ``check``, with
    comments dropped and runs of blanks (continuation lines too) made one
    space: the check's name in reports.
    """

    op: str  # < <= > >= or "within"
    left: Expr
    right: Expr
    span: Span
    tolerance: Expr | None = None
    text: str = ""


@dataclass(slots=True)
class BlockPort:
    """One terminal of a block: a node (``g``) or a pair (``a -> b``), in a domain."""

    names: tuple[str, ...]
    domain: str  # "electrical" | "shaft" | "thermal"
    spans: tuple[Span, ...]


@dataclass(slots=True)
class ParameterStatement:
    """``parameter NAME = DEFAULT`` inside a block: a value its use may set.

    ``parameter NAME in UNIT`` has no default (``value`` is None): every
    use must give it, in ``unit``.
    """

    name: str
    value: Expr | None
    span: Span
    unit: str | None = None
    unit_span: Span | None = None


@dataclass(slots=True)
class SweepAxis:
    """``NAME = v1, v2, ...`` inside a ``sweep`` line; a value may be a range call
    (``linear(...)``, ``logarithmic(...)``)."""

    name: str
    values: tuple[Expr, ...]
    span: Span  # of the name


@dataclass(slots=True)
class SweepStatement:
    """``sweep A = ... [and B = ...]``: one axis of a grid; joined names step together."""

    axes: tuple[SweepAxis, ...]
    span: Span


@dataclass(slots=True)
class SpreadTarget:
    """What a spread varies: a parameter or an element's main value (``name``), or
    one argument of an element (``argument(name)``, as ``resistance(L1)``)."""

    name: str
    argument: str | None
    span: Span

    @property
    def label(self) -> str:
        return f"{self.argument}({self.name})" if self.argument else self.name


@dataclass(slots=True)
class SpreadStatement:
    """``spread TARGET uniform|normal AMOUNT [clip=LIMIT]``."""

    target: SpreadTarget
    distribution: str
    amount: Expr
    arguments: tuple[Argument, ...]
    span: Span
    distribution_span: Span


@dataclass(slots=True)
class MonteCarloStatement:
    """``monte-carlo runs=N seed=S``."""

    arguments: tuple[Argument, ...]
    span: Span


@dataclass(slots=True)
class CornersStatement:
    """``corners [TARGET, ...]``: every spread (or those named) at both limits."""

    targets: tuple[SpreadTarget, ...]
    span: Span


@dataclass(slots=True)
class YieldStatement:
    """``required-yield FRACTION``: the share of runs that must pass every check."""

    value: Expr
    span: Span


@dataclass(slots=True)
class BlockStatement:
    """``block KIND TERMINALS`` and the statements indented under it.

    ``body`` holds the indented statements (parameters, lets, elements and
    uses of other blocks), parsed like top-level lines.
    """

    kind: str
    ports: tuple[BlockPort, ...]
    body: tuple["Statement", ...]
    span: Span  # of the kind word
    file: str | None = None


@dataclass(slots=True)
class BlocksFromStatement:
    """``blocks from "PATH"``: the block definitions of another file."""

    path: str
    span: Span


Statement = Union[
    BlockStatement,
    ParameterStatement,
    BlocksFromStatement,
    SweepStatement,
    SpreadStatement,
    MonteCarloStatement,
    CornersStatement,
    YieldStatement,
    ElementStatement,
    LetStatement,
    CircuitStatement,
    SimulateStatement,
    LossesStatement,
    RecordStatement,
    MeasureStatement,
    CheckStatement,
    UnconnectedStatement,
]


@dataclass
class Netlist:
    """The statements of one netlist file, in order, with their spans."""

    statements: list[Statement] = field(default_factory=list)
    file: str | None = None
    text: str = ""


# --------------------------------------------------------------------------
# Grammar loading (the grammar file ships inside the package as mna/grammar).


def grammar_text() -> str:
    """The lark grammar of the language, as shipped with the package."""
    packaged = resources.files("mna").joinpath("grammar/netlist.lark")
    if packaged.is_file():
        return packaged.read_text(encoding="utf-8")
    return (Path(__file__).resolve().parent.parent / "grammar" / "netlist.lark").read_text(
        encoding="utf-8"
    )


@lru_cache(maxsize=1)
def _parser() -> Lark:
    # cache=True keeps the LALR tables in a temporary file keyed by the grammar's
    # hash: building them takes about 0.3-0.6 s, loading them a few ms.
    return Lark(grammar_text(), parser="lalr", start="statement", maybe_placeholders=False, cache=True)


# --------------------------------------------------------------------------
# Splitting a file into statements.


@dataclass(slots=True)
class _Chunk:
    text: str
    first_line: int  # 1-based line number of the statement's first line


def split_statements(text: str) -> list[_Chunk]:
    """Split netlist text into statements by the continuation rule."""
    chunks: list[_Chunk] = []
    current: list[str] = []
    first = 0
    for number, line in enumerate(text.splitlines(), start=1):
        head = line[:1]
        if head and head not in " \t#":
            if current:
                chunks.append(_Chunk("\n".join(current), first))
            current = [line]
            first = number
        elif current:
            current.append(line)
        elif line.strip() and not line.lstrip().startswith("#"):
            # An indented line before any statement: nothing to continue.
            raise NetlistSyntaxError(
                "this line is indented but there is no statement above it to continue",
                Span(number, len(line) - len(line.lstrip()) + 1, source_line=line),
                hint="statements start in column 1; indent only continuation lines",
            )
    if current:
        chunks.append(_Chunk("\n".join(current), first))
    return chunks


# --------------------------------------------------------------------------
# Parse tree -> statements.


class _Builder(Transformer):
    """Turns one statement's parse tree into statement objects."""

    def __init__(self, chunk: _Chunk, file: str | None, lines: list[str]):
        super().__init__()
        self._first = chunk.first_line
        self._text = chunk.text
        self._file = file
        self._lines = lines

    def span(self, token: Token, end_token: Token | None = None) -> Span:
        line = self._first + token.line - 1
        end = end_token if end_token is not None else token
        end_col = end.end_column if end.line == token.line else None
        src = self._lines[line - 1] if 0 < line <= len(self._lines) else None
        return Span(line, token.column, end_col, self._file, src)

    # -- atoms
    def quantity(self, children):
        (tok,) = children
        return make_number(str(tok), self.span(tok))

    def name(self, children):
        (tok,) = children
        return Name(str(tok), self.span(tok))

    def word(self, children):
        (tok,) = children
        return Word(str(tok), self.span(tok))

    def string(self, children):
        (tok,) = children
        return String(str(tok)[1:-1], self.span(tok))

    def node(self, children):
        (tok,) = children
        return Node(str(tok), self.span(tok))

    def node_pair(self, children):
        a, b = children
        return NodePair(str(a), str(b), self.span(a, b), self.span(a), self.span(b))

    def comma(self, children):
        return _COMMA

    # -- operators
    def _binary(op):  # noqa: N805 - helper building methods
        def build(self, children):
            left, right = children
            return BinaryOp(op, left, right, span_of(left))

        return build

    add = _binary("+")
    sub = _binary("-")
    mul = _binary("*")
    div = _binary("/")
    pow = _binary("^")

    def neg(self, children):
        (operand,) = children
        return Negate(operand, span_of(operand))

    def compare(self, children):
        left, op, right = children
        return Compare(str(op), left, right, span_of(left))

    def call(self, children):
        func, *items = children
        args, named = [], []
        for item in items:
            if isinstance(item, tuple):
                named.append(item)
            else:
                args.append(item)
        return Call(str(func), tuple(args), tuple(named), self.span(func))

    def named_arg(self, children):
        key, value = children
        return (str(key), value, self.span(key))

    def pair(self, children):
        key, value = children
        return Pair(key, value, span_of(key))

    def argument(self, children):
        key, value = children
        return Argument(str(key), value, self.span(key))

    # -- statements
    def element(self, children):
        kind, name, *rest = children
        # Commas between operands (``a -> b, c -> d``) only separate: drop them.
        operands = tuple(c for c in rest if not isinstance(c, (Argument, _Comma)))
        args = tuple(c for c in rest if isinstance(c, Argument))
        return ElementStatement(
            str(kind), str(name), operands, args, self.span(kind), self.span(kind), self.span(name)
        )

    def let_stmt(self, children):
        name, value = children
        return LetStatement(str(name), value, self.span(name))

    def circuit_stmt(self, children):
        name, *title = children
        return CircuitStatement(str(name), str(title[0])[1:-1] if title else None, self.span(name))

    def simulate_stmt(self, children):
        analysis, *args = children
        return SimulateStatement(str(analysis), tuple(args), self.span(analysis), self.span(analysis))

    def losses_stmt(self, children):
        line = self._first
        src = self._lines[line - 1] if 0 < line <= len(self._lines) else None
        column = (len(src) - len(src.lstrip()) + 1) if src else 1
        return LossesStatement(tuple(children), Span(line, column, column + 6, self._file, src))

    def record_stmt(self, children):
        return RecordStatement(tuple(children), span_of(children[0]))

    def unconnected_stmt(self, children):
        spans = tuple(self.span(tok) for tok in children)
        return UnconnectedStatement(tuple(str(tok) for tok in children), spans, spans[0])

    def measure_stmt(self, children):
        name, value = children
        return MeasureStatement(str(name), value, self.span(name), text=statement_text(self._text, "measure"))

    def block_stmt(self, children):
        kind, *items = children
        ports = tuple(_block_port(item, "electrical") if not isinstance(item, BlockPort) else item
                      for item in items if not isinstance(item, _Comma))
        return BlockStatement(str(kind), ports, (), self.span(kind), self._file)

    def shaft_port(self, children):
        (item,) = children
        return _block_port(item, "shaft")

    def thermal_port(self, children):
        (item,) = children
        return _block_port(item, "thermal")

    def parameter_stmt(self, children):
        name, value = children
        return ParameterStatement(str(name), value, self.span(name))

    def required_parameter(self, children):
        name, unit = children
        return ParameterStatement(str(name), None, self.span(name), unit=str(unit), unit_span=self.span(unit))

    def blocks_from_stmt(self, children):
        (path,) = children
        return BlocksFromStatement(str(path)[1:-1], self.span(path))

    def check_compare(self, children):
        left, op, right = children
        return CheckStatement(str(op), left, right, span_of(left), text=statement_text(self._text, "check"))

    def sweep_axis(self, children):
        name, *values = children
        return SweepAxis(str(name), tuple(values), self.span(name))

    def sweep_stmt(self, children):
        return SweepStatement(tuple(children), children[0].span)

    def target_value(self, children):
        (name,) = children
        return SpreadTarget(str(name), None, self.span(name))

    def target_argument(self, children):
        argument, name = children
        return SpreadTarget(str(name), str(argument), self.span(argument, name))

    def spread_stmt(self, children):
        target, distribution, amount, *args = children
        return SpreadStatement(target, str(distribution), amount, tuple(args), target.span,
                               self.span(distribution))

    def monte_carlo_stmt(self, children):
        return MonteCarloStatement(tuple(children), self._statement_span())

    def corners_stmt(self, children):
        targets = tuple(c for c in children if c is not None)
        return CornersStatement(targets, self._statement_span())

    def yield_stmt(self, children):
        (value,) = children
        return YieldStatement(value, self._statement_span())

    def _statement_span(self) -> Span:
        """The span of the statement's first word (for statements that start with a keyword)."""
        line = self._first
        src = self._lines[line - 1] if 0 < line <= len(self._lines) else None
        word = self._text.split(None, 1)[0] if self._text.strip() else ""
        return Span(line, 1, 1 + len(word), self._file, src)

    def check_within(self, children):
        left, tolerance, target = children
        return CheckStatement("within", left, target, span_of(left), tolerance=tolerance,
                              text=statement_text(self._text, "check"))


def _block_port(item, domain: str) -> BlockPort:
    if isinstance(item, NodePair):
        return BlockPort((item.a, item.b), domain, (item.a_span, item.b_span))
    return BlockPort((item.name,), domain, (item.span,))


class _Comma:
    """Marker for an optional comma between operands (dropped)."""


_COMMA = _Comma()


def statement_text(text: str, keyword: str) -> str:
    """A statement's text after its leading ``keyword``, comments dropped, blanks tidied.

    ``"check max(v(sw))  <  60 V   # clamp"`` -> ``"max(v(sw)) < 60 V"``.
    (Only for statements without quoted text, where ``#`` always starts a comment.)
    """
    words = " ".join(line.split("#", 1)[0] for line in text.splitlines()).split()
    if words and words[0] == keyword:
        words = words[1:]
    return " ".join(words)


def span_of(thing) -> Span:
    """The span of any expression, operand or statement."""
    return thing.span


def make_number(text: str, span: Span) -> Number:
    """A literal quantity token -> :class:`Number`, with unit errors placed."""
    try:
        value = parse_quantity(text)
    except UnitError as exc:
        offset = getattr(exc, "offset", None) or 0
        col = span.column + offset
        raise UnitsError(str(exc), Span(span.line, col, None, span.file, span.source_line)) from None
    return Number(value, text.strip(), span)


# --------------------------------------------------------------------------
# Fast path for ``KIND NAME a -> b [VALUE] [key=VALUE ...]`` on one line.

# As the grammar's QUANTITY: a unit is never followed by "=" (or a letter...),
# so in ``turns=10 field=1 T`` the ``10`` has no unit ``field``.
_Q = (
    r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
    r"(?:[ \t]*[A-Za-z\u00b0\u00b5\u03bc\u03a9%]+(?:\^-?\d+)?"
    r"(?:[*/][A-Za-z\u00b0\u00b5\u03bc\u03a9%]+(?:\^-?\d+)?)*"
    r"(?![\w=(\u00b0\u00b5\u03bc\u03a9%^*/]|-[a-z]))?"
)
_FAST = re.compile(
    r"(?P<kind>[a-z][a-z0-9]*(?:-[a-z0-9]+)*)[ \t]+"
    r"(?P<name>[A-Za-z][A-Za-z0-9_]*)[ \t]+"
    r"(?P<a>[A-Za-z][A-Za-z0-9_]*)[ \t]*->[ \t]*(?P<b>[A-Za-z][A-Za-z0-9_]*)"
    rf"(?:[ \t]+(?P<value>{_Q}))?"
    rf"(?P<args>(?:[ \t]+[a-z][a-z0-9]*(?:-[a-z0-9]+)*[ \t]*=[ \t]*{_Q})*)"
    r"[ \t]*(?:#[^\n]*)?"
)
_FAST_ARG = re.compile(rf"([a-z][a-z0-9]*(?:-[a-z0-9]+)*)[ \t]*=[ \t]*({_Q})")
_STATEMENT_WORDS = frozenset({"let", "circuit", "simulate", "record", "measure", "check",
                              "block", "blocks", "parameter", "sweep", "spread", "monte-carlo", "corners",
                              "required-yield", "losses", "unconnected"})


def _fast_element(chunk: _Chunk, file: str | None, lines: list[str]) -> ElementStatement | None:
    text = chunk.text
    if "\n" in text or '"' in text:
        return None
    m = _FAST.fullmatch(text)
    if m is None or m["kind"] in _STATEMENT_WORDS:
        return None
    line = chunk.first_line
    src = lines[line - 1]
    new = tuple.__new__  # Span(...) without the named-tuple constructor's overhead

    def sp(group: str) -> Span:
        a, b = m.span(group)
        return new(Span, (line, a + 1, b + 1, file, src))

    a_span, b_span = sp("a"), sp("b")
    operands: list[Operand] = [
        NodePair(m["a"], m["b"], new(Span, (line, a_span[1], b_span[2], file, src)), a_span, b_span)
    ]
    if m["value"] is not None:
        operands.append(make_number(m["value"], sp("value")))
    args = []
    base = m.start("args") + 1
    for am in _FAST_ARG.finditer(m["args"]):
        (k0, k1), (v0, v1) = am.span(1), am.span(2)
        args.append(Argument(am[1], make_number(am[2], new(Span, (line, base + v0, base + v1, file, src))),
                             new(Span, (line, base + k0, base + k1, file, src))))
    kind_span = sp("kind")
    return ElementStatement(m["kind"], m["name"], tuple(operands), tuple(args), kind_span, kind_span, sp("name"))


# --------------------------------------------------------------------------
# Syntax errors in plain words.

_EXPECTED_WORDS = {
    "NAME": "a name",
    "KIND": "an element kind or a statement word",
    "KEY": "an argument name followed by '='",
    "QUANTITY": "a number or quantity",
    "SIGNED_QUANTITY": "a number or quantity",
    "WORD": "a word",
    "STRING": 'a "quoted title"',
    "COMPARE": "a comparison (< <= > >=)",
    "LPAR": "'('",
    "RPAR": "')'",
    "COMMA": "','",
    "EQUAL": "'='",
    "COLON": "':'",
    "PLUS": "'+'",
    "MINUS": "'-'",
    "STAR": "'*'",
    "SLASH": "'/'",
    "CIRCUMFLEX": "'^'",
    "$END": "the end of the statement",
}


def _describe_expected(expected: set[str]) -> str:
    terminals = {t.name: t for t in _parser().terminals}
    words: list[str] = []
    for name in sorted(expected):
        word = _EXPECTED_WORDS.get(name)
        if word is None:
            term = terminals.get(name)
            if term is not None and term.pattern.type == "str":
                word = f"'{term.pattern.value}'"
            else:
                word = name.lower()
        if word not in words:
            words.append(word)
    if not words:
        return "something else"
    if len(words) == 1:
        return words[0]
    return ", ".join(words[:-1]) + " or " + words[-1]


def _syntax_error(exc: lark.exceptions.LarkError, chunk: _Chunk, file: str | None,
                  lines: list[str]) -> NetlistSyntaxError:
    line = chunk.first_line + getattr(exc, "line", 1) - 1
    column = getattr(exc, "column", 1) or 1
    src = lines[line - 1] if 0 < line <= len(lines) else None
    span = Span(line, column, None, file, src)
    if isinstance(exc, lark.exceptions.UnexpectedCharacters):
        char = exc.char
        if char == "." and column == 1:
            msg = "unexpected '.': statements start with a word (element kind, let, simulate...), not a dot"
        elif char == '"':
            msg = 'unclosed quote: a "title" must end on the same line'
        else:
            msg = f"unexpected character {char!r}"
        return NetlistSyntaxError(msg, span)
    if isinstance(exc, lark.exceptions.UnexpectedToken):
        tok = exc.token
        expected = set(exc.expected)
        if tok.type == "$END":
            text = chunk.text.rstrip()
            opens = text.count("(") - text.count(")")
            if opens > 0:
                msg = "unclosed parenthesis: this statement ends before its ')'"
            else:
                msg = f"the statement ends too early; expected {_describe_expected(expected)}"
            endline = chunk.first_line + text.count("\n")
            src_end = lines[endline - 1] if 0 < endline <= len(lines) else None
            col_end = len(src_end.rstrip()) + 1 if src_end else 1
            return NetlistSyntaxError(msg, Span(endline, col_end, None, file, src_end))
        got = str(tok)
        if tok.type == "RPAR" and "RPAR" not in expected:
            msg = "unmatched ')'"
        elif tok.type == "EQUAL" and column > 1:
            msg = "unexpected '=': argument names are lower-case words joined by '-', like saturation-current="
        else:
            msg = f"unexpected {got!r}; expected {_describe_expected(expected)}"
        return NetlistSyntaxError(msg, Span(line, column, column + max(len(got), 1), file, src))
    return NetlistSyntaxError(str(exc).splitlines()[0], span)


# --------------------------------------------------------------------------
# Public entry points.


def parse_netlist(text: str, file: str | None = None) -> Netlist:
    """Parse netlist text into a :class:`Netlist`.

    Raises :class:`~mna.errors.NetlistSyntaxError` (or
    :class:`~mna.errors.UnitsError` for a malformed quantity) with the file,
    line and column of the first problem.
    """
    if text.startswith("\ufeff"):
        text = text[1:]
    lines = text.splitlines()
    netlist = Netlist(file=file, text=text)
    for chunk in split_statements(text):
        if _BLOCK_HEAD.match(chunk.text):
            netlist.statements.append(_parse_block(chunk, file, lines))
            continue
        statement = _fast_element(chunk, file, lines)
        if statement is None:
            statement = _parse_chunk(chunk, file, lines)
        netlist.statements.append(statement)
    return netlist


def _parse_chunk(chunk: _Chunk, file: str | None, lines: list[str]) -> Statement:
    """One statement's text -> its statement object (through the grammar)."""
    try:
        tree = _parser().parse(chunk.text)
    except lark.exceptions.UnexpectedInput as exc:
        raise _syntax_error(exc, chunk, file, lines) from None
    _check_depth(tree, chunk, file, lines)
    try:
        return _Builder(chunk, file, lines).transform(tree)
    except lark.exceptions.VisitError as exc:
        # An error of ours raised while building (a bad unit) comes
        # wrapped by lark; raise it as it is.
        raise exc.orig_exc from None


#: Deepest nesting of an expression (operators, signs, parentheses, calls).
#: The tree is built and evaluated recursively; this keeps every walk far
#: from Python's recursion limit. Real netlists nest a handful of levels.
MAX_DEPTH = 100


def _check_depth(tree, chunk: _Chunk, file: str | None, lines: list[str]) -> None:
    """Refuse a statement nested deeper than :data:`MAX_DEPTH` (walked without recursion)."""
    stack = [(tree, 1)]
    while stack:
        node, depth = stack.pop()
        if depth > MAX_DEPTH:
            token = _first_token(node)
            line = chunk.first_line + (token.line - 1 if token is not None else 0)
            src = lines[line - 1] if 0 < line <= len(lines) else None
            raise NetlistSyntaxError(
                f"this expression is nested more than {MAX_DEPTH} levels deep (operators, signs, "
                "parentheses and calls inside one another)", Span(line, token.column if token else 1, None,
                                                                  file, src),
                hint="split it into several 'let' lines")
        stack.extend((child, depth + 1) for child in node.children if isinstance(child, lark.Tree))


def _first_token(node) -> Token | None:
    """The leftmost token under a tree node (walked without recursion)."""
    while isinstance(node, lark.Tree):
        for child in node.children:
            if isinstance(child, Token):
                return child
        node = next((c for c in node.children if isinstance(c, lark.Tree)), None)
    return None


_BLOCK_HEAD = re.compile(r"block[ \t]")


def _parse_block(chunk: _Chunk, file: str | None, lines: list[str]) -> BlockStatement:
    """A block: its header line, then the statements indented under it.

    The first indented line sets the body's indentation; a line indented
    exactly that much starts a statement, a line indented deeper continues
    it (the file's own continuation rule, one level in).
    """
    raw = chunk.text.split("\n")
    header = _parse_chunk(_Chunk(raw[0], chunk.first_line), file, lines)
    body: list[Statement] = []
    indent: str | None = None
    current: list[str] = []
    first = 0
    for offset, line in enumerate(raw[1:], start=1):
        number = chunk.first_line + offset
        if not line.strip() or line.lstrip().startswith("#"):
            if current:
                current.append(line)
            continue
        lead = line[: len(line) - len(line.lstrip())]
        if indent is None:
            indent = lead
        if lead == indent:
            if current:
                body.append(_body_statement(_Chunk("\n".join(current), first), file, lines))
            current, first = [line], number
        elif lead.startswith(indent) and current:
            current.append(line)
        else:
            raise NetlistSyntaxError(
                f"this line is indented differently from the lines above it in block {header.kind}",
                Span(number, len(lead) + 1, None, file, line),
                hint=f"indent every statement of a block alike ({len(indent)} columns here); "
                     "indent continuation lines deeper",
            )
    if current:
        body.append(_body_statement(_Chunk("\n".join(current), first), file, lines))
    header.body = tuple(body)
    return header


def _body_statement(chunk: _Chunk, file: str | None, lines: list[str]) -> Statement:
    if _BLOCK_HEAD.match(chunk.text.lstrip()):
        line = lines[chunk.first_line - 1]
        raise NetlistSyntaxError(
            "a block cannot be defined inside another block",
            Span(chunk.first_line, len(line) - len(line.lstrip()) + 1, None, file, line),
            hint="define it at the top level (column 1) and use it inside this one",
        )
    return _parse_chunk(chunk, file, lines)


def parse_file(path: str | Path) -> Netlist:
    """Read and parse a netlist file (UTF-8)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise NetlistSyntaxError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except OSError as exc:  # missing, no permission, a folder...
        raise InputError(f"{path}: cannot read the file: {exc.strerror or exc}") from None
    return parse_netlist(text, file=str(path))
