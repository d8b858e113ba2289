"""Iterative solve of the field's saddle-point system: preconditioned MINRES.

The reduced system is symmetric and indefinite,

    [[A, 0, Bx^T], [0, A, By^T], [Bx, By, 0]] [ux, uy, p] = [fx, fy, 0],

with ``A`` the scalar velocity block (lateral viscosity plus Brinkman friction, weighted by
the depth) shared by both components. MINRES needs a symmetric positive definite
preconditioner; the block-diagonal one used here is

    P = diag(A~, A~, S~),

where ``A~^-1`` is one V-cycle of smoothed-aggregation algebraic multigrid on ``A`` (pyamg;
the friction term ``12 mu / h^2`` is a positive mass term, so ``A`` is well conditioned and
suits multigrid), and ``S~^-1`` approximates the inverse Schur complement
``S = B A^-1 B^T`` by the sum of its two limits (Cahouet and Chabard 1988):

    S~^-1 = K_p^-1 + M_p^-1,

with ``K_p`` the linear-element pressure Laplacian of the Hele-Shaw conductance
``h^3 / (12 mu)`` (the friction limit: ``S = B (k mu h M)^-1 B^T``, long pressure waves along
a channel) and ``M_p`` the lumped pressure mass weighted by ``h / (beta mu)`` (the viscous
limit, short waves). A pressure mass matrix alone misses the friction limit: its error grows
with the square of the channels' length over their depth, and so do the iterations. ``K_p^-1``
is one V-cycle of multigrid too. Both pieces are linear and symmetric, so the iteration count
does not grow with the mesh (about 60-90 at a relative residual of 1e-8 on the chips of the
benchmark).

Memory grows linearly: the blocks, the two multigrid hierarchies and nine vectors of MINRES.

References
----------
.. [1] C. C. Paige and M. A. Saunders, "Solution of sparse indefinite systems of linear
   equations", SIAM J. Numer. Anal. 12 (1975) 617-629.
.. [2] J. Cahouet and J.-P. Chabard, "Some fast 3D finite element solvers for the generalized
   Stokes problem", Int. J. Numer. Meth. Fluids 8 (1988) 869-895.
.. [3] H. C. Elman, D. J. Silvester and A. J. Wathen, *Finite Elements and Fast Iterative
   Solvers*, 2nd ed., Oxford University Press, 2014, ch. 4 (preconditioned MINRES, algorithm
   4.1) and ch. 9.
.. [4] N. Bell, L. N. Olson and J. Schroder, "PyAMG: Algebraic multigrid solvers in Python",
   J. Open Source Softw. 7 (2022) 4142.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from chipflow.errors import FieldError

__all__ = ["RTOL", "MAXITER", "minres", "BlockPreconditioner", "block_preconditioner"]

#: Relative residual at which MINRES stops, in the preconditioner's norm [-]. At 1e-8 the
#: chip resistance agrees with the direct solve to about 1e-10 and the inflow with the outflow
#: to about 1e-8 (measured on the demo by ``benchmarks/field.py``).
RTOL = 1e-8
#: Iterations after which the solve is declared not to converge [-].
MAXITER = 2000


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    """``a . b`` on this thread: BLAS threads spinning for one dot product cost more than
    they save on a shared machine."""
    return float(np.einsum("i,i->", a, b))


@dataclass
class MinresResult:
    """What :func:`minres` returns.

    Attributes
    ----------
    x : numpy.ndarray
        The solution.
    iterations : int
    residual : float
        Final residual in the preconditioner's norm, relative to the right-hand side's.
    """

    x: np.ndarray
    iterations: int
    residual: float


def minres(
    matvec: Callable[[np.ndarray], np.ndarray],
    b: np.ndarray,
    precondition: Callable[[np.ndarray], np.ndarray],
    *,
    rtol: float = RTOL,
    maxiter: int = MAXITER,
) -> MinresResult:
    """Preconditioned MINRES for a symmetric system (Elman, Silvester and Wathen, alg. 4.1).

    Stops when the residual in the norm of the (symmetric positive definite) preconditioner
    has fallen by ``rtol``; raises :class:`FieldError` when it has not after ``maxiter``
    iterations or when the preconditioner is not positive definite.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.array([[2.0, 1.0], [1.0, -3.0]])
    >>> r = minres(lambda v: a @ v, np.array([1.0, 2.0]), lambda v: v, rtol=1e-12)
    >>> print(np.round(a @ r.x, 10), r.iterations)
    [1. 2.] 2
    """
    n = b.size
    x = np.zeros(n)
    v_prev = np.zeros(n)
    v = np.array(b, float)
    z = precondition(v)
    gamma = float(np.sqrt(_dot(z, v)))
    if gamma == 0.0:
        return MinresResult(x, 0, 0.0)
    start = eta = gamma
    gamma_prev = 1.0
    s_prev = s = 0.0
    c_prev = c = 1.0
    w_prev = np.zeros(n)
    w = np.zeros(n)
    for it in range(1, maxiter + 1):
        z = z / gamma  # not in place: the preconditioner may return its argument
        az = matvec(z)
        delta = _dot(az, z)
        az -= (delta / gamma) * v
        az -= (gamma / gamma_prev) * v_prev
        v_prev, v = v, az
        z_next = precondition(v)
        square = _dot(z_next, v)
        if not square >= 0.0:
            raise FieldError(
                "the iterative field solve broke down (the preconditioner is not positive "
                "definite): solve this chip with the direct solver (solver='direct')"
            )
        gamma_next = float(np.sqrt(square))
        a0 = c * delta - c_prev * s * gamma
        a1 = float(np.hypot(a0, gamma_next))
        a2 = s * delta + c_prev * c * gamma
        a3 = s_prev * gamma
        c_next, s_next = a0 / a1, gamma_next / a1
        w_prev *= -a3
        w_prev -= a2 * w
        w_prev += z
        w_prev /= a1
        w_prev, w = w, w_prev
        x += (c_next * eta) * w
        eta = -s_next * eta
        if abs(eta) <= rtol * start:
            return MinresResult(x, it, abs(eta) / start)
        z = z_next
        gamma_prev, gamma = gamma, gamma_next
        s_prev, s = s, s_next
        c_prev, c = c, c_next
    raise FieldError(
        f"the iterative field solve did not converge in {maxiter} iterations (relative "
        f"residual {abs(eta) / start:.1e}, wanted {rtol:.0e}): check the mask for channels "
        "far thinner than deep, or solve it with the direct solver (solver='direct')"
    )


@dataclass(frozen=True)
class BlockPreconditioner:
    """``diag(A~, A~, S~)^-1`` of the reduced system (see the module's text).

    Attributes
    ----------
    velocity : scipy.sparse.linalg.LinearOperator
        One multigrid V-cycle on the scalar velocity block.
    laplacian : scipy.sparse.linalg.LinearOperator
        One multigrid V-cycle on the Hele-Shaw pressure Laplacian.
    inverse_mass : numpy.ndarray
        Inverse lumped, viscosity-weighted pressure mass of each free pressure node.
    n_velocity : int
        Free velocity nodes (per component).
    levels : int
        Levels of the velocity hierarchy.
    """

    velocity: object
    laplacian: object
    inverse_mass: np.ndarray
    n_velocity: int
    levels: int

    def __call__(self, r: np.ndarray) -> np.ndarray:
        n = self.n_velocity
        out = np.empty_like(r)
        out[:n] = self.velocity @ r[:n]
        out[n : 2 * n] = self.velocity @ r[n : 2 * n]
        rp = r[2 * n :]
        out[2 * n :] = self.laplacian @ rp
        out[2 * n :] += self.inverse_mass * rp
        return out


def block_preconditioner(a, laplacian, mass: np.ndarray) -> BlockPreconditioner:
    """Set up :class:`BlockPreconditioner` from the free blocks.

    Parameters
    ----------
    a : scipy.sparse.csr_matrix
        Scalar velocity block of the free nodes.
    laplacian : scipy.sparse.csr_matrix
        Hele-Shaw pressure Laplacian of the free pressure nodes.
    mass : numpy.ndarray
        Lumped viscosity-weighted pressure mass of the free pressure nodes.
    """
    import pyamg

    # the prolongators smoothed with row-sum weights (no spectral radius estimates), the
    # coarsest level factorised (no dense pseudo-inverse)
    options = {
        "symmetry": "symmetric",
        "max_coarse": 500,
        "smooth": ("jacobi", {"weighting": "local"}),
        "coarse_solver": "splu",
    }
    ml_a = pyamg.smoothed_aggregation_solver(a, **options)
    ml_p = pyamg.smoothed_aggregation_solver(laplacian, **options)
    return BlockPreconditioner(
        ml_a.aspreconditioner(cycle="V"),
        ml_p.aspreconditioner(cycle="V"),
        1.0 / mass,
        a.shape[0],
        len(ml_a.levels),
    )
