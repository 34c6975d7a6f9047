"""Property-based fuzzing: any input ends in a result or an MnaError, never another exception, in bounded time.

Covers the lexer and parser (random text and token soup), units (random
quantity text), expressions, element arguments with a short run, the
settings of a transient run, measure and check lines, and mutations of the
example circuits.

Quick by default (a few hundred examples in all, derandomised so CI is
repeatable). For a real campaign set ``MNA_FUZZ_EXAMPLES`` (examples per
test; the seed is then random) and, optionally, ``MNA_FUZZ_SECONDS`` (the
time allowed per input, 20 s by default)::

    MNA_FUZZ_EXAMPLES=5000 python -m pytest -q tests/test_fuzz.py

Time bound: each input runs under an interval timer that raises in Python
code, and under ``faulthandler``'s watchdog thread, which dumps every
thread's stack and ends the process if an input outlives four times the
bound (a hang inside compiled code, where no Python exception can be
raised): a CI job fails, it never hangs.
"""

from __future__ import annotations

import faulthandler
import os
import re
import signal
import sys
from contextlib import contextmanager
from pathlib import Path

import pytest

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

import mna  # noqa: E402
from mna.errors import MnaError  # noqa: E402
from mna.units import parse_quantity, UnitError  # noqa: E402

CAMPAIGN = int(os.environ.get("MNA_FUZZ_EXAMPLES", "0"))
SECONDS = float(os.environ.get("MNA_FUZZ_SECONDS", "20"))


def budget(quick: int):
    """Hypothesis settings: ``quick`` examples in CI, ``MNA_FUZZ_EXAMPLES`` in a campaign."""
    return settings(
        max_examples=CAMPAIGN or quick,
        derandomize=not CAMPAIGN,
        deadline=None,  # the time bound is ours (below): hypothesis's deadline cannot stop a hang
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much],
    )


class InputTookTooLong(Exception):
    """Raised by the interval timer: an input ran past the time bound."""


@contextmanager
def time_bound(what: str):
    def expire(signum, frame):
        raise InputTookTooLong(f"{what} took more than {SECONDS:g} s")

    faulthandler.dump_traceback_later(4 * SECONDS, exit=True)
    previous = signal.signal(signal.SIGALRM, expire)
    signal.setitimer(signal.ITIMER_REAL, SECONDS)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
        faulthandler.cancel_dump_traceback_later()


pytestmark = pytest.mark.skipif(not hasattr(signal, "setitimer"), reason="needs POSIX interval timers")


def survives(text: str, run: bool = False) -> None:
    """Parse (and run) ``text``: a result or an MnaError, nothing else, within the bound."""
    with time_bound(repr(text[:200])):
        try:
            circuit = mna.parse(text, "fuzz.mna")
            if run:
                for result in circuit.run():
                    _finite(result)
        except MnaError:
            pass


def _finite(result) -> None:
    import numpy as np

    values = getattr(result, "values", None)
    if isinstance(values, dict):
        assert all(np.isfinite(v) for v in values.values()), result
    signals = getattr(result, "signals", None)
    if isinstance(signals, dict) and getattr(result, "status", "ok") == "ok":
        assert all(np.isfinite(np.asarray(v)).all() for v in signals.values())


# --------------------------------------------------------------------------
# Building blocks.

NUMBERS = ["0", "1", "-1", "2.5", "0.3", "1e-320", "1e-300", "1e-170", "1e-60", "1e-17", "1e-12", "1e-3",
           "1e3", "1e12", "1e60", "1e100", "1e300", "1e999", "1e1000000", ".5", "00", "1e", "1.", "7e-9"]
UNITS = ["", "V", "A", "ohm", "kohm", "mohm", "F", "uF", "nF", "H", "mH", "uH", "s", "ms", "us", "ns", "Hz",
         "kHz", "MHz", "%", "K", "degC", "rad", "deg", "rpm", "rad/s", "V*s/rad", "N*m", "N*m*s/rad",
         "kg*m^2", "m", "cm", "m^2", "T", "W", "S", "km^999999999", "deg^-1000", "m^-2", "qq", "1k", "Ohm"]
