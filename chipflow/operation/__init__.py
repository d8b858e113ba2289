"""Time-varying operation: compliance, wall deformation, pulsatile supplies, reservoirs, rockers.

Modules: ``compliance`` (soft roofs, tubing, trapped air, inertance, Womersley number),
``deformation`` (steady bulging of a soft roof), ``waveform`` (periodic supplies as
harmonics), ``frequency`` (complex nodal solve per harmonic), ``reservoirs`` (draining and
rocking ODEs), ``model`` (what the design file says), ``modes`` (each mode's flows over
time), ``run`` (one call for the build).
"""

from chipflow.operation.model import OperationSpec, Pulsatile, Rocker, TubingWall, Walls
from chipflow.operation.run import Operation, operate, steady_boundary
from chipflow.operation.waveform import Waveform

__all__ = [
    "Operation",
    "OperationSpec",
    "Pulsatile",
    "Rocker",
    "TubingWall",
    "Walls",
    "Waveform",
    "operate",
    "steady_boundary",
]
