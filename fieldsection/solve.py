"""Solve stage: one factorisation (or one preconditioner), one solve per conductor.

Unknowns are the free DOFs plus one potential per floating conductor (all of its DOFs share it).
The unit solutions U[:, i] (fixed conductor i at 1 V, the other fixed ones at 0 V, floating ones
uncharged) and W[:, k] (every fixed conductor at 0 V, floating conductor k carrying 1 C/m) give
the case's potential by superposition and the Maxwell capacitance matrix, so N conductors cost one
factorisation and N - 1 cheap solves (the unit solutions of all fixed conductors sum to 1).

The linear solver is chosen by ``method`` (the case's ``[solver] method``):

- ``"direct"``: a sparse factorisation reused for every right-hand side: PARDISO (MKL, through
  the optional ``pypardiso`` package, symmetric positive definite mode on the upper triangle) if
  installed, else scipy's SuperLU (with a symmetric ordering up to ``ITERATIVE_ABOVE`` unknowns:
  minimum degree on A^T + A is fast on small systems and takes minutes at a million);
- ``"iterative"``: conjugate gradients preconditioned by classical (Ruge-Stueben) algebraic
  multigrid (``pyamg``) after a reverse Cuthill-McKee renumbering; one preconditioner, one CG run
  per right-hand side, each checked for convergence;
- ``"auto"`` (default): SuperLU up to ``SMALL_SYSTEM`` unknowns; above, PARDISO if installed,
  otherwise SuperLU up to ``ITERATIVE_ABOVE`` unknowns and AMG-CG beyond (SuperLU's fill-in grows
  fast: about 3 GiB and 30 s at a million unknowns).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import connected_components

from .case import SOLVER_METHODS
from .errors import CaseFileError, SolverError
from .problem import AssembledProblem, conductor_indicator, dof_location

log = logging.getLogger(__name__)

#: unknowns up to which "auto" uses SuperLU (PARDISO's set-up, ~25 ms, costs more on tiny systems; measured
#: on the benchmark busbar: PARDISO 0.03 s vs SuperLU 0.05 s at 9e3 unknowns, 0.19 vs 0.36 s at 4e4)
SMALL_SYSTEM = 5_000
#: unknowns above which "auto" prefers AMG-CG to SuperLU (when PARDISO is not installed)
ITERATIVE_ABOVE = 200_000
#: relative residual ||b - A x|| / ||b|| at which CG stops
CG_TOLERANCE = 1e-10
#: CG iterations allowed per right-hand side (AMG-preconditioned CG needs a few tens)
CG_MAX_ITERATIONS = 1000


class Handoff:
    """The reduced matrix on its way to a solver backend, which takes it over: the caller keeps no reference
    while the backend factorises (the backends convert it to the format they need, ~80 MB at 1e6 unknowns).
    A backend whose package is missing raises ImportError before taking it, so the next one can."""

    def __init__(self, matrix: sp.csr_matrix):
        self._matrix = matrix

    def take(self) -> sp.csr_matrix:
        matrix, self._matrix = self._matrix, None
        if matrix is None:
            raise RuntimeError("the reduced matrix was already taken by another solver backend")
        return matrix


class _SuperLU:
    name = "SuperLU"

    def __init__(self, handoff: Handoff):
        matrix = handoff.take().tocsc()
        try:
            if matrix.shape[0] <= ITERATIVE_ABOVE:
                # K is symmetric positive definite: symmetric ordering, no pivoting (faster than the defaults)
                self._lu = spla.splu(matrix, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                                     options={"SymmetricMode": True})
            else:  # minimum degree on A^T + A takes many minutes at a million unknowns: scipy's defaults
                self._lu = spla.splu(matrix)
        except RuntimeError as exc:
            raise SolverError(f"the system is singular ({exc}); {_SINGULAR_HINT}") from None
        self.detail = f"LU nnz {self._lu.L.nnz + self._lu.U.nnz}"

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        return self._lu.solve(rhs)

    def close(self) -> None:
        self._lu = None


#: PARDISO's iparm (1-based number, value), see _Pardiso
PARDISO_SETTINGS = ((1, 1), (2, 3), (10, 8), (18, -1), (24, 1))


class _Pardiso:
    name = "PARDISO"

    def __init__(self, handoff: Handoff):
        _point_pypardiso_at_mkl()
        import pypardiso  # optional: pip install "fieldsection[fast]"

        # a solver object of our own: pypardiso's module-level spsolve keeps a global factorisation
        # real symmetric positive definite; size_limit_storage=0: pypardiso keeps a hash of the matrix to
        # recognise it, not a copy (~50 MB at a million unknowns)
        self._solver = pypardiso.PyPardisoSolver(mtype=2, size_limit_storage=0)
        # With MKL's defaults (iparm(1) = 0) the solve phase took 3-5x as long here (1e6 unknowns, 4 columns).
        # iparm(1) = 1 means every entry is ours, unset ones 0 (1-based numbers): nested dissection with
        # OpenMP, pivot perturbation 1e-8, fill-in reported, two-level parallel factorisation (measured:
        # the 4-column solve twice as fast again). The residual stays ~1e-11 and the caller checks it.
        for number, value in PARDISO_SETTINGS:
            self._solver.set_iparm(number, value)
        self._upper = sp.triu(handoff.take(), format="csr")  # the full matrix is freed here, before factorising
        self._upper.sort_indices()
        try:
            self._solver.factorize(self._upper)
        except Exception as exc:  # PyPardisoError carries MKL's error code
            raise SolverError(f"PARDISO could not factorise the system ({exc}); {_SINGULAR_HINT}") from None
        self.detail = "MKL, symmetric positive definite"

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        return self._solver.solve(self._upper, np.asfortranarray(rhs))

    def close(self) -> None:
        # everything=True also frees MKL's working memory, not only the factors: ~0.3 GB more at a million
        # unknowns, which would otherwise stay resident under the later stages and the report
        self._solver.free_memory(everything=True)


class _AmgCg:
    name = "AMG-CG"

    def __init__(self, handoff: Handoff):
        import pyamg
        from scipy.sparse.csgraph import reverse_cuthill_mckee

        csr = handoff.take().tocsr()
        # gmsh's numbering scatters neighbours; RCM makes mat-vecs and the multigrid 2-4x faster
        self._order = reverse_cuthill_mckee(csr, symmetric_mode=True)
        self._matrix = csr[self._order][:, self._order]
        hierarchy = pyamg.ruge_stuben_solver(self._matrix)
        self._preconditioner = hierarchy.aspreconditioner(cycle="V")
        self.detail = f"{len(hierarchy.levels)} levels, operator complexity {hierarchy.operator_complexity():.2f}"

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        out = np.zeros_like(rhs)
        for column in range(rhs.shape[1]):  # one CG run per conductor, all with the same preconditioner
            b = rhs[self._order, column]
            norm = np.linalg.norm(b)
            if norm == 0.0:
                continue
            count = [0]

            def tick(_):
                count[0] += 1

            x, info = spla.cg(self._matrix, b, rtol=CG_TOLERANCE, atol=0.0, maxiter=CG_MAX_ITERATIONS,
                              M=self._preconditioner, callback=tick)
            achieved = np.linalg.norm(b - self._matrix @ x) / norm
            if info != 0 or not achieved <= 10 * CG_TOLERANCE:
                raise SolverError(
                    f"AMG-preconditioned CG did not converge: relative residual {achieved:.1e} after {count[0]} "
                    f"iterations (wanted {CG_TOLERANCE:.0e}); use [solver] method = \"direct\" for this case"
                )
            out[self._order, column] = x
        return out

    def close(self) -> None:
        self._preconditioner = None


def _point_pypardiso_at_mkl() -> None:
    """Name MKL's runtime library for pypardiso, which otherwise walks all of site-packages (~1 s)."""
    import os
    from importlib import metadata

    if "PYPARDISO_MKL_RT" in os.environ:
        return
    try:
        files = metadata.files("mkl") or []
    except metadata.PackageNotFoundError:
        return
    runtime = sorted((f for f in files if f.name.startswith("libmkl_rt.so")), key=lambda f: len(f.name))
    if runtime:
        os.environ["PYPARDISO_MKL_RT"] = str(runtime[0].locate())


