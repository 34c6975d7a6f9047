"""The one family of exceptions that mna raises.

Every error derives from :class:`MnaError`. Errors about the input
(:class:`InputError` and its subclasses) carry where the problem is -- file,
line, column -- and can render the offending source line with a caret, so a
message reads like::

    relay.mna:7:22: capacitance needs farads (F), got henries (H)
        capacitor C1 a -> gnd 4.7 uH
                              ^

Errors that happen while solving (:class:`SimulationError`) name the time,
the step and the unknowns that failed, and keep the waveforms computed up
to that point in ``.partial``.

Command-line exit status: 2 for :class:`InputError`, 3 for
:class:`SimulationError` (see ``mna.cli``).
"""

from __future__ import annotations

from typing import Any, NamedTuple


class Span(NamedTuple):
    """Where a piece of netlist text came from (line and column count from 1).

    A named tuple rather than a dataclass: a large netlist creates several
    per line, and tuple construction is several times cheaper.
    """

    line: int
    column: int
    end_column: int | None = None
    file: str | None = None
    source_line: str | None = None

    def where(self) -> str:
        """``file:line:column`` (or ``line L, column C`` without a file)."""
        if self.file:
            return f"{self.file}:{self.line}:{self.column}"
        return f"line {self.line}, column {self.column}"

    def context(self) -> str:
        """The source line and a caret under the column, or '' if unknown.

        Control characters in the line are shown escaped (``\\x1b``), so a
        netlist cannot drive the terminal or break an XML report through an
        error message; a line longer than :data:`CONTEXT_WIDTH` is shown as
        a window around the column.
        """
        if self.source_line is None:
            return ""
        text = self.source_line.rstrip("\r\n").expandtabs(1)
        column = max(1, min(self.column, len(text) + 1))
        width = 1
        if self.end_column and self.end_column > self.column:
            width = self.end_column - self.column
        if len(text) > CONTEXT_WIDTH:
            start = max(0, column - 1 - CONTEXT_WIDTH // 2)
            head = "..." if start else ""
            text = head + text[start:start + CONTEXT_WIDTH] + ("..." if start + CONTEXT_WIDTH < len(text) else "")
            column = column - start + len(head)
            width = min(width, CONTEXT_WIDTH)
        before = printable(text[:column - 1])
        at = printable(text[column - 1:column - 1 + width]) or " "
        return f"    {printable(text)}\n    {' ' * len(before)}{'^' * len(at)}"


#: Longest source line shown whole under an error message (characters).
CONTEXT_WIDTH = 160

_CONTROL = {c: f"\\x{c:02x}" for c in [*range(0x00, 0x09), *range(0x0a, 0x20), *range(0x7f, 0xa0)]}
_CONTROL.update({c: f"\\u{c:04x}" for c in (0x2028, 0x2029, 0xfeff, 0xfffe, 0xffff,
                                             *range(0x200b, 0x2010), *range(0x202a, 0x202f),
                                             *range(0x2066, 0x206a), *range(0xd800, 0xe000))})


def printable(text: str) -> str:
    """``text`` with control characters escaped (``\\x1b``, ``\\x00``), tabs kept.

    For anything taken from a netlist or a file name and shown on a
    terminal, written to a log or put into an XML report: escape sequences
    could clear a screen or set a window title, and XML 1.0 cannot hold
    most control characters at all. Line breaks are escaped too; split
    multi-line text first and escape each line (:func:`printable_lines`).
    """
    return text.translate(_CONTROL) if text and not text.isprintable() else text


def printable_lines(text: str) -> str:
    """:func:`printable` line by line: the line breaks stay."""
    return "\n".join(printable(line) for line in text.split("\n"))


class MnaError(Exception):
    """Root of every error that mna raises on purpose."""


class InputError(MnaError, ValueError):
    """The netlist (or an API call standing for one) is wrong.

    ``message`` says what is wrong and what was expected; ``span`` says
    where. ``str(error)`` gives ``where: message`` followed by the caret
    context when the source line is known.
    """

    def __init__(self, message: str, span: Span | None = None, *, hint: str | None = None):
        self.message = message
        self.span = span
        self.hint = hint
        self.chain: tuple[tuple[str, Span], ...] = ()
        super().__init__(self.render())

    def inside(self, what: str, span: Span | None) -> "InputError":
        """Record that the error happened inside ``what`` (a block use at ``span``).

        Called from the inside out; the rendering lists the outermost use
        first, then each use within it, then the error itself.
        """
        if span is not None:
            self.chain = ((what, span),) + self.chain
            self.args = (self.render(),)
        return self

    @property
    def line(self) -> int | None:
        return self.span.line if self.span else None

    @property
    def column(self) -> int | None:
        return self.span.column if self.span else None

    def render(self) -> str:
        parts = []
        for what, use in getattr(self, "chain", ()):
            parts.append(f"{use.where()}: in {what}")
            if use.source_line is not None:
                parts.append(use.context())
        head = f"{self.span.where()}: {self.message}" if self.span else self.message
        parts.append(head)
        if self.span and self.span.source_line is not None:
            parts.append(self.span.context())
        if self.hint:
            parts.append(f"    hint: {self.hint}")
        return printable_lines("\n".join(parts))


class PluginError(MnaError):
    """An element kind from a plugin failed: its entry point does not load, or
    its code raised. ``plugin`` names the plugin's module; the message says
    what it raised. Not an input error (the netlist may be right) and not an
    internal error of mna."""

    def __init__(self, message: str, *, plugin: str, kind: str | None = None, hint: str | None = None):
        self.message = message
        self.plugin = plugin
        self.kind = kind
        self.hint = hint
        super().__init__(message + (f"\n    hint: {hint}" if hint else ""))


def plugin_fault(exc: BaseException) -> "PluginError | None":
    """The plugin an unexpected exception came from, as a :class:`PluginError`, or None.

    Walks the traceback for the innermost frame in a module of an element
    kind that is not mna's own (a plugin registered by entry point or with
    ``mna.register``), and names the plugin and, when known, its kind.
    """
    import sys

    from .elements.registry import _extra, _loaded

    plugins = {cls.__module__: keyword for keyword, cls in {**_loaded, **_extra}.items()
               if not cls.__module__.startswith("mna.")}
    if not plugins:
        return None
    found = None
    tb = exc.__traceback__
    while tb is not None:
        module = tb.tb_frame.f_globals.get("__name__", "")
        if module in plugins:
            found = module
        tb = tb.tb_next
    if found is None:
        return None
    kind = plugins[found]
    return PluginError(f"the element kind {kind!r} from plugin {found} raised {type(exc).__name__}: {exc}",
                       plugin=found, kind=kind, hint=f"this is a fault in {found}, not in the netlist or in mna; "
                       "report it to the plugin's authors")


class NetlistSyntaxError(InputError):
    """The text does not follow the netlist grammar."""


class UnitsError(InputError):
    """A quantity has a missing, unknown or wrong unit."""


class UnknownNameError(InputError):
    """A name refers to an element, node or parameter that does not exist."""


class TopologyError(InputError):
    """The circuit cannot be solved as connected (island, source loop, cut set)."""


class SimulationError(MnaError, RuntimeError):
    """The solve failed: singular matrix or no convergence.

    ``time`` (s) and ``step`` (s) say where; ``unknowns`` names the
    unknowns that did not settle; ``partial`` holds the results computed
    up to the failure (or None).
    """

    def __init__(
        self,
        message: str,
        *,
        time: float | None = None,
        step: float | None = None,
        unknowns: tuple[str, ...] = (),
        partial: Any = None,
    ):
        self.message = message
        self.time = time
        self.step = step
        self.unknowns = tuple(unknowns)
        self.partial = partial
        super().__init__(message)


class MeasurementError(InputError):
    """A measurement cannot be taken on the waveforms (window outside the run...)."""


class LimitError(InputError):
    """A run would do more work than a limit allows (steps, edges, output points, memory).

    Raised before the run starts, when the settings alone show it: the
    message names the limit and the setting that raises it (``step-limit=``,
    ``edge-limit=``, ``point-limit=``, ``memory-limit=``).
    """


class LimitReached(SimulationError):
    """A run stopped early at a work limit; ``partial`` holds what it computed."""
