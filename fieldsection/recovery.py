"""Field recovery and the a posteriori error indicator.

Recovered field E*: the L2 projection of the finite-element field E_h = -grad u_h onto continuous
piecewise polynomials of the solution's own order, continuous inside each region and free to jump
across region boundaries (there the normal component of E jumps with the permittivity).

Error indicator (Zienkiewicz & Zhu, "A simple error estimator and adaptive procedure for practical
engineering analysis", Int. J. Numer. Meth. Eng. 24, 1987): per element

    eta_K^2 = integral over K of eps |E* - E_h|^2,

the energy of the difference between the recovered and the computed field (with the model's
weights: 2 pi r for a body of revolution). The sum over elements estimates the energy-norm error
of the solution, so (eta / ||u||_E)^2 estimates the relative error of the capacitance.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.sparse as sp
from scipy.constants import epsilon_0
from skfem import Basis
from skfem.quadrature import get_quadrature

from .errors import SolverError
from .fields import ElementFields, gradient_at_points
from .mesh import linear_gradients_and_areas
from .problem import weighted_permittivity
from .solve import Solution


@dataclass(frozen=True)
class Recovery:
    """Recovered field at element vertices and the error indicators per element."""

    E: np.ndarray  # V/m, (nelements, 3, 2): E* at each element's vertices, from that element's region
    indicator: np.ndarray  # eta_K^2 per element for the case's potential, J/m (J for a body of revolution)
    energy_norm_squared: float  # u^T K u = 2 x the stored energy, for the case's potential

    @property
    def estimated_error(self) -> float:
        """Relative energy-norm error estimate of the case's solution, eta / ||u||_E."""
        return float(np.sqrt(self.indicator.sum() / self.energy_norm_squared)) if self.energy_norm_squared > 0 else 0.0

    @property
    def E_magnitude(self) -> np.ndarray:
        return np.hypot(self.E[..., 0], self.E[..., 1])

    def peak_search_field(self, element_E_magnitude: np.ndarray, order: int) -> np.ndarray:
        """|E| at element vertices for peak and hotspot search, (nelements, 3).

        The recovered field, except for linear elements: there the nodal average at a boundary vertex
        mixes elements whose centres lie inside, and can read low next to a convex conductor, so the
        larger of it and the element's own (constant) field is taken, on the safe side.
        """
        if order == 1:
            return np.maximum(self.E_magnitude, element_E_magnitude)
        return self.E_magnitude


#: relative residual at which the projection's conjugate gradients stop (E* to about 1e-7: far below any
#: discretisation error, and below the four digits a report shows), and the iterations allowed
PROJECTION_TOLERANCE, PROJECTION_MAX_ITERATIONS = 1e-8, 2000
#: the same for the unit solutions' fields of the refinement indicator, which only sets the next mesh's sizes (to
#: a few per cent): about half the iterations
INDICATOR_TOLERANCE = 1e-6


def jacobi_scaled(matrix: sp.spmatrix) -> tuple[sp.csr_matrix, np.ndarray]:
    """(D^-1/2 M D^-1/2, D^-1/2) of a symmetric positive definite ``matrix`` M with diagonal D: what
    ``conjugate_gradients`` solves with, made once per matrix."""
    scaled = sp.csr_matrix(matrix, copy=True)
    scale = 1.0 / np.sqrt(scaled.diagonal())
    rows = np.repeat(np.arange(scaled.shape[0]), np.diff(scaled.indptr))
    scaled.data *= scale[rows] * scale[scaled.indices]  # entry by entry: no two sparse products
    return scaled, scale


def conjugate_gradients(scaled: sp.spmatrix, scale: np.ndarray, rhs: np.ndarray,
                        tolerance: float = PROJECTION_TOLERANCE) -> np.ndarray:
    """Solves ``M x = rhs`` (rhs (n, k), k columns at once) for a symmetric positive definite mass matrix M
    by Jacobi-preconditioned conjugate gradients: plain CG on its symmetric scaling (``jacobi_scaled(M)``
    gives ``scaled`` and ``scale``).

    A diagonally scaled mass matrix is well conditioned on any shape-regular mesh, whatever its size
    (Wathen, IMA J. Numer. Anal. 7, 1987): about 17 iterations to 1e-8 on the demo, so this is faster
    than a factorisation (which took ~1 s there) and its memory stays linear in the mesh. The columns
    share each product with the matrix."""
    r = scale[:, None] * rhs
    y = np.zeros_like(r)
    p = r.copy()
    rr = np.einsum("ij,ij->j", r, r)
    stop = (tolerance ** 2) * rr
    for _ in range(PROJECTION_MAX_ITERATIONS):
        if (rr <= stop).all():
            return scale[:, None] * y
        q = scaled @ p
        pq = np.einsum("ij,ij->j", p, q)
        alpha = np.divide(rr, pq, out=np.zeros_like(rr), where=pq > 0)
        y += alpha * p
        r -= alpha * q
        rr, previous = np.einsum("ij,ij->j", r, r), rr
        p *= np.divide(rr, previous, out=np.zeros_like(rr), where=previous > 0)
        p += r
    raise SolverError("the field recovery did not converge (conjugate gradients on the mass matrix); "
                      "report this as a bug")