_BACKENDS = {"PARDISO": _Pardiso, "SuperLU": _SuperLU, "AMG-CG": _AmgCg}


def solver_chain(method: str, unknowns: int) -> tuple[str, ...]:
    """Linear solvers to try, in order, for ``method`` and a system of ``unknowns``."""
    if method not in SOLVER_METHODS:
        raise CaseFileError(f"solver.method = {method!r}: use one of {', '.join(map(repr, SOLVER_METHODS))}")
    if method == "direct":
        return ("PARDISO", "SuperLU")
    if method == "iterative":
        return ("AMG-CG",)
    if unknowns <= SMALL_SYSTEM:
        return ("SuperLU",)
    if unknowns > ITERATIVE_ABOVE:
        return ("PARDISO", "AMG-CG", "SuperLU")
    return ("PARDISO", "SuperLU")


@dataclass(frozen=True)
class Solution:
    """Potential (V) at every DOF for the case, with the unit solutions it is built from."""

    problem: AssembledProblem
    potential: np.ndarray  # (ndofs,)
    unit_potentials: np.ndarray  # (ndofs, n fixed conductors): fixed conductor i at 1 V
    unit_charges: np.ndarray  # (ndofs, n floating conductors): floating conductor k with 1 C/m
    floating_potentials: np.ndarray  # V, one per floating conductor, for the case
    relative_residual: float
    solver: str = ""  # the linear solver that produced it


