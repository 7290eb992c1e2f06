"""Solve stage: one factorisation, one back-substitution per conductor.

Unknowns are the free DOFs plus one potential per floating conductor (all of its DOFs share it).
The unit solutions U[:, i] (fixed conductor i at 1 V, the other fixed ones at 0 V, floating ones
uncharged) and W[:, k] (every fixed conductor at 0 V, floating conductor k carrying 1 C/m) give
the case's potential by superposition and the Maxwell capacitance matrix, so N conductors cost one
factorisation and N cheap solves.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import connected_components

from .errors import CaseFileError, SolverError
from .problem import AssembledProblem, conductor_indicator

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Solution:
    """Potential (V) at every DOF for the case, with the unit solutions it is built from."""

    problem: AssembledProblem
    potential: np.ndarray  # (ndofs,)
    unit_potentials: np.ndarray  # (ndofs, n fixed conductors): fixed conductor i at 1 V
    unit_charges: np.ndarray  # (ndofs, n floating conductors): floating conductor k with 1 C/m
    floating_potentials: np.ndarray  # V, one per floating conductor, for the case
    relative_residual: float


class FactorisedSystem:
    """The reduced system T^T K T over free DOFs and floating potentials, factorised once.

    ``solve(lifts, charges)`` returns full DOF vectors for boundary data ``lifts`` (ndofs, k), zero
    off the fixed conductors, and net charges ``charges`` (n floating, k) of the floating conductors.
    """

    def __init__(self, problem: AssembledProblem):
        self.problem = problem
        free = problem.free_dofs
        floating = problem.floating
        n_free = free.size
        rows = np.concatenate([free] + [c.dofs for c in floating])
        cols = np.concatenate([np.arange(n_free)] + [np.full(c.dofs.size, n_free + k) for k, c in enumerate(floating)])
        self._T = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(problem.ndofs, n_free + len(floating)))
        if self._T.shape[1] == 0:
            raise SolverError("no free degrees of freedom: every node is on an electrode; refine the mesh")
        self._K_T = (problem.stiffness @ self._T).tocsr()
        reduced = (self._T.T @ self._K_T).tocsc()
        self._n = reduced.shape[0]
        self._check_determined(reduced, n_free)
        try:
            # K is symmetric positive definite: symmetric ordering, no pivoting (10x faster than defaults)
            self._lu = spla.splu(reduced, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                                 options={"SymmetricMode": True})
        except RuntimeError as exc:
            raise SolverError(f"the system is singular ({exc}); {_SINGULAR_HINT}") from None

    def _check_determined(self, reduced: sp.csc_matrix, n_free: int) -> None:
        """Each connected part of the unknowns must couple to a fixed potential, or its potential is undefined.

        (Without pivoting the factorisation would not notice, and return a meaningless potential.)
        """
        problem = self.problem
        fixed = conductor_indicator(problem, problem.fixed).sum(axis=1)
        coupled = (self._T.T @ (abs(problem.stiffness) @ fixed)) > 0
        _, part = connected_components(reduced, directed=False)
        anchored = np.zeros(part.max() + 1, dtype=bool)
        anchored[part[coupled]] = True
        loose = np.flatnonzero(~anchored[part])
        if loose.size:
            first = loose[0]
            if first >= n_free:
                name = problem.floating[first - n_free].name
                raise SolverError(f"floating electrode {name!r} and the insulation around it touch no electrode with "
                                  "a fixed potential, so their potential is undefined; connect that insulation to "
                                  "the rest of the section, or ground the outer boundary")
            x, y = problem.basis.doflocs[:, problem.free_dofs[first]]
            raise SolverError(
                f"the insulation near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm touches no electrode with a fixed potential and "
                "only insulated boundaries, so its potential is undefined; connect it to an electrode, fragment it "
                "with its neighbours, or ground the outer boundary"
            )

    def __repr__(self) -> str:
        return f"<FactorisedSystem {self._n} unknowns, LU nnz {self._lu.L.nnz + self._lu.U.nnz}>"

    def solve(self, lifts: np.ndarray, charges: np.ndarray) -> np.ndarray:
        rhs = -(self._T.T @ (self.problem.stiffness @ lifts))
        rhs[self._n - charges.shape[0]:] += charges
        reduced = self._lu.solve(np.asarray(rhs))
        out = lifts + self._T @ reduced
        if not np.all(np.isfinite(out)):
            raise SolverError(f"the solve produced non-finite potentials; {_SINGULAR_HINT}")
        return out


_SINGULAR_HINT = (
    "some dielectric region touches no electrode with a fixed potential and the outer boundary is "
    "insulated, so its potential is undefined: ground the outer boundary or connect the region to an electrode"
)


def solve(problem: AssembledProblem) -> Solution:
    """Unit solutions for every conductor, and the case's potential as their superposition."""
    fixed, floating = problem.fixed, problem.floating
    if len({c.potential for c in fixed}) < 2 and not any(c.charge for c in floating):
        level = fixed[0].potential if fixed else 0.0
        raise CaseFileError(
            f"every electrode is at {level:g} V and no floating conductor carries charge: there is no field to "
            "compute; give the electrodes different potentials (the outer boundary, if grounded, is at 0 V)"
        )
    system = FactorisedSystem(problem)
    n = problem.ndofs
    lifts = np.zeros((n, len(fixed) + len(floating)))
    lifts[:, :len(fixed)] = conductor_indicator(problem, fixed)
    charges = np.zeros((len(floating), lifts.shape[1]))
    charges[:, len(fixed):] = np.eye(len(floating))
    both = system.solve(lifts, charges)
    unit, per_charge = both[:, :len(fixed)], both[:, len(fixed):]
    potentials = np.array([c.potential for c in fixed])
    net_charges = np.array([c.charge for c in floating])
    u = unit @ potentials + per_charge @ net_charges
    floating_potentials = np.array([u[c.dofs[0]] for c in floating])

    residual = system._T.T @ (problem.stiffness @ u)
    residual[residual.size - len(floating):] -= net_charges
    scale = abs(problem.stiffness).sum() * max(np.abs(u).max(), 1.0) / n
    relative = float(np.abs(residual).max() / scale) if residual.size else 0.0
    if relative > 1e-8:
        raise SolverError(f"the direct solve left a relative residual of {relative:.2e}; the system is ill-conditioned")
    log.debug("%r, residual %.2e", system, relative)
    return Solution(problem, u, unit, per_charge, floating_potentials, relative)
