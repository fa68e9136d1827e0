"""wellwright physics: pure numerics for resonant tunneling diode stacks.

Data flow: stack file -> :mod:`physics.stack` (validated :class:`Stack`,
:class:`LayerTable`) -> :mod:`physics.bands` (band profile at each bias) ->
:mod:`physics.transmission` (T(E)) -> :mod:`physics.current` (Tsu-Esaki J)
-> :mod:`physics.iv` (sweep and figures of merit). numpy and scipy only.
"""

from .bands import Profile, linear_profile
from .current import EnergyGrid, current_density_a_cm2
from .electrostatics import ElectrostaticsConvergenceError, self_consistent_profile
from .errors import InputError
from .iv import METRIC_NAMES, IVCurves, stack_iv, sweep, sweep_hysteresis
from .resonances import Resonances, find_resonances
from .stack import LayerTable, Stack, load_stack, parse_stack
from .transmission import transmission

__all__ = [
    "ElectrostaticsConvergenceError",
    "EnergyGrid",
    "IVCurves",
    "InputError",
    "LayerTable",
    "METRIC_NAMES",
    "Profile",
    "Resonances",
    "Stack",
    "current_density_a_cm2",
    "find_resonances",
    "linear_profile",
    "load_stack",
    "parse_stack",
    "self_consistent_profile",
    "stack_iv",
    "sweep",
    "sweep_hysteresis",
    "transmission",
]
