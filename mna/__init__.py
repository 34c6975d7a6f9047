"""mna: a circuit solver for inductive power circuits.

Architecture (data flows one way; each arrow is one module):

    text --lark--> parse tree --> Netlist            mna.netlist
         --elaborate--> Circuit                      mna.circuit (+ mna.expressions, mna.units)
         --check--> topology                         mna.topology
         --compile--> System (sparse MNA)            mna.system (elements stamp through a Stamper)
         --analyse--> Waveforms / OperatingPoint     mna.analyses.dc, mna.analyses.transient
                                                     (mna.integrate, mna.solver)
         --write--> CSV, JSON, PNG                   mna.results, mna.report, mna.cli

Element kinds are plugins (entry-point group ``mna.elements``), see
:mod:`mna.elements.base`. All errors derive from :class:`mna.MnaError`.

Embedding::

    import mna
    circuit = mna.load("circuits/solenoid_valve.mna")
    op = circuit.dc()
    res = circuit.transient(until=20e-3, step=1e-6)
    res.time, res["i(Lcoil)"]
"""

from .circuit import Circuit, load, parse
from .elements.base import Arg, Branch, Element, NonlinearBatch, Port, Unknown
from .elements.registry import register
from .errors import InputError, MnaError, SimulationError, TopologyError
from .results import OperatingPoint, Waveforms

__version__ = "0.1.0"

__all__ = [
    "Arg",
    "Branch",
    "Circuit",
    "Element",
    "InputError",
    "MnaError",
    "NonlinearBatch",
    "OperatingPoint",
    "Port",
    "SimulationError",
    "TopologyError",
    "Unknown",
    "Waveforms",
    "load",
    "parse",
    "register",
]