class _Projector:
    """L2 projection of fields onto the region-wise continuous space, set up once per mesh.

    The space is the element-local (DG) copy of the solution's space glued wherever elements share a
    DOF and a region (``glued``: the glued DOF of each element's local function), so the mass matrix
    and the loads are summed straight into glued DOFs from element arrays: no DG space of its own and
    no gluing products."""

    def __init__(self, solution: Solution):
        problem = solution.problem
        self.problem = problem
        # the assembly may use a reduced rule (exact for K on straight elements); a projection needs the full one,
        # which curved and axisymmetric models assemble with already (its basis is reused: ~0.1 s at 1e5 DOFs)
        order = problem.element_order
        full, _ = get_quadrature(problem.basis.mesh.refdom, 2 * order)
        basis = problem.basis
        if basis.X.shape != full.shape or not np.allclose(basis.X, full) or basis.nelems != basis.mesh.nelements:
            basis = Basis(problem.basis.mesh, problem.basis.elem, intorder=2 * order)
        self.basis = basis
        section = problem.section
        keys = basis.element_dofs.astype(np.int64) * len(section.region_names) + section.region_of_element[None, :]
        _, glued = np.unique(keys, return_inverse=True)
        self.glued = glued.reshape(keys.shape)  # (local functions, nelements)
        self.size = int(self.glued.max()) + 1
        # shape function values at the quadrature points (local functions, nqp): a Lagrange function's values
        # at the reference points are the same in every element (the mapping changes its gradient only)
        self.phi = np.array([np.asarray(basis.basis[j][0])[0] for j in range(basis.Nbfun)])
        self.dx = basis.dx
        # element mass matrices (i, j, element) as one matrix product over the quadrature points
        products = (self.phi[:, None, :] * self.phi[None, :, :]).reshape(-1, self.phi.shape[1])
        local = (products @ basis.dx.T).reshape(basis.Nbfun, basis.Nbfun, -1)
        rows = np.broadcast_to(self.glued[:, None, :], local.shape)
        cols = np.broadcast_to(self.glued[None, :, :], local.shape)
        mass = sp.csr_matrix((local.ravel(), (rows.ravel(), cols.ravel())), shape=(self.size, self.size))
        self._scaled_mass, self._scale = jacobi_scaled(mass)  # once: the case's field and the units' use it
        eps = weighted_permittivity(basis, section, problem.relative_permittivity, problem.axisymmetric)
        self.eps_dx = np.broadcast_to(eps, basis.dx.shape) * basis.dx

    def field(self, potential: np.ndarray) -> np.ndarray:
        """E_h = -grad u at the quadrature points, (2, nelements, nqp); zero in meshed conductors."""
        E_h = -gradient_at_points(self.basis, potential)
        E_h[:, ~self.problem.dielectric] = 0.0
        return E_h

    def project(self, E_h: np.ndarray, tolerance: float = PROJECTION_TOLERANCE) -> np.ndarray:
        """Coefficients (c, glued DOFs) of the recovered field, for fields (c, nelements, nqp) of any count c
        of components; ``tolerance``: the relative residual of the projection's solve."""
        element_loads = np.einsum("cnq,nq,jq->cjn", E_h, self.dx, self.phi, optimize=True)  # as ``glued``
        loads = np.stack([np.bincount(self.glued.ravel(), weights=load.ravel(), minlength=self.size)
                          for load in element_loads], axis=1)
        return conjugate_gradients(self._scaled_mass, self._scale, loads, tolerance).T

    def vertex_values(self, coefficients: np.ndarray) -> np.ndarray:
        """E* at element vertices (nelements, 3, 2); Lagrange elements number their vertex DOFs first."""
        return np.moveaxis(coefficients[:, self.glued[:3]], 0, -1).transpose(1, 0, 2)

    def indicator(self, coefficients: np.ndarray, E_h: np.ndarray) -> np.ndarray:
        """eta_K^2 per element: the weighted energy of E* - E_h."""
        E_star = np.einsum("cjn,jq->cnq", coefficients[:, self.glued], self.phi)
        eta2 = (((E_star - E_h) ** 2).sum(axis=0) * self.eps_dx).sum(axis=1)
        # meshed conductors carry no field; the mapped open space is not re-meshed by refinement, and in a
        # body of revolution its image has a kink at infinity that no continuous recovery follows
        eta2[~self.problem.dielectric | self.problem.section.exterior] = 0.0
        return eta2