class FactorisedSystem:
    """The reduced system T^T K T over free DOFs and floating potentials, factorised once.

    ``solve(lifts, charges)`` returns full DOF vectors for boundary data ``lifts`` (ndofs, k), zero
    off the fixed conductors, and net charges ``charges`` (n floating, k) of the floating conductors.
    """

    def __init__(self, problem: AssembledProblem, method: str = "auto"):
        self.problem = problem
        free = problem.free_dofs
        floating = problem.floating
        n_free = free.size
        rows = np.concatenate([free] + [c.dofs for c in floating])
        cols = np.concatenate([np.arange(n_free)] + [np.full(c.dofs.size, n_free + k) for k, c in enumerate(floating)])
        self._T = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(problem.ndofs, n_free + len(floating)))
        if self._T.shape[1] == 0:
            raise SolverError("no free degrees of freedom: every node is on an electrode; refine the mesh")
        if floating:
            reduced = (self._T.T @ (problem.stiffness @ self._T)).tocsr()
        else:  # T only picks the free DOFs: slicing is several times faster than two sparse products
            reduced = problem.stiffness[free][:, free]
        self._n = reduced.shape[0]
        self._check_determined(reduced, n_free)
        handoff = Handoff(reduced)
        del reduced
        missing = []
        for name in solver_chain(method, self._n):
            try:
                self._backend = _BACKENDS[name](handoff)
                break
            except ImportError:  # an optional solver that is not installed: the next one
                missing.append(name)
        else:
            raise SolverError(f"no linear solver available for solver.method = {method!r} ({', '.join(missing)} "
                              "not installed); install pyamg, or use method = \"direct\"")
        if missing:
            log.info("%s not installed; solving with %s", ", ".join(missing), self._backend.name)

    @property
    def solver_name(self) -> str:
        return self._backend.name

    @property
    def prolongation(self) -> sp.csr_matrix:
        """T: the reduced unknowns (free DOFs, then one per floating conductor) to full DOF vectors."""
        return self._T

    def solve_reduced(self, rhs: np.ndarray) -> np.ndarray:
        """(T^T K T)^-1 rhs for real right-hand sides (n reduced, k): the factorisation applied as it is."""
        return self._backend.solve(rhs).reshape(rhs.shape)

    def close(self) -> None:
        """Release the factorisation (PARDISO keeps it in MKL's memory until told)."""
        self._backend.close()

    def _check_determined(self, reduced: sp.csr_matrix, n_free: int) -> None:
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
            x, y = dof_location(problem.basis, int(problem.free_dofs[first]))
            raise SolverError(
                f"the insulation near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm touches no electrode with a fixed potential and "
                "only insulated boundaries, so its potential is undefined; connect it to an electrode, fragment it "
                "with its neighbours, or ground the outer boundary"
            )

    def __repr__(self) -> str:
        return f"<FactorisedSystem {self._n} unknowns, {self._backend.name}: {self._backend.detail}>"

    def solve(self, lifts: np.ndarray, charges: np.ndarray) -> np.ndarray:
        """Full DOF vectors for the columns of ``lifts`` (ndofs, k; overwritten with the result) and ``charges``.

        Column by column into Fortran order (which PARDISO takes without a copy): beside a million-node
        factorisation fewer (ndofs, k) temporaries are held (~0.1 GB less peak memory; pypardiso still
        returns its solution as one more copy)."""
        stiffness, T = self.problem.stiffness, self._T
        rhs = np.empty((self._n, lifts.shape[1]), order="F")
        for column in range(lifts.shape[1]):  # a few conductors, not a loop over the mesh
            rhs[:, column] = -(T.T @ (stiffness @ lifts[:, column]))
        rhs[self._n - charges.shape[0]:] += charges
        reduced = self._backend.solve(rhs).reshape(rhs.shape)
        del rhs
        out = lifts
        for column in range(out.shape[1]):
            out[:, column] += T @ reduced[:, column]
        if not np.all(np.isfinite(out)):
            raise SolverError(f"the solve produced non-finite potentials; {_SINGULAR_HINT}")
        return out


