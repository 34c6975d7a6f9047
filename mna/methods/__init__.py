"""Integration methods, one class each, behind the stepper protocol of :mod:`.base`."""

from .backward_euler import BackwardEuler
from .base import METHODS, DenseOutput, Problem, Step, Stepper, StepperDone, get_method
from .bdf2 import BDF2
from .companion import CompanionStepper
from .exact import ExactStepper, NotExact
from .radau import Radau
from .trapezoidal import Trapezoidal

__all__ = ["METHODS", "BDF2", "BackwardEuler", "CompanionStepper", "DenseOutput", "ExactStepper", "NotExact", "Problem", "Radau",
           "Step", "Stepper", "StepperDone", "Trapezoidal", "get_method"]