OPERATORS = [" + ", " - ", " * ", " / ", " ^ "]
FUNCTIONS = ["sqrt", "exp", "ln", "log10", "sin", "cos", "tan", "atan", "abs", "min", "max", "nothing"]

number = st.one_of(st.sampled_from(NUMBERS),
                   st.floats(allow_nan=False, allow_infinity=False, width=64).map(repr),
                   st.integers(min_value=-10**30, max_value=10**30).map(str))
quantity = st.builds(lambda n, sep, u: f"{n}{sep}{u}".strip(), number, st.sampled_from(["", " ", "  "]),
                     st.sampled_from(UNITS))


def _expression(children):
    return st.one_of(
        st.builds(lambda a, op, b: f"{a}{op}{b}", children, st.sampled_from(OPERATORS), children),
        st.builds(lambda a: f"-{a}", children),
        st.builds(lambda a: f"({a})", children),
        st.builds(lambda f, args: f"{f}({', '.join(args)})", st.sampled_from(FUNCTIONS),
                  st.lists(children, max_size=3)),
    )


expression = st.recursive(st.one_of(quantity, st.sampled_from(["pi", "x", "y", "undefined"])), _expression,
                          max_leaves=25)


def value(unit: str):
    """Text for an argument that wants ``unit``: right, wrong or extreme, plain or computed."""
    right = st.builds(lambda n: f"{n} {unit}".strip(), number)
    computed = st.builds(lambda a, op, b: f"({a}{op}{b})", right, st.sampled_from(OPERATORS), right)
    return st.one_of(right, right, quantity, computed)


# --------------------------------------------------------------------------
# The lexer and the parser.

NETLIST_ALPHABET = st.sampled_from(list("abcdefghijklmnopqrstuvwxyzRCLVIDSMTGW0123456789 .,-+*/^()=<>:%#\"\n\t")
                                   + ["µ", "Ω", "°", "\x1b", "\x00", "\r", "\u2028", "\ufeff", "é"])
KEYWORDS = ["let", "circuit", "simulate", "record", "measure", "check", "within", "of", "dc", "transient",
            "resistor", "capacitor", "inductor", "voltage-source", "current-source", "diode", "switch", "choke",
            "transformer", "dc-machine", "inertia", "gear", "load", "R1", "C1", "L1", "V1", "a", "b", "gnd",
            "frame", "->", "=", "(", ")", ",", "until=", "step=", "v(a)", "i(R1)", "max(", "1 ms", "10 V",
            "pwm(", "frequency=", "duty=", "\n", "\n ", "#", "block", "end", "parameter", "in", "use"]


@budget(120)
@given(st.text(NETLIST_ALPHABET, max_size=200))
def test_random_text(text):
    survives(text)


@budget(120)
@given(st.lists(st.sampled_from(KEYWORDS + NUMBERS + UNITS), max_size=40),
       st.lists(st.sampled_from([" ", " ", "", "\n"]), min_size=40, max_size=40))
def test_token_soup(tokens, gaps):
    survives("".join(t + g for t, g in zip(tokens, gaps)))


# --------------------------------------------------------------------------
# Units and expressions.


@budget(150)
@given(st.one_of(quantity, st.text(max_size=30)))
def test_quantities(text):
    with time_bound(repr(text)):
        try:
            q = parse_quantity(text)
        except UnitError:
            return
        import math

        assert math.isfinite(q.value), text


@budget(150)
@given(expression, expression)
def test_expressions(x, y):
    survives(f"let x = {x}\nlet y = {y}\nlet z = x * y + y\n")


# --------------------------------------------------------------------------
# Element arguments and a short run.