_SINGULAR_HINT = (
    "some dielectric region touches no electrode with a fixed potential and the outer boundary is "
    "insulated, so its potential is undefined: ground the outer boundary or connect the region to an electrode"
)


def solve(problem: AssembledProblem, method: str = "auto") -> Solution:
    """Unit solutions for every conductor, and the case's potential as their superposition.

    ``method``: "auto", "direct" or "iterative" (see the module docstring).
    """
    fixed, floating = problem.fixed, problem.floating
    if len({c.potential for c in fixed}) < 2 and not any(c.charge for c in floating):
        level = fixed[0].potential if fixed else 0.0
        raise CaseFileError(
            f"every electrode is at {level:g} V and no floating conductor carries charge: there is no field to "
            "compute; give the electrodes different potentials (the outer boundary, if grounded, is at 0 V)"
        )
    system = FactorisedSystem(problem, method)
    n = problem.ndofs
    lifts = np.zeros((n, len(fixed) + len(floating)))
    lifts[:, :len(fixed)] = conductor_indicator(problem, fixed)
    charges = np.zeros((len(floating), lifts.shape[1]))
    charges[:, len(fixed):] = np.eye(len(floating))
    # The unit solutions of all fixed conductors sum to 1 everywhere (K annihilates constants and the
    # floating conductors stay uncharged), so the last one is not solved for: one CG run or one
    # back-substitution fewer.
    solved = np.ones(lifts.shape[1], dtype=bool)
    if len(fixed) > 1:
        solved[len(fixed) - 1] = False
    both = lifts  # the lifts' columns become the solutions (one array of this size less beside the factors)
    del lifts
    columns = np.flatnonzero(solved)
    if np.all(np.diff(columns) == 1):  # (no floating conductors) a view, solved in place: no copy either
        columns = slice(int(columns[0]), int(columns[-1]) + 1)
    try:
        both[:, columns] = system.solve(both[:, columns], charges[:, columns])
    finally:
        system.close()
    if not solved.all():
        both[:, len(fixed) - 1] = 1.0 - both[:, :len(fixed) - 1].sum(axis=1)
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
        raise SolverError(f"the {system.solver_name} solve left a relative residual of {relative:.2e}; the system "
                          "is ill-conditioned")
    log.debug("%r, residual %.2e", system, relative)
    return Solution(problem, u, unit, per_charge, floating_potentials, relative, system.solver_name)
