"""Charges: free surface charge on electrodes, bound surface charge on material faces.

Conventions (fixed once, tested on the coaxial case):
- free charge density sigma_f = D . n with n pointing out of the conductor into the dielectric;
- bound charge density on a face of dielectric body a: sigma_b = P_a . n_a, n_a its outward
  normal; on an interface a|b the two sides add up to sigma_b = (P_a - P_b) . n_ab, n_ab from a to b;
  on a face touching a conductor sigma_b = P . n_out of the dielectric.
Densities are sampled at facet ends from the vertex values (for tables and plots); totals are
Gauss integrals along each element's own, possibly curved, edge (``fields.outward_flux``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from scipy.constants import epsilon_0

from .fields import ElementFields, outward_flux
from .mesh import EXTERIOR
from .problem import OUTER_BOUNDARY, AssembledProblem
from .solve import Solution


@dataclass(frozen=True)
class FacetSides:
    """Facet-element pairs with the facet's endpoints expressed as local vertices of the element."""

    facets: np.ndarray
    elements: np.ndarray
    local_vertices: np.ndarray  # (n, 2) local indices 0..2
    lengths: np.ndarray
    outward_normals: np.ndarray  # (n, 2), out of the element


def facet_sides(problem: AssembledProblem, facets: np.ndarray, elements: np.ndarray) -> FacetSides:
    mesh = problem.section.mesh
    ends = mesh.facets[:, facets].T  # (n, 2) global vertices
    verts = mesh.t[:, elements].T  # (n, 3)
    local = np.stack([np.argmax(verts == ends[:, k, None], axis=1) for k in range(2)], axis=1)
    a, b = mesh.p[:, ends[:, 0]].T, mesh.p[:, ends[:, 1]].T
    tangent = b - a
    lengths = np.hypot(tangent[:, 0], tangent[:, 1])
    normals = np.stack([tangent[:, 1], -tangent[:, 0]], axis=1) / lengths[:, None]
    midpoints = 0.5 * (a + b)
    centroid = mesh.p[:, verts.T].mean(axis=1).T
    flip = np.einsum("ij,ij->i", normals, midpoints - centroid) < 0
    normals[flip] *= -1
    return FacetSides(facets, elements, local, lengths, normals)


def normal_component(sides: FacetSides, vertex_field: np.ndarray) -> np.ndarray:
    """vertex_field (nelements, 3, 2) . outward normal at both facet ends, shape (n, 2)."""
    values = vertex_field[sides.elements[:, None], sides.local_vertices]  # (n, 2, 2)
    return np.einsum("nkd,nd->nk", values, sides.outward_normals)


@dataclass(frozen=True)
class ConductorCharge:
    name: str
    potential: float
    charge_from_flux: float  # C/m, integral of sigma_f over its surface
    peak_abs_sigma_f: float  # C/m^2
    sides: FacetSides
    sigma_f: np.ndarray  # (n, 2) at facet ends


@dataclass(frozen=True)
class InterfaceCharge:
    """Bound charge on the faces between two named regions (or a region and a conductor/boundary)."""

    region_a: str
    region_b: str
    bound_charge: float  # C/m
    peak_abs_sigma_b: float  # C/m^2
    facets: np.ndarray
    sigma_b: np.ndarray  # (n, 2) at facet ends, order of mesh.facets


@dataclass(frozen=True)
class BodyCharge:
    region: str
    bound_charge: float  # C/m, closed-surface total; ~0 for a body without free charge inside
    absolute_bound_charge: float  # C/m, integral of |sigma_b|, the scale of the check


@dataclass(frozen=True)
class ChargeResult:
    conductors: tuple[ConductorCharge, ...]
    interfaces: tuple[InterfaceCharge, ...]
    bodies: tuple[BodyCharge, ...]