BASE = "voltage-source V1 a -> gnd 10 V\nresistor R0 a -> b 1 kohm\nresistor Rg b -> gnd 1 kohm\n"
ELEMENTS = {
    "resistor": ["resistor R1 a -> b {ohm}"],
    "capacitor": ["capacitor C1 b -> gnd {F} initial={V}"],
    "inductor": ["inductor L1 b -> gnd {H} resistance={ohm} initial={A}"],
    "pwm": ["voltage-source V2 c -> gnd pwm(high={V}, frequency={Hz}, duty={%}, rise={s}, fall={s}, delay={s})",
            "resistor R2 c -> gnd 1 ohm"],
    "sine": ["voltage-source V2 c -> gnd sine(amplitude={V}, frequency={Hz}, offset={V}, phase={rad}, delay={s})",
             "resistor R2 c -> gnd 1 ohm"],
    "step": ["current-source I2 gnd -> b step(from={A}, to={A}, at={s}, rise={s})"],
    "diode": ["diode D1 a -> b saturation-current={A} ideality={} resistance={ohm} capacitance={F} "
              "breakdown={V} temperature={K}"],
    "pwm switch": ["switch S1 b -> gnd on={ohm} off={ohm} gate=pwm(frequency={Hz}, duty={%}, delay={s})"],
    "compare switch": ["switch S1 b -> gnd gate=v(a) > {V} hysteresis={V}"],
    "choke": ["choke L2 b -> gnd {H} saturation-current={A} saturated-inductance={H} saturation-drop={} "
              "resistance={ohm}"],
    "transformer": ["transformer T1 a -> gnd, c -> gnd ratio={} magnetising={H} leakage={H}",
                    "resistor R2 c -> gnd {ohm}"],
    "solenoid": ["solenoid L3 b -> gnd turns={} diameter={m} length={m} permeability={}"],
    "motor": ["dc-machine M1 a -> gnd shaft=w resistance={ohm} inductance={H} constant={V*s/rad} brush-drop={V}",
              "inertia J1 w {kg*m^2}", "friction B1 w -> frame {N*m*s/rad}", "load T1 w torque={N*m} fan={kg*m^2}"],
    "gear": ["speed-source W1 w {rad/s}", "gear G1 w -> x {}", "inertia J2 x {kg*m^2}",
             "load T2 x fan-torque={N*m} fan-speed={rad/s}"],
    "generator": ["coil-generator G1 c -> gnd shaft=w turns={} field={T} area={m^2}", "speed-source W1 w {rpm}",
                  "resistor R2 c -> gnd 10 ohm"],
}
_SLOT = re.compile(r"\{([^}]*)\}")
#: A short run: a few hundred steps at most, whatever the arguments ask for.
SHORT_RUN = "simulate dc\nsimulate transient until=1 ms step-limit=300 edge-limit=300 point-limit=1000\n"


@st.composite
def element_circuit(draw):
    lines = draw(st.sampled_from(sorted(ELEMENTS)))
    text = "\n".join(ELEMENTS[lines])
    filled = _SLOT.sub(lambda m: "\x00" + m.group(1) + "\x00", text)
    parts = filled.split("\x00")
    for k in range(1, len(parts), 2):
        parts[k] = draw(value(parts[k]))
    return BASE + "".join(parts) + "\n" + SHORT_RUN


@budget(80)
@given(element_circuit())
def test_element_arguments_and_a_short_run(text):
    survives(text, run=True)


@budget(60)
@given(st.dictionaries(st.sampled_from(["until", "step", "tolerance", "voltage-tolerance", "current-tolerance",
                                        "max-step", "min-step", "sample", "method", "start"]),
                       st.one_of(quantity, st.sampled_from(["trapezoidal", "bdf2", "rest", "dc", "euler"])),
                       max_size=5))
def test_transient_settings(options):
    options.setdefault("until", "1 ms")
    line = " ".join(f"{k}={v}" for k, v in options.items())
    text = (BASE + "inductor L1 b -> gnd 1 mH\n"
            f"simulate transient {line} step-limit=300 edge-limit=300 point-limit=1000\n")
    survives(text, run=True)


