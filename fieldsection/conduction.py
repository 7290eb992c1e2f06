"""What the DC and AC analyses share: per-element material coefficients, the coefficient-weighted
stiffness on the electrostatic problem's basis, fields of any DOF vector, and the faces between regions.

The DC and AC analyses solve on the electrostatic problem's mesh, basis and conductors (the last
adaptive pass): only the coefficient of the Laplacian changes. A coefficient is given per element
(shape (nelements,)) or per element and quadrature point of the problem's basis ((nelements, nq));
on the straight-P1 path (one-point rule) both are one value per element.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
import scipy.sparse as sp
from scipy.constants import epsilon_0

from .charges import FacetSides, facet_sides, normal_component
from .errors import CaseFileError
from .fields import gradient_at_points, gradient_at_vertices
from .forms import linear_stiffness, permittivity_laplace
from .materials import Material
from .mesh import EXTERIOR
from .problem import AssembledProblem, conductor_indicator, weighted_permittivity
from .solve import Solution


def straight_linear(problem: AssembledProblem) -> bool:
    """The straight planar P1 path: K built directly, one value per element (see problem.assemble)."""
    return not problem.axisymmetric and not problem.section.curved and problem.element_order == 1


def material_per_element(problem: AssembledProblem) -> list[Material | None]:
    """The material of each region index (None for conductors); open space takes the medium beyond its circle."""
    section = problem.section
    out: list[Material | None] = [problem.material_of_region.get(name) for name in section.region_names]
    if EXTERIOR in section.region_names:
        out[section.region_names.index(EXTERIOR)] = _medium_beyond(problem)
    return out


def _medium_beyond(problem: AssembledProblem) -> Material:
    """The material along the open-space circle (one, as problem.assemble checked for the permittivity)."""
    section = problem.section
    a, b = section.mesh.f2t
    exterior = section.exterior
    on_circle = (b >= 0) & (exterior[a] != exterior[np.maximum(b, 0)])
    inside = np.where(exterior[a[on_circle]], b[on_circle], a[on_circle])
    names = sorted({section.region_names[r] for r in np.unique(section.region_of_element[inside])})
    materials = {problem.material_of_region[n] for n in names}
    if len(materials) != 1:
        raise CaseFileError(f"the open-space circle cuts through regions {', '.join(map(repr, names))} of different "
                            "materials; draw it inside one surrounding medium")
    return materials.pop()


def element_values(problem: AssembledProblem, value: Callable[[Material], float]) -> np.ndarray:
    """``value(material)`` for every element (0 in conductor regions), shape (nelements,)."""
    per_region = np.array([0.0 if m is None else float(value(m)) for m in material_per_element(problem)])
    return np.where(problem.dielectric, per_region[problem.section.region_of_element], 0.0)


def coefficient_points(problem: AssembledProblem) -> tuple[np.ndarray, np.ndarray]:
    """(x, y) in m where a point-wise coefficient is evaluated, each (nelements, nq): the basis's quadrature
    points, or the centroids (nq = 1) on the straight-P1 path."""
    mesh = problem.section.mesh
    if straight_linear(problem):
        centroid = mesh.p[:, mesh.t].mean(axis=1)  # (2, nelements)
        return centroid[0][:, None], centroid[1][:, None]
    x = np.asarray(problem.basis.global_coordinates())
    return x[0], x[1]


def stiffness_with(problem: AssembledProblem, coefficient: np.ndarray) -> sp.csr_matrix:
    """The matrix of (c grad u, grad v) on the problem's basis, with the model's weights (2 pi r, the Kelvin
    image of open space). ``coefficient`` real or complex, (nelements,) or (nelements, nq)."""
    c = np.asarray(coefficient)
    if np.iscomplexobj(c):
        return stiffness_with(problem, c.real) + 1j * stiffness_with(problem, c.imag)
    if straight_linear(problem):
        return linear_stiffness(problem.section.mesh, c if c.ndim == 1 else c[:, 0])
    weights = weighted_permittivity(problem.basis, problem.section, np.full(c.shape[0], 1 / epsilon_0),
                                    problem.axisymmetric)
    c = c[:, None] if c.ndim == 1 else c
    return permittivity_laplace.assemble(problem.basis, eps=c * weights).tocsr()


def field_magnitude_at_points(problem: AssembledProblem, u: np.ndarray) -> np.ndarray:
    """|grad u| where ``coefficient_points`` are, (nelements, nq); ``u`` real."""
    if straight_linear(problem):
        g = gradient_at_vertices(as_solution(problem, u), u)[:, 0, :]
        return np.hypot(g[:, 0], g[:, 1])[:, None]
    g = gradient_at_points(problem.basis, u)
    return np.hypot(g[0], g[1])


def as_solution(problem: AssembledProblem, u: np.ndarray, solver: str = "") -> Solution:
    """A :class:`Solution` holding just the potential ``u`` (real), for the field and flux helpers."""
    n = problem.ndofs
    return Solution(problem, u, np.zeros((n, 0)), np.zeros((n, 0)), np.zeros(0), 0.0, solver)


def vertex_field(problem: AssembledProblem, u: np.ndarray) -> np.ndarray:
    """E = -grad u at every element's vertices, (nelements, 3, 2), zero in conductor regions; ``u`` real."""
    gradient = gradient_at_vertices(as_solution(problem, u), u)
    return np.where(problem.dielectric[:, None, None], -gradient, 0.0)