class _LinearProjector:
    """The same for linear elements, with no quadrature at all: E_h is constant in each (straight)
    element, E* is its area-weighted average at each node of a region (the lumped L2 projection), and
    the energy of the linear difference is integrated exactly. Cheap enough for a million nodes."""

    def __init__(self, solution: Solution):
        problem = solution.problem
        self.problem = problem
        section = problem.section
        mesh = section.mesh
        self.area = section.element_areas
        keys = mesh.t.astype(np.int64) * len(section.region_names) + section.region_of_element[None, :]
        # one node per (vertex, region) pair in use, numbered in key order: np.unique's inverse, without a sort
        used = np.zeros(mesh.nvertices * len(section.region_names), dtype=bool)
        used[keys] = True
        self.glued = (np.cumsum(used) - 1)[keys]
        self.weight = np.bincount(self.glued.ravel(), weights=np.tile(self.area, 3))
        eps = epsilon_0 * problem.relative_permittivity
        if problem.axisymmetric:
            eps = eps * 2 * np.pi * mesh.p[0, mesh.t].mean(axis=0)
        self.eps_area = eps * self.area

    @cached_property
    def gradients(self) -> np.ndarray:
        """(3, 2, nelements); only the unit solutions of a refinement indicator need them (~100 MB at a
        million elements, computed when first asked for)."""
        return linear_gradients_and_areas(self.problem.section.mesh)[0]

    def field(self, potential: np.ndarray) -> np.ndarray:
        u = potential[self.problem.section.mesh.t]  # (3, nelements)
        E_h = -np.einsum("vn,vcn->cn", u, self.gradients)
        E_h[:, ~self.problem.dielectric] = 0.0
        return E_h

    def project(self, E_h: np.ndarray, tolerance: float = PROJECTION_TOLERANCE) -> np.ndarray:
        """As ``_Projector.project``; exact here (``tolerance`` has nothing to stop)."""
        return np.array([np.bincount(self.glued.ravel(), weights=np.tile(self.area * c, 3),
                                     minlength=self.weight.size) / self.weight for c in E_h])

    def vertex_values(self, coefficients: np.ndarray) -> np.ndarray:
        return np.moveaxis(coefficients[:, self.glued], 0, -1).transpose(1, 0, 2)

    def indicator(self, coefficients: np.ndarray, E_h: np.ndarray) -> np.ndarray:
        # integral of a linear f over a triangle of area A: A/12 (sum f_i^2 + (sum f_i)^2), summed over the
        # two components of E* - E_h; one component at a time, in place (~2x faster at a million elements)
        total = np.zeros(E_h.shape[1])
        for coefficient, element_value in zip(coefficients, E_h):
            d = coefficient[self.glued]  # (3, nelements)
            d -= element_value
            total += d[0] * d[0] + d[1] * d[1] + d[2] * d[2]
            along = d.sum(axis=0)
            total += along * along
        eta2 = total
        eta2 *= self.eps_area / 12
        eta2[~self.problem.dielectric | self.problem.section.exterior] = 0.0
        return eta2


Projector = _Projector | _LinearProjector


def projector(solution: Solution) -> Projector:
    """The L2 projection onto the region-wise continuous space of the solution's mesh, set up once for
    ``recover_field`` and ``refinement_indicator`` on it."""
    return _LinearProjector(solution) if solution.problem.element_order == 1 else _Projector(solution)


def recover_field(solution: Solution, fields: ElementFields | None = None, project: Projector | None = None
                  ) -> Recovery:
    """E* and the indicator for the case's potential.

    ``fields``: the case's element fields, when computed already; for linear elements on straight
    triangles their E is used rather than taken again from the potential. ``project``: the mesh's
    projector, when set up already."""
    problem = solution.problem
    if fields is not None and fields.E.shape[0] != problem.section.mesh.nelements:
        raise ValueError("the element fields are of another mesh; pass those of this solution")
    project = project or projector(solution)
    u = solution.potential
    constant = fields is not None and isinstance(project, _LinearProjector) and fields.constant_in_elements
    E_h = fields.E[:, 0, :].T if constant else project.field(u)
    coefficients = project.project(E_h)
    return Recovery(project.vertex_values(coefficients), project.indicator(coefficients, E_h),
                    float(u @ (problem.stiffness @ u)))


def refinement_indicator(solution: Solution, project: Projector | None = None) -> np.ndarray:
    """Per element, the sum over every unit solution (each fixed conductor at 1 V, each floating one with
    1 C/m) of eta_K^2 / ||u||_E^2, so that the next mesh serves every entry of the capacitance matrix.

    Asked for only when another pass follows: the last pass projects the case's field alone."""
    problem = solution.problem
    project = project or projector(solution)
    units = np.column_stack([solution.unit_potentials, solution.unit_charges]).T
    combined = np.zeros(problem.section.mesh.nelements)
    if units.size == 0:
        return combined
    fields_of_units = [project.field(unit) for unit in units]  # (2, ...) each
    # every unit's two components projected together: the projection's iterations share their products
    every = project.project(np.concatenate(fields_of_units), INDICATOR_TOLERANCE)
    for k, (unit, E_h) in enumerate(zip(units, fields_of_units)):
        unit_norm = float(unit @ (problem.stiffness @ unit))
        if unit_norm > 0:
            combined += project.indicator(every[2 * k:2 * k + 2], E_h) / unit_norm
    return combined
