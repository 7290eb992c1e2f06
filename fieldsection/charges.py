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
from .problem import OUTER_BOUNDARY, AssembledProblem, axis_facets
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


def _conductor_of_facet(problem: AssembledProblem) -> np.ndarray:
    """Index into ``problem.conductors`` of the conductor on each facet, -1 elsewhere."""
    label = np.full(problem.section.mesh.nfacets, -1, dtype=np.int64)
    for k, conductor in enumerate(problem.conductors):
        label[conductor.facets] = k
    return label


def _region_faces(problem: AssembledProblem, conductor_of_facet: np.ndarray) -> FacetSides:
    """Every facet-side where a dielectric element meets another region, a conductor or the boundary
    (both faces of a strip of zero thickness included)."""
    mesh = problem.section.mesh
    region = problem.section.region_of_element
    f2t = mesh.f2t
    on_conductor = conductor_of_facet >= 0
    facets, elements = [], []
    for side in (0, 1):
        elem, other = f2t[side], f2t[1 - side]
        valid = elem >= 0
        differs = (other < 0) | (region[np.maximum(other, 0)] != region[np.maximum(elem, 0)]) | on_conductor
        keep = valid & problem.dielectric[np.maximum(elem, 0)] & differs
        facets.append(np.flatnonzero(keep))
        elements.append(elem[keep])
    return facet_sides(problem, np.concatenate(facets), np.concatenate(elements))


def _fluxes(solution: Solution, groups: list[tuple[FacetSides, np.ndarray]]) -> list[np.ndarray]:
    """``outward_flux`` of each group of facet sides with its coefficient per element, in one call: its
    quadrature's set-up costs about as much for every electrode and face together as for one."""
    joined = [np.concatenate(parts) for parts in zip(*((sides.elements, sides.local_vertices, sides.outward_normals,
                                                         coefficient[sides.elements]) for sides, coefficient in groups))]
    flux = outward_flux(solution, *joined)
    return np.split(flux, np.cumsum([len(sides.elements) for sides, _ in groups])[:-1])


def compute_charges(solution: Solution, fields: ElementFields) -> ChargeResult:
    problem = solution.problem
    section = problem.section
    names = section.region_names
    region = section.region_of_element
    eps = epsilon_0 * problem.relative_permittivity

    conductor_sides = [facet_sides(problem, c.facets, c.facet_dielectric_element) for c in problem.conductors]
    conductor_label = _conductor_of_facet(problem)
    faces = _region_faces(problem, conductor_label)
    *conductor_fluxes, per_side = _fluxes(solution, [*((sides, eps) for sides in conductor_sides),
                                                     (faces, eps - epsilon_0)])
    conductors = []
    for conductor, sides, flux in zip(problem.conductors, conductor_sides, conductor_fluxes):
        sigma_f = -normal_component(sides, fields.D)  # n into the dielectric = -outward of its element
        conductors.append(ConductorCharge(
            conductor.name, conductor.potential, -float(flux.sum()),
            float(np.abs(sigma_f).max()) if sigma_f.size else 0.0, sides, sigma_f,
        ))

    p_n = normal_component(faces, fields.P)
    side_region = region[faces.elements]
    bodies = []
    for index, name in enumerate(names):
        mine = side_region == index
        if name == EXTERIOR or not problem.dielectric[region == index].any():
            continue
        bodies.append(BodyCharge(name, float(per_side[mine].sum()),
                                 float((faces.lengths[mine] * np.abs(p_n[mine]).mean(axis=1)).sum())))

    # label each face by the two things that meet there: (its region, the other side), where the other
    # side is a conductor on conductor facets, else the neighbouring region or the kind of boundary
    mesh = section.mesh
    n_regions, n_cond = len(names), len(problem.conductors)
    labels = [*names, *(f"electrode {c.name}" if c.name != OUTER_BOUNDARY else c.name for c in problem.conductors),
              "insulated boundary", "axis"]
    insulated, axis = n_regions + n_cond, n_regions + n_cond + 1
    f2t = mesh.f2t[:, faces.facets]
    other = np.where(f2t[0] == faces.elements, f2t[1], f2t[0])
    other_label = np.where(other >= 0, region[np.maximum(other, 0)], insulated)
    if problem.axisymmetric:
        on_axis = np.isin(faces.facets, axis_facets(mesh))
        other_label = np.where((other < 0) & on_axis, axis, other_label)
    cond = conductor_label[faces.facets]
    other_label = np.where(cond >= 0, n_regions + cond, other_label)
    own = region[faces.elements]
    # an interface between two regions gathers both of its sides in one row
    pair_lo, pair_hi = np.minimum(own, other_label), np.maximum(own, other_label)
    width = len(labels) + 1
    row_key = pair_lo * width + pair_hi
    hidden = {names.index(EXTERIOR)} if EXTERIOR in names else set()
    hidden.add(axis)  # faces on the axis of revolution sweep no area
    interfaces = []
    for key in np.unique(row_key):  # one row per kind of face, not per facet
        lo, hi = divmod(int(key), width)
        if lo in hidden or hi in hidden:
            continue
        sel = row_key == key
        unique_facets, inverse = np.unique(faces.facets[sel], return_inverse=True)
        sigma_b = np.zeros((unique_facets.size, 2))
        np.add.at(sigma_b, inverse, p_n[sel])  # end values follow mesh.facets order on every side
        interfaces.append(InterfaceCharge(labels[lo], labels[hi], float(per_side[sel].sum()),
                                          float(np.abs(sigma_b).max()), unique_facets, sigma_b))
    return ChargeResult(tuple(conductors), tuple(interfaces), tuple(bodies))
