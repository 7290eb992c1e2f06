"""Derived fields: E, D and P per element, evaluated at the element's three vertices.

For P1 the gradient is constant in an element; for P2 on straight elements it is linear, so the
vertex values give its maximum and, along any edge, its exact linear variation.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy.constants import epsilon_0
from skfem import Basis

from .mesh import linear_gradients_and_areas
from .solve import Solution

# reference-triangle vertices, in the order of the mesh's element-to-vertex table
_VERTICES = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
_EDGES = ((0, 1), (1, 2), (0, 2))  # local vertex pairs of the three edges
_GAUSS_S, _GAUSS_W = np.polynomial.legendre.leggauss(5)
_GAUSS_S, _GAUSS_W = 0.5 * (_GAUSS_S + 1.0), 0.5 * _GAUSS_W  # on [0, 1]
#: each local edge's direction in reference coordinates, from its first vertex to its second: (3 edges, 2)
EDGE_DIRECTIONS = np.stack([_VERTICES[:, b] - _VERTICES[:, a] for a, b in _EDGES])


def edge_points(s: np.ndarray) -> np.ndarray:
    """Reference points at fractions ``s`` (q,) along each of the three local edges, edge after edge: (2, 3q)
    (one basis at all of them costs about as much as at one edge's)."""
    starts = np.stack([_VERTICES[:, a] for a, _ in _EDGES])
    return (starts[:, :, None] + EDGE_DIRECTIONS[:, :, None] * s[None, None, :]).transpose(1, 0, 2).reshape(2, -1)


@dataclass(frozen=True)
class ElementFields:
    """Field values at the vertices of every element, SI units: arrays of shape (nelements, 3, 2).

    For linear elements on straight triangles the field is constant in each element and the arrays are
    read-only views that repeat one value per element (copy them before writing).
    """

    E: np.ndarray  # V/m
    D: np.ndarray  # C/m^2
    P: np.ndarray  # C/m^2, P = D - eps0 E
    energy_per_length: float  # J/m, (1/2) u^T K u over the whole section

    @property
    def constant_in_elements(self) -> bool:
        """One value per element (linear elements on straight triangles): the arrays repeat it at the vertices."""
        return self.E.strides[1] == 0

    @cached_property
    def E_magnitude(self) -> np.ndarray:
        """|E| at each vertex of each element, shape (nelements, 3); computed once, read-only."""
        if self.constant_in_elements:  # once per element
            return np.broadcast_to(np.hypot(self.E[:, 0, 0], self.E[:, 0, 1])[:, None], self.E.shape[:2])
        magnitude = np.hypot(self.E[..., 0], self.E[..., 1])
        magnitude.flags.writeable = False
        return magnitude

    @property
    def element_peak_E(self) -> np.ndarray:
        """Largest |E| in each element (the maximum of a linear field sits at a vertex)."""
        return self.E_magnitude.max(axis=1)

    @property
    def element_mean_E(self) -> np.ndarray:
        """E at the centroid (mean of the vertex values), shape (nelements, 2)."""
        return self.E.mean(axis=1)


def gradient_at_vertices(solution: Solution, dof_vector: np.ndarray) -> np.ndarray:
    """grad(u) at each element's vertices, shape (nelements, 3, 2); for linear elements on straight
    triangles (constant in each) a read-only view of shape (nelements, 1, 2) broadcast to that."""
    problem = solution.problem
    mesh = problem.section.mesh
    if _is_linear(problem):
        return np.broadcast_to(_linear_gradient(mesh, dof_vector)[:, None, :], (mesh.nelements, 3, 2))
    basis = Basis(mesh, problem.basis.elem, quadrature=(_VERTICES, np.full(3, 1 / 6)))
    return np.moveaxis(gradient_at_points(basis, dof_vector), 0, -1)


def _linear_gradient(mesh, u: np.ndarray, elements: np.ndarray | None = None) -> np.ndarray:
    """grad(u) in each linear element on a straight triangle (all, or ``elements``): constant, shape (n, 2)."""
    vertices = mesh.t if elements is None else mesh.t[:, elements]
    return np.einsum("vn,vcn->nc", u[vertices], linear_gradients_and_areas(mesh, elements)[0])


def _is_linear(problem) -> bool:
    """Linear elements on straight triangles (MeshTri2, curved, is a subclass of MeshTri1: not these)."""
    return problem.element_order == 1 and not problem.section.curved


def gradient_at_points(basis: Basis, u: np.ndarray) -> np.ndarray:
    """grad(u) at the basis's quadrature points, shape (2, nelements, npoints).

    The sum over the element's basis functions that ``basis.interpolate`` does, without the values
    and higher derivatives it also computes.
    """
    dofs = basis.element_dofs
    return sum(u[dofs[i]][None, :, None] * basis.basis[i][0].grad for i in range(basis.Nbfun))


def element_fields(solution: Solution) -> ElementFields:
    problem = solution.problem
    gradient = gradient_at_vertices(solution, solution.potential)
    if _is_linear(problem):  # constant in each element: compute once per element, broadcast to the vertices
        gradient = gradient[:, :1]
    er = problem.relative_permittivity[:, None, None]
    # conductor regions carry no field: their DOFs are all fixed, so E is 0 there up to round-off
    E = np.where(problem.dielectric[:, None, None], -gradient, 0.0)
    D = epsilon_0 * er * E
    P = D - epsilon_0 * E
    if _is_linear(problem):
        E, D, P = (np.broadcast_to(a, (len(a), 3, 2)) for a in (E, D, P))
    u = solution.potential
    energy = 0.5 * float(u @ (problem.stiffness @ u))
    return ElementFields(E, D, P, energy)


def outward_flux(solution: Solution, elements: np.ndarray, local_vertices: np.ndarray,
                 chord_normals: np.ndarray, coefficient: np.ndarray) -> np.ndarray:
    """Integral over an element edge of ``coefficient * E . n_out``, one value per (element, edge);
    in an axisymmetric model over the surface the edge sweeps about the axis (times 2 pi r).

    ``local_vertices`` (n, 2) names the edge by its local vertices, ``chord_normals`` (n, 2) gives the
    outward direction and ``coefficient`` (n,) multiplies E (eps for D, eps - eps0 for P).
    Gauss quadrature on the element's own (possibly curved) edge, through its mapping, so the
    integral is exact for P2 on straight edges and follows arcs on curved ones.
    """
    problem = solution.problem
    mesh = problem.section.mesh
    if _is_linear(problem):
        return _linear_outward_flux(solution, elements, local_vertices, chord_normals, coefficient)
    if len(elements) == 0:
        return np.zeros(0)
    low, high = local_vertices.min(axis=1), local_vertices.max(axis=1)
    edge = np.select([(low == a) & (high == b) for a, b in _EDGES], np.arange(len(_EDGES)), -1)
    if (edge < 0).any():
        raise ValueError("local_vertices must name two different local vertices of each element")
    # one basis at the Gauss points of all three edges of every element involved (its set-up costs about as
    # much for nine points as for three), each (element, edge) then reads its own three
    points = edge_points(_GAUSS_S)
    tind, which = np.unique(elements, return_inverse=True)
    basis = Basis(mesh, problem.basis.elem, quadrature=(points, np.tile(_GAUSS_W, len(_EDGES))), elements=tind)
    q = len(_GAUSS_S)
    columns = edge[:, None] * q + np.arange(q)[None, :]  # (n, q): this side's points among the nine
    rows = which[:, None]
    grad = gradient_at_points(basis, solution.potential)[:, rows, columns]  # (2, n, q)
    jacobian = basis.mapping.DF(points, tind=tind)[:, :, rows, columns]  # (2, 2, n, q)
    tangent = np.einsum("ijnq,nj->inq", jacobian, EDGE_DIRECTIONS[edge])  # dx/ds, |.| is the length element
    normal = np.stack([tangent[1], -tangent[0]])
    sign = np.sign(np.einsum("inq,ni->n", normal, chord_normals))
    e_dot_n = -np.einsum("inq,inq->nq", grad, normal)
    if problem.axisymmetric:  # the surface of revolution swept by the edge: 2 pi r ds
        e_dot_n = e_dot_n * 2 * np.pi * basis.mapping.F(points, tind=tind)[0][rows, columns]
    return coefficient * sign * (e_dot_n @ _GAUSS_W)


def _linear_outward_flux(solution: Solution, elements: np.ndarray, local_vertices: np.ndarray,
                         chord_normals: np.ndarray, coefficient: np.ndarray) -> np.ndarray:
    """``outward_flux`` for linear elements on straight triangles: E is constant, so the edge integral is
    E . n times the edge's length (times 2 pi r at its midpoint in a body of revolution: r is linear)."""
    mesh = solution.problem.section.mesh
    vertices = mesh.t[:, elements]  # (3, n)
    E = -_linear_gradient(mesh, solution.potential, elements)  # (n, 2)
    x, y = mesh.p[0][vertices], mesh.p[1][vertices]
    columns = np.arange(len(elements))
    a, b = local_vertices[:, 0], local_vertices[:, 1]
    ax, ay, bx, by = x[a, columns], y[a, columns], x[b, columns], y[b, columns]
    length = np.hypot(bx - ax, by - ay)
    flux = coefficient * np.einsum("ni,ni->n", E, chord_normals) * length
    if solution.problem.axisymmetric:
        flux = flux * 2 * np.pi * 0.5 * (ax + bx)
    return flux
