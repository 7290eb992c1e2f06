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
import scipy.sparse.linalg as spla
from scipy.constants import epsilon_0
from skfem import Basis, BilinearForm, ElementDG

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
    refinement_indicator: np.ndarray  # sum over the case and every unit solution of eta_K^2 / ||u||_E^2

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


#: largest recovery space factorised directly; above it, CG (memory stays linear in the mesh)
DIRECT_MASS_LIMIT = 300_000


@BilinearForm
def _mass(u, v, w):
    return u * v


def _values(basis: Basis, coefficients: np.ndarray) -> np.ndarray:
    """sum_j c_j phi_j at the quadrature points, (nelements, nqp): the values beside
    ``fields.gradient_at_points`` (scikit-fem's interpolate re-splits its indices on every call)."""
    dofs = basis.element_dofs
    return sum(coefficients[dofs[j]][:, None] * np.asarray(basis.basis[j][0]) for j in range(dofs.shape[0]))


class _Projector:
    """L2 projection of fields onto the region-wise continuous space, set up once per mesh."""

    def __init__(self, solution: Solution):
        problem = solution.problem
        self.problem = problem
        # the assembly may use a reduced rule (exact for K on straight elements); a projection needs the full one
        order = problem.element_order
        basis = Basis(problem.basis.mesh, problem.basis.elem, intorder=2 * order)
        self.basis = basis
        section = problem.section
        # region-wise continuous space = element-local (DG) DOFs glued wherever they share a global
        # DOF and a region; one sparse gluing matrix, no loop over regions
        self.local = Basis(basis.mesh, ElementDG(basis.elem), quadrature=(basis.X, basis.W))
        keys = basis.element_dofs.astype(np.int64) * len(section.region_names) + section.region_of_element[None, :]
        _, glued = np.unique(keys, return_inverse=True)
        self.glued = glued.reshape(keys.shape)
        self.glue = sp.csr_matrix((np.ones(self.glued.size), (self.local.element_dofs.ravel(), self.glued.ravel())),
                                  shape=(self.local.N, int(self.glued.max()) + 1))
        mass = (self.glue.T @ _mass.assemble(self.local) @ self.glue).tocsr()
        if mass.shape[0] <= DIRECT_MASS_LIMIT:
            factor = spla.splu(mass.tocsc(), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                               options={"SymmetricMode": True})
            self._solve = factor.solve
        else:  # large: CG, as a diagonally scaled mass matrix is well conditioned on any shape-regular
            # mesh (Wathen, IMA J. Numer. Anal. 7, 1987)
            jacobi = sp.diags(1.0 / mass.diagonal())

            def iterate(rhs: np.ndarray) -> np.ndarray:
                values, info = spla.cg(mass, rhs, M=jacobi, rtol=1e-10, atol=0.0, maxiter=2000)
                if info != 0:
                    raise SolverError(f"the field recovery did not converge (CG status {info}); report this as a bug")
                return values
            self._solve = iterate
        eps = weighted_permittivity(basis, section, problem.relative_permittivity, problem.axisymmetric)
        self.eps_dx = np.broadcast_to(eps, basis.dx.shape) * basis.dx

    def field(self, potential: np.ndarray) -> np.ndarray:
        """E_h = -grad u at the quadrature points, (2, nelements, nqp); zero in meshed conductors."""
        E_h = -gradient_at_points(self.basis, potential)
        E_h[:, ~self.problem.dielectric] = 0.0
        return E_h

    def project(self, E_h: np.ndarray) -> np.ndarray:
        """Coefficients (2, glued DOFs) of the recovered field."""
        local = self.local
        loads = []
        for component in E_h:
            weighted = component * local.dx
            load = np.zeros(local.N)
            for j in range(local.element_dofs.shape[0]):  # a few local basis functions
                load[local.element_dofs[j]] = (weighted * np.asarray(local.basis[j][0])).sum(axis=1)
            loads.append(self._solve(self.glue.T @ load))
        return np.array(loads)

    def vertex_values(self, coefficients: np.ndarray) -> np.ndarray:
        """E* at element vertices (nelements, 3, 2); Lagrange elements number their vertex DOFs first."""
        return np.moveaxis(coefficients[:, self.glued[:3]], 0, -1).transpose(1, 0, 2)

    def indicator(self, coefficients: np.ndarray, E_h: np.ndarray) -> np.ndarray:
        """eta_K^2 per element: the weighted energy of E* - E_h."""
        E_star = np.array([_values(self.local, self.glue @ c) for c in coefficients])
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

    def project(self, E_h: np.ndarray) -> np.ndarray:
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


def recover_field(solution: Solution, for_refinement: bool = True, fields: ElementFields | None = None) -> Recovery:
    """E* and the indicator for the case's potential. With ``for_refinement`` the refinement indicator
    sums every unit solution's (each over its own energy), so the next mesh serves each entry of the
    capacitance matrix; the case's recovered field is then their combination (the projection is linear).

    ``fields``: the case's element fields, when computed already; for linear elements on straight
    triangles their E is used rather than taken again from the potential."""
    problem = solution.problem
    project = _LinearProjector(solution) if problem.element_order == 1 else _Projector(solution)
    u = solution.potential
    norm = float(u @ (problem.stiffness @ u))
    if fields is not None and fields.E.shape[0] != problem.section.mesh.nelements:
        raise ValueError("the element fields are of another mesh; pass those of this solution")
    if not for_refinement:
        constant = fields is not None and isinstance(project, _LinearProjector) and fields.constant_in_elements
        E_h = fields.E[:, 0, :].T if constant else project.field(u)
        coefficients = project.project(E_h)
        indicator = project.indicator(coefficients, E_h)
        return Recovery(project.vertex_values(coefficients), indicator, norm, indicator / norm if norm > 0 else indicator)
    units = np.column_stack([solution.unit_potentials, solution.unit_charges]).T
    weights = np.concatenate([[c.potential for c in problem.fixed], [c.charge for c in problem.floating]])
    combined = np.zeros(problem.section.mesh.nelements)
    case_E_h = np.zeros(0)
    case_coefficients = np.zeros(0)
    for unit, weight in zip(units, weights):
        E_h = project.field(unit)
        coefficients = project.project(E_h)
        unit_norm = float(unit @ (problem.stiffness @ unit))
        if unit_norm > 0:
            combined += project.indicator(coefficients, E_h) / unit_norm
        case_E_h = weight * E_h if case_E_h.size == 0 else case_E_h + weight * E_h
        case_coefficients = weight * coefficients if case_coefficients.size == 0 else \
            case_coefficients + weight * coefficients
    return Recovery(project.vertex_values(case_coefficients), project.indicator(case_coefficients, case_E_h), norm,
                    combined)
