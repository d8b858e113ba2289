"""Channel networks and their sparse hydraulic solution.

>>> from chipflow.network import Network, solve
>>> from chipflow.physics.fluid import water
>>> net = Network.from_arrays([0, 1], [1, 2], 200e-6, 50e-6, [5e-3, 5e-3])
>>> sol = solve(net, water(), pressures={0: 951.2, 2: 0.0})
>>> round(float(sol.pressure[1]), 1)
475.6
"""

from chipflow.network.model import Network, NetworkBuilder, NodeKey
from chipflow.network.solver import PortFlows, ReducedSystem, Solution, reduced_system, solve
from chipflow.network.summary import GenerationRow, generation_rows
from chipflow.network.supply import (
    STANDARD_GRAVITY,
    Supply,
    atmosphere,
    boundary_conditions,
    pressure_controller,
    reservoir,
    syringe_pump,
)

__all__ = [
    "Network",
    "NetworkBuilder",
    "NodeKey",
    "Solution",
    "PortFlows",
    "ReducedSystem",
    "reduced_system",
    "solve",
    "GenerationRow",
    "generation_rows",
    "STANDARD_GRAVITY",
    "Supply",
    "atmosphere",
    "boundary_conditions",
    "pressure_controller",
    "reservoir",
    "syringe_pump",
]
