"""The engineering core: pure numpy/scipy, no Django, vectorised over fleets.

The names below are the package's fixed public entry points (outside checks call
them); everything else lives in the submodules.
"""

from .capacitor import capacitance_from_current
from .motor import (
    max_starting_torque_capacitance_uf,
    quadrature_capacitance_uf,
    single_winding_running,
    standstill,
)

__all__ = [
    "capacitance_from_current",
    "max_starting_torque_capacitance_uf",
    "quadrature_capacitance_uf",
    "single_winding_running",
    "standstill",
]
