"""Taylor-Hood P2-P1 matrices of the depth-averaged Brinkman-Stokes problem, in numpy.

Quadratic velocity on the vertices and edge midpoints, linear pressure on the vertices;
coefficients constant per triangle. Element matrices come from reference integrals of the
barycentric coordinates, so the whole assembly is a few array operations over the triangles.

Velocity degrees of freedom are numbered component-major: ``c * n_nodes + node`` with the
vertices first (``0 .. n_points - 1``) and the edges after them.

References
----------
.. [1] C. Taylor and P. Hood, "A numerical solution of the Navier-Stokes equations using the
   finite element technique", Computers & Fluids 1 (1973) 73-100.
.. [2] G. Strang and G. Fix, *An Analysis of the Finite Element Method*, Prentice-Hall, 1973
   (the six-point degree-4 triangle quadrature).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np

__all__ = [
    "P2Space",
    "p2_space",
    "assemble_parts",
    "assemble_system",
    "pressure_parts",
    "p2_values",
]

# six-point rule exact to degree 4 on a triangle (Strang and Fix 1973); weights sum to 1
_A1, _B1, _W1 = 0.445948490915965, 0.108103018168070, 0.223381589678011
_A2, _B2, _W2 = 0.091576213509771, 0.816847572980459, 0.109951743655322
_QL = np.array(
    [
        [_B1, _A1, _A1],
        [_A1, _B1, _A1],
        [_A1, _A1, _B1],
        [_B2, _A2, _A2],
        [_A2, _B2, _A2],
        [_A2, _A2, _B2],
    ]
)
_QW = np.array([_W1] * 3 + [_W2] * 3)
_EDGES = ((0, 1), (1, 2), (2, 0))


def p2_values(lam: np.ndarray) -> np.ndarray:
    """The six quadratic shape functions at barycentric points ``lam`` (..., 3) -> (..., 6)."""
    v = lam * (2.0 * lam - 1.0)
    e = np.stack([4.0 * lam[..., i] * lam[..., j] for i, j in _EDGES], axis=-1)
    return np.concatenate([v, e], axis=-1)


def _grad_coeffs(lam: np.ndarray) -> np.ndarray:
    """``c[a, i]`` with grad phi_a = sum_i c[a, i] grad lambda_i, at one point (3,) -> (6, 3)."""
    c = np.zeros((6, 3))
    for i in range(3):
        c[i, i] = 4.0 * lam[i] - 1.0
    for k, (i, j) in enumerate(_EDGES):
        c[3 + k, i] = 4.0 * lam[j]
        c[3 + k, j] = 4.0 * lam[i]
    return c


@cache
def _reference() -> tuple[np.ndarray, np.ndarray]:
    """Reference integrals over unit area: stiffness parts T[i, j] (6x6) and mass (6x6)."""
    t = np.zeros((3, 3, 6, 6))
    mass = np.zeros((6, 6))
    for lam, w in zip(_QL, _QW, strict=True):
        c = _grad_coeffs(lam)
        t += w * np.einsum("ai,bj->ijab", c, c)
        phi = p2_values(lam)
        mass += w * np.outer(phi, phi)
    return t, mass


@dataclass(frozen=True)
class P2Space:
    """Node numbering of the quadratic elements on a triangle mesh.

    Attributes
    ----------
    nodes : numpy.ndarray
        (n_triangles, 6) node of each local function: 3 vertices then edges 01, 12, 20.
    edges : numpy.ndarray
        (n_edges, 2) sorted vertex pairs; edge ``e`` is node ``n_points + e``.
    n_points, n_nodes : int
    """

    nodes: np.ndarray
    edges: np.ndarray
    n_points: int
    n_nodes: int

    def edge_nodes(self, pairs: np.ndarray) -> np.ndarray:
        """Nodes of the edges given as vertex pairs (n, 2), both vertices and midpoints."""
        if len(pairs) == 0:
            return np.zeros(0, dtype=np.int64)
        e = np.sort(pairs, axis=1)
        key = e[:, 0].astype(np.int64) * self.n_points + e[:, 1]
        keys = self.edges[:, 0].astype(np.int64) * self.n_points + self.edges[:, 1]
        pos = np.searchsorted(keys, key)
        return np.unique(np.concatenate([e.ravel(), self.n_points + pos]))


def p2_space(points: np.ndarray, triangles: np.ndarray) -> P2Space:
    """Number the vertices and edges of a triangle mesh."""
    local = np.stack([np.sort(triangles[:, [i, j]], axis=1) for i, j in _EDGES], axis=1)
    n = len(points)
    keys = local[..., 0].astype(np.int64) * n + local[..., 1]
    uniq, inv = np.unique(keys.ravel(), return_inverse=True)
    edges = np.column_stack([uniq // n, uniq % n])
    nodes = np.concatenate([triangles, n + inv.reshape(-1, 3)], axis=1)
    return P2Space(nodes, edges, n, n + len(edges))


def _geometry(points: np.ndarray, triangles: np.ndarray):
    p = points[triangles]
    j1, j2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
    det = j1[:, 0] * j2[:, 1] - j1[:, 1] * j2[:, 0]
    # gradients of lambda_1, lambda_2 are the rows of J^-1; lambda_0 = 1 - lambda_1 - lambda_2
    g1 = np.column_stack([j2[:, 1], -j2[:, 0]]) / det[:, None]
    g2 = np.column_stack([-j1[:, 1], j1[:, 0]]) / det[:, None]
    grads = np.stack([-(g1 + g2), g1, g2], axis=1)  # (n, 3, 2)
    return 0.5 * np.abs(det), grads


def assemble_parts(
    points: np.ndarray,
    triangles: np.ndarray,
    space: P2Space,
    depth: np.ndarray,
    lateral: np.ndarray,
    friction: np.ndarray,
    keep: np.ndarray | None = None,
):
    """The blocks of the weak form: the scalar velocity block ``A`` and the two divergence
    blocks ``B_x``, ``B_y`` (the saddle-point matrix is ``[[A, 0, Bx^T], [0, A, By^T],
    [Bx, By, 0]]``: both velocity components share ``A``).

    Parameters
    ----------
    points, triangles : numpy.ndarray
        The mesh.
    space : P2Space
    depth : numpy.ndarray
        Depth ``h`` per triangle [m].
    lateral : numpy.ndarray
        Lateral viscosity ``beta mu`` per triangle [Pa s].
    friction : numpy.ndarray
        ``k mu`` per triangle [Pa s/m^2].
    keep : numpy.ndarray of bool, optional
        The velocity nodes to keep (the free ones), numbered in their order; the others'
        rows and columns are never formed. All by default.

    Returns
    -------
    (scipy.sparse.csr_matrix, scipy.sparse.csr_matrix, scipy.sparse.csr_matrix)
        ``A`` (kept nodes square), ``B_x`` and ``B_y`` (``n_points`` x kept nodes).
    """
    from scipy import sparse

    t_ref, m_ref = _reference()
    area, grads = _geometry(points, triangles)
    npts = space.n_points
    if keep is None:
        keep = np.ones(space.n_nodes, bool)
    nn = int(keep.sum())
    number = np.where(keep, np.cumsum(keep) - 1, -1).astype(np.int32)
    nodes = number[space.nodes]  # -1: a node left out
    scalar = None
    # in chunks of triangles, so that the element arrays stay small beside the matrix
    step = 200_000
    for s in range(0, len(triangles), step):
        sl = slice(s, s + step)
        gg = np.einsum("nid,njd->nij", grads[sl], grads[sl])  # grad lambda_i . grad lambda_j
        stiff = np.einsum("nij,ijab->nab", gg, t_ref) * area[sl, None, None]
        local = (depth[sl] * lateral[sl])[:, None, None] * stiff
        local += (depth[sl] * friction[sl] * area[sl])[:, None, None] * m_ref
        rows = np.repeat(nodes[sl], 6, axis=1).ravel()
        cols = np.tile(nodes[sl], (1, 6)).ravel()
        on = (rows >= 0) & (cols >= 0)
        part = sparse.csr_matrix((local.ravel()[on], (rows[on], cols[on])), shape=(nn, nn))
        scalar = part if scalar is None else scalar + part
        del gg, stiff, local, rows, cols, on, part
    # B: int h phi_a d(lambda_k)/dx_d; int phi_a = 0 for vertices, area / 3 for edges, so
    # only the three edge nodes of each triangle enter
    weight = (depth * area / 3.0)[:, None, None]
    b_rows = np.repeat(triangles.astype(np.int32), 3, axis=1).ravel()
    b_cols = np.tile(nodes[:, 3:], (1, 3)).ravel()
    on = b_cols >= 0
    b_rows, b_cols = b_rows[on], b_cols[on]
    blocks = [
        sparse.csr_matrix(
            (
                (grads[:, :, d][:, :, None] * weight).repeat(3, axis=2).ravel()[on],
                (b_rows, b_cols),
            ),
            shape=(npts, nn),
        )
        for d in range(2)
    ]
    return scalar, blocks[0], blocks[1]


def assemble_system(
    points: np.ndarray,
    triangles: np.ndarray,
    space: P2Space,
    depth: np.ndarray,
    lateral: np.ndarray,
    friction: np.ndarray,
):
    """The matrix ``[[A, B^T], [B, 0]]`` of the weak form, velocity dofs first.

    Parameters as :func:`assemble_parts`.

    Returns
    -------
    scipy.sparse.csr_matrix
        Size ``2 n_nodes + n_points``.
    """
    from scipy import sparse

    a, bx, by = assemble_parts(points, triangles, space, depth, lateral, friction)
    return sparse.bmat([[a, None, bx.T], [None, a, by.T], [bx, by, None]], format="csr")


def pressure_parts(
    points: np.ndarray, triangles: np.ndarray, conductance: np.ndarray, weight: np.ndarray
):
    """Linear-element stiffness ``int c grad q . grad r`` and lumped mass ``int w q`` on the
    vertices, with ``c`` (``conductance``) and ``w`` (``weight``) constant per triangle.

    Returns
    -------
    (scipy.sparse.csr_matrix, numpy.ndarray)
        The stiffness matrix (``n_points`` square) and the lumped mass of each vertex.
    """
    from scipy import sparse

    area, grads = _geometry(points, triangles)
    local = np.einsum("nid,njd->nij", grads, grads) * (conductance * area)[:, None, None]
    rows = np.repeat(triangles, 3, axis=1).ravel()
    cols = np.tile(triangles, (1, 3)).ravel()
    n = len(points)
    stiff = sparse.csr_matrix((local.ravel(), (rows, cols)), shape=(n, n))
    lumped = np.bincount(triangles.ravel(), np.repeat(weight * area / 3.0, 3), minlength=n)
    return stiff, lumped
