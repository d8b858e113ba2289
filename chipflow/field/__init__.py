"""Field solve of a mask: 2D depth-averaged flow on the drawn polygons.

:func:`solve_field` meshes :class:`FieldRegion` polygons (one depth each) less the
:class:`FieldPort` holes and solves depth-averaged Stokes flow with a Brinkman friction term,
calibrated so that a straight channel has the exact duct resistance. The
:class:`FieldSolution` holds the mesh, pressure, depth-averaged velocity, floor shear and the
flow through each port. scikit-fem and triangle are imported only when a field is solved.
"""

from chipflow.field.model import FieldMesh, FieldPort, FieldRegion, FieldSolution
from chipflow.field.solve import solve_field, solve_on_mesh

__all__ = [
    "FieldMesh",
    "FieldPort",
    "FieldRegion",
    "FieldSolution",
    "solve_field",
    "solve_on_mesh",
]
