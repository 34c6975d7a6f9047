"""mna: a circuit solver for inductive power circuits.

Architecture (data flows one way; each arrow is one module):

    text --lark--> parse tree --> Netlist            mna.netlist
         --elaborate--> Circuit                      mna.circuit (+ mna.expressions, mna.units)
         --check--> topology                         mna.topology
         --compile--> System (sparse MNA)            mna.system (elements stamp through a Stamper)
         --analyse--> Waveforms / OperatingPoint     mna.analyses.dc, mna.analyses.transient
                                                     (mna.methods, mna.solver)
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

# The public names are imported on first use (PEP 562), so that the command
# line's --help does not pay for numpy, scipy and lark.
_EXPORTS = {
    "Block": "mna.blocks",
    "Circuit": "mna.circuit",
    "load": "mna.circuit",
    "parse": "mna.circuit",
    "Arg": "mna.elements.base",
    "Branch": "mna.elements.base",
    "Element": "mna.elements.base",
    "NonlinearBatch": "mna.elements.base",
    "Port": "mna.elements.base",
    "Unknown": "mna.elements.base",
    "register": "mna.elements.registry",
    "InputError": "mna.errors",
    "MnaError": "mna.errors",
    "SimulationError": "mna.errors",
    "TopologyError": "mna.errors",
    "OperatingPoint": "mna.results",
    "sweep": "mna.studies",
    "monte_carlo": "mna.studies",
    "corners": "mna.studies",
    "run_study": "mna.studies",
    "Waveforms": "mna.results",
    "FrequencyResponse": "mna.results",
}


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'mna' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(list(globals()) + list(_EXPORTS))


__version__ = "0.1.0"

__all__ = [
    "Arg",
    "Block",
    "Branch",
    "Circuit",
    "Element",
    "FrequencyResponse",
    "InputError",
    "MnaError",
    "NonlinearBatch",
    "OperatingPoint",
    "Port",
    "SimulationError",
    "TopologyError",
    "Unknown",
    "Waveforms",
    "corners",
    "load",
    "monte_carlo",
    "parse",
    "register",
    "run_study",
    "sweep",
]