def with_stiffness(problem: AssembledProblem, stiffness: sp.csr_matrix) -> AssembledProblem:
    """The problem with another matrix; floating conductors carry no net current (their ``charge`` 0)."""
    conductors = tuple(replace(c, charge=0.0) if c.floating else c for c in problem.conductors)
    return replace(problem, stiffness=stiffness, conductors=conductors)


def fixed_lift(problem: AssembledProblem, potentials: np.ndarray) -> np.ndarray:
    """(ndofs, 1): the fixed conductors' given potentials on their DOFs, 0 elsewhere."""
    return conductor_indicator(problem, problem.fixed) @ np.asarray(potentials).reshape(-1, 1)


def region_peaks(problem: AssembledProblem, magnitude: np.ndarray) -> dict[str, float]:
    """Largest vertex value of ``magnitude`` (nelements, 3) in each dielectric region, V/m."""
    section = problem.section
    out = {}
    for name in problem.material_of_region:
        elements = section.elements_of(name)
        out[name] = float(magnitude[elements].max()) if elements.size else 0.0
    return out


def region_quadratic(problem: AssembledProblem, coefficient: np.ndarray, u: np.ndarray) -> dict[str, float]:
    """Per dielectric region, u^H K_r u with K_r the ``coefficient`` matrix restricted to the region (real part)."""
    section = problem.section
    out = {}
    c = np.asarray(coefficient)
    for name in problem.material_of_region:
        mask = section.region_of_element == section.region_names.index(name)
        masked = np.where(mask if c.ndim == 1 else mask[:, None], c, 0.0)
        out[name] = float(np.real(np.conj(u) @ (stiffness_with(problem, masked) @ u)))
    return out


@dataclass(frozen=True)
class InterfaceFaces:
    """The facets between two different dielectric regions, seen from both sides."""

    pairs: tuple[tuple[str, str], ...]  # (region a, region b) per interface, a before b in the mesh's order
    facet_pair: np.ndarray  # index into ``pairs`` per facet
    side_a: FacetSides
    side_b: FacetSides


def interface_faces(problem: AssembledProblem, conductor_facets: np.ndarray) -> InterfaceFaces:
    """Facets with dielectric of two different regions on their two sides (not open space, not on a conductor)."""
    section = problem.section
    mesh = section.mesh
    region = section.region_of_element
    a, b = mesh.f2t
    bb = np.maximum(b, 0)
    drawn = ~section.exterior
    keep = (b >= 0) & (region[a] != region[bb]) & problem.dielectric[a] & problem.dielectric[bb] \
        & drawn[a] & drawn[bb]
    keep[conductor_facets] = False
    facets = np.flatnonzero(keep)
    ea, eb = a[facets], b[facets]
    lo, hi = np.minimum(region[ea], region[eb]), np.maximum(region[ea], region[eb])
    swap = region[ea] != lo
    ea, eb = np.where(swap, eb, ea), np.where(swap, ea, eb)  # side a holds the lower region index
    keys, inverse = np.unique(lo * len(section.region_names) + hi, return_inverse=True)
    names = section.region_names
    pairs = tuple((names[k // len(names)], names[k % len(names)]) for k in keys)
    return InterfaceFaces(pairs, inverse.reshape(-1), facet_sides(problem, facets, ea),
                          facet_sides(problem, facets, eb))


def conductor_facets(problem: AssembledProblem) -> np.ndarray:
    return np.concatenate([c.facets for c in problem.conductors] + [np.zeros(0, dtype=np.int64)])


def jump_density(faces: InterfaceFaces, vertex_D: np.ndarray) -> np.ndarray:
    """(D_b - D_a) . n_ab at both ends of every interface facet, C/m^2: the free surface charge
    (n_ab from a to b = the outward normal of side a)."""
    return -(normal_component(faces.side_a, vertex_D) + normal_component(faces.side_b, vertex_D))