# --------------------------------------------------------------------------
# Measure and check lines on a short run.

MEASURES = ["max", "min", "peak", "mean", "rms", "final", "at", "crossing", "settling", "overshoot", "integral",
            "ripple", "undefined"]
SIGNALS = ["v(b)", "i(C1)", "p(R1)", "v(a, b)", "v(nowhere)", "i(R1) * v(b)"]
RC = ("voltage-source V1 a -> gnd step(to=10 V, at=0.1 ms)\nresistor R1 a -> b 1 kohm\n"
      "capacitor C1 b -> gnd 100 nF\nsimulate transient until=1 ms step-limit=300 point-limit=1000\n")


@st.composite
def measure_line(draw):
    func = draw(st.sampled_from(MEASURES))
    args = [draw(st.sampled_from(SIGNALS))]
    args += draw(st.lists(st.one_of(quantity, st.builds(lambda k, q: f"{k}={q}", st.sampled_from(
        ["from", "to", "band", "level", "direction", "after"]), quantity)), max_size=3))
    call = f"{func}({', '.join(args)})"
    tail = draw(st.sampled_from(["", " * 2", " / 0 V", " ^ 2", " - 1e300 V"]))
    if draw(st.booleans()):
        return f"measure m = {call}{tail}"
    return f"check {call}{tail} {draw(st.sampled_from(['<', '>', '<=']))} {draw(quantity)}"


@budget(40)
@given(st.lists(measure_line(), min_size=1, max_size=3))
def test_measure_and_check_lines(lines):
    from mna.measure import run_and_check

    lines = [line.replace("measure m =", f"measure m{k} =") for k, line in enumerate(lines)]  # distinct names
    text = RC + "\n".join(lines) + "\n"
    with time_bound(text):
        try:
            run_and_check(mna.parse(text, "fuzz.mna"))
        except MnaError:
            pass


# --------------------------------------------------------------------------
# Mutations of the example circuits (parsed and checked, not run: they are long).

EXAMPLES = sorted((Path(__file__).resolve().parent.parent / "circuits").glob("*.mna"))
_NUMBER = re.compile(r"(?<![\w.])\d+(?:\.\d+)?(?:e-?\d+)?")


@st.composite
def mutated_example(draw):
    path = draw(st.sampled_from(EXAMPLES))
    text = path.read_text(encoding="utf-8")
    how = draw(st.sampled_from(["number", "delete", "insert", "duplicate"]))
    if how == "number":
        spots = list(_NUMBER.finditer(text))
        if spots:
            m = draw(st.sampled_from(spots))
            text = text[:m.start()] + draw(st.sampled_from(NUMBERS)) + text[m.end():]
    elif how == "delete" and text:
        i = draw(st.integers(0, len(text) - 1))
        text = text[:i] + text[i + draw(st.integers(1, 20)):]
    elif how == "insert":
        i = draw(st.integers(0, len(text)))
        text = text[:i] + draw(st.text(NETLIST_ALPHABET, min_size=1, max_size=10)) + text[i:]
    else:
        lines = text.split("\n")
        i = draw(st.integers(0, len(lines) - 1))
        lines.insert(i, lines[i])
        text = "\n".join(lines)
    return str(path), text


@pytest.mark.skipif(not EXAMPLES, reason="no example circuits")
@budget(60)
@given(mutated_example())
def test_mutated_example_circuits(example):
    path, text = example
    with time_bound(path):
        try:
            mna.parse(text, path)
        except MnaError:
            pass


def test_the_time_bound_stops_a_runaway_input():
    # The bound itself works: a loop in Python is interrupted.
    with pytest.raises(InputTookTooLong):
        global SECONDS
        saved, SECONDS = SECONDS, 0.2
        try:
            with time_bound("a loop"):
                while True:
                    pass
        finally:
            SECONDS = saved


if __name__ == "__main__":  # pragma: no cover
    sys.exit(pytest.main([__file__, "-q"]))