def _region_faces(problem: AssembledProblem) -> FacetSides:
    """Every facet-side where a dielectric element meets another region, a conductor or the boundary."""
    mesh = problem.section.mesh
    region = problem.section.region_of_element
    f2t = mesh.f2t
    facets, elements = [], []
    for side in (0, 1):
        elem, other = f2t[side], f2t[1 - side]
        valid = elem >= 0
        differs = (other < 0) | (region[np.maximum(other, 0)] != region[np.maximum(elem, 0)])
        keep = valid & problem.dielectric[np.maximum(elem, 0)] & differs
        facets.append(np.flatnonzero(keep))
        elements.append(elem[keep])
    return facet_sides(problem, np.concatenate(facets), np.concatenate(elements))


def _flux(solution: Solution, sides: FacetSides, coefficient: np.ndarray) -> np.ndarray:
    return outward_flux(solution, sides.elements, sides.local_vertices, sides.outward_normals,
                        coefficient[sides.elements])


def compute_charges(solution: Solution, fields: ElementFields) -> ChargeResult:
    problem = solution.problem
    section = problem.section
    names = section.region_names
    region = section.region_of_element
    eps = epsilon_0 * problem.relative_permittivity

    conductors = []
    for conductor in problem.conductors:
        sides = facet_sides(problem, conductor.facets, conductor.facet_dielectric_element)
        sigma_f = -normal_component(sides, fields.D)  # n into the dielectric = -outward of its element
        charge = -float(_flux(solution, sides, eps).sum())
        conductors.append(ConductorCharge(
            conductor.name, conductor.potential, charge,
            float(np.abs(sigma_f).max()) if sigma_f.size else 0.0, sides, sigma_f,
        ))

    faces = _region_faces(problem)
    p_n = normal_component(faces, fields.P)
    per_side = _flux(solution, faces, eps - epsilon_0)
    side_region = region[faces.elements]
    bodies = []
    for index, name in enumerate(names):
        mine = side_region == index
        if name == EXTERIOR or not problem.dielectric[region == index].any():
            continue
        bodies.append(BodyCharge(name, float(per_side[mine].sum()),
                                 float((faces.lengths[mine] * np.abs(p_n[mine]).mean(axis=1)).sum())))

    # label each facet by the two things that meet there; add both sides' P.n per facet
    mesh = section.mesh
    conductor_label = np.full(mesh.nfacets, -1, dtype=np.int64)
    for k, conductor in enumerate(problem.conductors):
        conductor_label[conductor.facets] = k
    labels = [*names, *(f"electrode {c.name}" if c.name != OUTER_BOUNDARY else c.name
                        for c in problem.conductors), "insulated boundary"]
    n_regions, n_cond = len(names), len(problem.conductors)

    unique_facets, inverse = np.unique(faces.facets, return_inverse=True)
    sigma_b = np.zeros((unique_facets.size, 2))
    np.add.at(sigma_b, inverse, p_n)  # end values follow mesh.facets order on both sides

    f2t = mesh.f2t[:, unique_facets]
    def label_of(elements: np.ndarray) -> np.ndarray:
        out = np.full(elements.size, n_regions + n_cond, dtype=np.int64)  # insulated boundary
        inside = elements >= 0
        out[inside] = region[elements[inside]]
        return out
    a, b = label_of(f2t[0]), label_of(f2t[1])
    cond = conductor_label[unique_facets]
    # a conductor face: replace the conductor-side label by the conductor's
    a = np.where((cond >= 0) & ((f2t[0] < 0) | ~problem.dielectric[np.maximum(f2t[0], 0)]), n_regions + cond, a)
    b = np.where((cond >= 0) & ((f2t[1] < 0) | ~problem.dielectric[np.maximum(f2t[1], 0)]), n_regions + cond, b)
    pair_lo, pair_hi = np.minimum(a, b), np.maximum(a, b)
    totals = np.zeros(unique_facets.size)
    np.add.at(totals, inverse, per_side)
    interfaces = []
    pair_key = pair_lo * (len(labels) + 1) + pair_hi
    for key in np.unique(pair_key):
        sel = pair_key == key
        lo, hi = divmod(int(key), len(labels) + 1)
        interfaces.append(InterfaceCharge(labels[lo], labels[hi], float(totals[sel].sum()),
                                          float(np.abs(sigma_b[sel]).max()), unique_facets[sel], sigma_b[sel]))
    return ChargeResult(tuple(conductors), tuple(interfaces), tuple(bodies))
