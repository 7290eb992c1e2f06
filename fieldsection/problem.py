"""Assembly stage: mesh + case -> the discrete variable-permittivity Poisson problem.

Solves -div(eps grad V) = 0 in the dielectrics; conductors are Dirichlet sets (a physical curve,
usually the rim of a hole, or a meshed physical surface held at one potential); the rest of the
outer boundary is grounded or carries zero normal D, as the case says.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Mapping

import numpy as np
import scipy.sparse as sp
from scipy.constants import epsilon_0
from skfem import Basis, ElementTriP1, ElementTriP2, ElementTriP3
from skfem.mapping import MappingAffine

from .case import Case
from .errors import CaseFileError
from .forms import linear_stiffness, permittivity_laplace
from .materials import Material
from .mesh import EXTERIOR, SectionMesh

OUTER_BOUNDARY = "outer boundary"
INFINITY = "infinity"  # the far surroundings of an axisymmetric open-space model, at 0 V
_ELEMENTS = {1: ElementTriP1, 2: ElementTriP2, 3: ElementTriP3}
_CENTROID = (np.array([[1 / 3], [1 / 3]]), np.array([0.5]))  # reference triangle's centroid, its area


@dataclass(frozen=True)
class Conductor:
    """A set of DOFs at one potential, and the facets where it meets the dielectric.

    ``facet_dielectric_element[k]`` is the dielectric element beside ``facets[k]``; a strip of zero
    thickness (a curve with dielectric on both sides) lists each facet twice, once per face. A floating
    conductor's potential is an unknown of the solve (``potential`` is NaN here) and ``charge``
    is its given net charge; otherwise ``potential`` is imposed.
    """

    name: str
    potential: float
    dofs: np.ndarray
    facets: np.ndarray
    facet_dielectric_element: np.ndarray
    is_region: bool = False
    floating: bool = False
    charge: float = 0.0
    joins_outer_boundary: bool = False  # a 0 V electrode that the grounded outer boundary touches


@dataclass(frozen=True)
class AssembledProblem:
    """The stiffness matrix K (F/m, includes eps) with its conductors and free DOFs."""

    section: SectionMesh
    basis: Basis
    stiffness: sp.csr_matrix
    relative_permittivity: np.ndarray  # per element; 1 inside conductor regions
    material_of_region: Mapping[str, Material]
    dielectric: np.ndarray  # bool per element
    conductors: tuple[Conductor, ...]
    free_dofs: np.ndarray
    outer_boundary: str
    symmetry_copies: int = 1
    notes: tuple[str, ...] = ()  # decisions taken on the user's behalf, for the report
    axisymmetric: bool = False  # K, charges and energy are for the whole body of revolution

    @property
    def fixed(self) -> tuple[Conductor, ...]:
        """Conductors held at a given potential (the rows of the capacitance matrix)."""
        return tuple(c for c in self.conductors if not c.floating)

    @property
    def floating(self) -> tuple[Conductor, ...]:
        return tuple(c for c in self.conductors if c.floating)

    @property
    def element_order(self) -> int:
        return next(order for order, kind in _ELEMENTS.items() if type(self.basis.elem) is kind)

    @property
    def ndofs(self) -> int:
        return self.basis.N


def _check_names(case: Case, section: SectionMesh) -> None:
    surfaces = set(section.region_names)
    curves = set(section.curve_facets)
    for region in case.regions:
        if region not in surfaces:
            hint = " (it is a physical curve; [regions] takes surfaces)" if region in curves else ""
            raise CaseFileError(
                f"regions.{region}: no physical surface {region!r} in the geometry{hint}; "
                f"physical surfaces there: {', '.join(sorted(surfaces))}"
            )
    for curve in case.insulated_curves:
        if curve not in curves:
            raise CaseFileError(
                f"boundary.curves.{curve}: no physical curve {curve!r} in the geometry; "
                f"curves there: {', '.join(sorted(curves)) or 'none'}"
            )
    for electrode in sorted(case.conductor_names):
        if electrode not in surfaces and electrode not in curves:
            raise CaseFileError(
                f"electrodes.{electrode}: no physical curve or surface {electrode!r} in the geometry; "
                f"curves there: {', '.join(sorted(curves)) or 'none'}; surfaces: {', '.join(sorted(surfaces))}"
            )
        if electrode in surfaces and electrode in curves:
            raise CaseFileError(f"electrodes.{electrode}: both a physical curve and a surface have this name; rename one")
    unassigned = sorted(surfaces - set(case.regions) - case.conductor_names - {EXTERIOR})
    if unassigned:
        raise CaseFileError(
            f"region {unassigned[0]!r} has no material: add {unassigned[0]} = \"<material>\" under [regions], "
            "or list it under [electrodes] if it is a conductor"
        )


def _dielectric_faces(section: SectionMesh, facets: np.ndarray, dielectric: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(facet, dielectric element) pairs along a conductor's facets.

    A facet with dielectric on both sides belongs to a conductor of zero thickness (a strip or foil
    drawn as a curve inside the insulation): both of its faces are listed.
    """
    f2t = section.mesh.f2t[:, facets]
    pairs_f, pairs_e = [], []
    for side in (0, 1):
        element = f2t[side]
        ok = (element >= 0) & dielectric[np.maximum(element, 0)]
        pairs_f.append(facets[ok])
        pairs_e.append(element[ok])
    return np.concatenate(pairs_f), np.concatenate(pairs_e)


def _medium_beyond(case: Case, section: SectionMesh) -> float:
    """Relative permittivity of the open space: that of the one region all along the circle."""
    f2t = section.mesh.f2t
    exterior = section.exterior
    a, b = f2t[0], f2t[1]
    on_circle = (b >= 0) & (exterior[a] != exterior[np.maximum(b, 0)])
    inside = np.where(exterior[a[on_circle]], b[on_circle], a[on_circle])
    regions = sorted({section.region_names[r] for r in np.unique(section.region_of_element[inside])})
    if any(r not in case.regions for r in regions):
        raise CaseFileError(f"electrode {next(r for r in regions if r not in case.regions)!r} touches the open-space "
                            "circle; draw the circle in the surrounding medium, clear of every conductor")
    materials = {case.regions[r].relative_permittivity for r in regions}
    if len(materials) != 1:
        raise CaseFileError(
            f"the open-space circle cuts through regions {', '.join(map(repr, regions))} of different materials; "
            "everything beyond it is taken as one medium, so draw the circle inside the surrounding medium (e.g. air)"
        )
    return materials.pop()


def weighted_permittivity(basis: Basis, section: SectionMesh, er: np.ndarray, axisymmetric: bool) -> np.ndarray:
    """eps at every quadrature point, F/m, with the weights of the model.

    Planar: eps per element, as ``eps[:, None]`` (a flat array would be read as nodal values).
    Axisymmetric: times 2 pi r. In the Kelvin image of open space, eps is also multiplied by
    R^2/rho^2 (rho the distance to the circle's centre): the inversion y = c + R^2 (x - c)/|x - c|^2
    scales lengths by lambda = R^2/|x - c|^2 = rho^2/R^2, so dV_x = lambda^-3 dV_y and
    |grad_x u| = lambda |grad_y u|, and the exterior energy becomes the integral of
    eps (R^2/rho^2) |grad_y u|^2 over the image, exactly (3D, about the axis).
    """
    eps = (epsilon_0 * er)[:, None]
    if not axisymmetric:
        return eps
    x = np.asarray(basis.global_coordinates())  # (2, nelements, nqp)
    weighted = eps * 2 * np.pi * x[0]
    circle = section.open_circle
    if circle is not None:
        exterior = section.exterior
        rho2 = (x[0, exterior] - circle.centre[0]) ** 2 + (x[1, exterior] - circle.centre[1]) ** 2
        weighted[exterior] *= circle.radius**2 / rho2
    return weighted


def assemble(case: Case, section: SectionMesh) -> AssembledProblem:
    """Build K and the conductor DOF sets; checks the case against the mesh's names."""
    _check_names(case, section)
    mesh = section.mesh
    order = case.mesh.element_order
    straight_planar = case.model == "planar" and not section.curved
    # with eps per element on straight planar elements, grad u . grad v has degree 2 (order - 1): one point
    # integrates P1 exactly, a degree-2 rule P2; the 2 pi r weight and curved elements need more
    if straight_planar and order == 1:
        # K is built directly (``linear_stiffness``) and the fields in closed form: the basis serves only for
        # its DOF numbering, so it and its mapping hold one element (~300 MB less at a million nodes)
        one = np.array([0])
        basis = Basis(mesh, ElementTriP1(), mapping=MappingAffine(mesh, tind=one), quadrature=_CENTROID, elements=one,
                      disable_doflocs=True)
        basis.doflocs = mesh.p  # P1's DOFs are the vertices (mapped through element 0 they would all be wrong)
    else:
        basis = Basis(mesh, _ELEMENTS[order](), intorder=2 * (order - 1) if straight_planar else 2 * order)

    conductor_regions = [r for r in case.conductor_names if r in section.region_names]
    dielectric = np.ones(mesh.nelements, dtype=bool)
    er = np.ones(mesh.nelements)
    for region, material in case.regions.items():
        er[section.elements_of(region)] = material.relative_permittivity
    for region in conductor_regions:
        dielectric[section.elements_of(region)] = False
    if not dielectric.any():
        raise CaseFileError("every region is an electrode; at least one region must be a dielectric")
    exterior = section.exterior
    if exterior.any():
        # the medium continues beyond the circle; its mapped image has no material entry, so it is
        # never screened for hotspots nor drawn, but its fluxes count (they are conformally invariant)
        er[exterior] = _medium_beyond(case, section)

    axisymmetric = case.model == "axisymmetric"
    if axisymmetric and mesh.p[0].min() < -1e-9 * np.ptp(mesh.p[0]):
        k = int(np.argmin(mesh.p[0]))
        raise CaseFileError(
            f"a point of the axisymmetric model lies at r < 0: ({mesh.p[0, k] * 1e3:.4g}, {mesh.p[1, k] * 1e3:.4g}) mm; "
            "x is the radius, so draw the section at x >= 0 with the axis of revolution on x = 0"
        )
    if straight_planar and order == 1:
        stiffness = linear_stiffness(mesh, epsilon_0 * er)
    else:
        stiffness = permittivity_laplace.assemble(basis, eps=weighted_permittivity(basis, section, er, axisymmetric)).tocsr()

    conductors: list[Conductor] = []
    wanted = [(name, v, False) for name, v in case.electrodes.items()] + [(n, q, True) for n, q in case.floating.items()]
    for name, value, floating in wanted:
        if name in conductor_regions:
            elements = section.elements_of(name)
            dofs = basis.get_dofs(elements=elements).all()
            a, b = mesh.f2t[0], mesh.f2t[1]
            on_rim = ((a >= 0) & (b >= 0)) & (
                (np.isin(a, elements) & dielectric[np.maximum(b, 0)])
                | (np.isin(b, elements) & dielectric[np.maximum(a, 0)])
            )
            facets = np.flatnonzero(on_rim)
            is_region = True
        else:
            facets = section.curve_facets[name]
            dofs = basis.get_dofs(facets=facets).all()
            is_region = False
        if axisymmetric and name not in conductor_regions and facets.size and \
                np.isin(facets, axis_facets(mesh, boundary_only=False)).all():
            raise CaseFileError(
                f"electrode {name!r} lies on the axis of revolution: a wire of zero radius has no capacitance in "
                "3D; draw it with a radius"
            )
        faces, beside = _dielectric_faces(section, facets, dielectric)
        if floating and not faces.size:
            raise CaseFileError(
                f"floating electrode {name!r} touches no dielectric, so its potential is undefined; surround it "
                "with insulation in the geometry"
            )
        # a floating conductor's charge is given for the full section: the model carries its share
        share = value / case.symmetry_copies if floating else 0.0
        conductors.append(Conductor(name, np.nan if floating else value, np.unique(dofs), faces, beside,
                                    is_region, floating, share))

    notes: list[str] = []
    if case.outer_boundary == "grounded":
        claimed = [section.curve_facets[c.name] for c in conductors if not c.is_region]
        claimed += [section.curve_facets[name] for name in case.insulated_curves]
        if axisymmetric:  # the axis of revolution is no boundary: its facets carry no condition
            claimed.append(axis_facets(mesh))
        outer = np.setdiff1d(mesh.boundary_facets(), np.concatenate(claimed) if claimed else [])
        outer = outer[dielectric[mesh.f2t[0, outer]]]
        if outer.size:
            dofs = np.unique(basis.get_dofs(facets=outer).all())
            ground = next((k for k, c in enumerate(conductors)
                           if c.potential == 0.0 and np.isin(c.dofs, dofs).any()), None)
            absorbed = sorted(name for name, f in section.curve_facets.items() if np.isin(f, outer).all())
            if absorbed:
                notes.append(f"physical curve(s) {', '.join(map(repr, absorbed))} are grounded as part of the outer "
                             "boundary; list them under [electrodes] or [boundary.curves] if that is not meant")
            if ground is None:
                conductors.append(Conductor(OUTER_BOUNDARY, 0.0, dofs, outer, mesh.f2t[0, outer]))
            else:  # a 0 V electrode joined to the grounded boundary (e.g. a ground plane and its enclosure): one conductor
                joined = conductors[ground]
                conductors[ground] = replace(
                    joined, dofs=np.union1d(joined.dofs, dofs), facets=np.concatenate([joined.facets, outer]),
                    facet_dielectric_element=np.concatenate([joined.facet_dielectric_element, mesh.f2t[0, outer]]),
                    joins_outer_boundary=True)
                notes.append(f"the grounded outer boundary touches electrode {joined.name!r} (0 V) and is counted "
                             "as part of it")

    if axisymmetric and section.open_circle is not None:
        # the Kelvin image's centre is the point at infinity, where the potential is 0 V
        exterior_vertices = np.unique(mesh.t[:, section.exterior])
        centre = exterior_vertices[np.argmin(np.hypot(*(mesh.p[:, exterior_vertices].T - section.open_circle.centre).T))]
        conductors.append(Conductor(INFINITY, 0.0, np.array([centre]), np.zeros(0, dtype=np.int64),
                                    np.zeros(0, dtype=np.int64)))
    _check_holes(case, section)
    _check_touching(conductors, basis)
    is_free = np.ones(basis.N, dtype=bool)
    for conductor in conductors:
        is_free[conductor.dofs] = False
    free = np.flatnonzero(is_free)
    material_of_region = dict(case.regions)
    return AssembledProblem(section, basis, stiffness, er, material_of_region, dielectric, tuple(conductors),
                            free, case.outer_boundary, case.symmetry_copies, tuple(notes), axisymmetric)


def dof_location(basis: Basis, dof: int) -> np.ndarray:
    """Where a DOF sits, m: a vertex's own coordinates (vertex DOFs come first), else the basis's."""
    if dof < basis.mesh.nvertices:
        return basis.mesh.p[:, dof]
    return basis.doflocs[:, dof]


def axis_facets(mesh, boundary_only: bool = True) -> np.ndarray:
    """Facets (boundary facets only, by default) lying on the axis of revolution x = 0."""
    candidates = mesh.boundary_facets() if boundary_only else np.arange(mesh.nfacets)
    on_axis = (np.abs(mesh.p[0, mesh.facets[:, candidates]]) <= 1e-9 * np.ptp(mesh.p[0])).all(axis=0)
    return candidates[on_axis]


def conductor_indicator(problem: "AssembledProblem", conductors: tuple[Conductor, ...]) -> np.ndarray:
    """(ndofs, len(conductors)) array: 1 where a DOF belongs to the conductor, else 0."""
    indicator = np.zeros((problem.ndofs, len(conductors)))
    for i, conductor in enumerate(conductors):
        indicator[conductor.dofs, i] = 1.0
    return indicator


def _check_holes(case: Case, section: SectionMesh) -> None:
    """Every boundary loop inside the section (the rim of a hole) must be an electrode or insulated.

    A forgotten conductor would otherwise be grounded with the outer boundary, or act as an
    uncharged void: a plausible-looking but wrong field.
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    mesh = section.mesh
    drawn = ~section.exterior
    a, b = mesh.f2t
    rim = drawn[a] & ((b < 0) | ~drawn[np.maximum(b, 0)])
    rim |= (b >= 0) & drawn[np.maximum(b, 0)] & ~drawn[a]
    facets = np.flatnonzero(rim)
    ends = mesh.facets[:, facets]
    n = mesh.nvertices
    _, loop_of_vertex = connected_components(coo_matrix((np.ones(facets.size), (ends[0], ends[1])), shape=(n, n)),
                                             directed=False)
    loop = loop_of_vertex[ends[0]]
    # each connected piece of the section has one outermost loop: the one through its right-most vertex
    edges = mesh.facets[:, mesh.f2t[0] >= 0]
    _, piece_of_vertex = connected_components(
        coo_matrix((np.ones(edges.shape[1]), (edges[0], edges[1])), shape=(n, n)), directed=False)
    piece = piece_of_vertex[ends[0]]
    order = np.lexsort((mesh.p[0, ends[0]], piece))
    last_of_piece = order[np.r_[np.flatnonzero(np.diff(piece[order])), order.size - 1]]
    outer_loops = loop[last_of_piece]
    claimed = np.zeros(mesh.nfacets, dtype=bool)
    for name in case.conductor_names | case.insulated_curves:
        if name in section.curve_facets:
            claimed[section.curve_facets[name]] = True
    open_rim = facets[~np.isin(loop, outer_loops) & ~claimed[facets]]
    if open_rim.size:
        x, y = mesh.p[:, mesh.facets[:, open_rim[0]]].mean(axis=1)
        raise CaseFileError(
            f"the rim of a hole near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm is neither an electrode nor insulated; if it "
            "is a conductor, list its physical curve under [electrodes]; if it is an empty, uncharged cavity, list "
            "it under [boundary.curves] as \"insulated\"; if two surfaces were meant to touch, fragment them"
        )


def _check_touching(conductors: list[Conductor], basis: Basis) -> None:
    owner = np.full(basis.N, -1, dtype=np.int64)
    for index, conductor in enumerate(conductors):
        shared = conductor.dofs[owner[conductor.dofs] >= 0]
        if shared.size:
            other = conductors[owner[shared[0]]]
            x, y = dof_location(basis, int(shared[0]))
            where = f"({x * 1e3:.4g}, {y * 1e3:.4g}) mm"
            outer = [c for c in (other, conductor) if c.name == OUTER_BOUNDARY or c.joins_outer_boundary]
            if outer:
                named = (conductor if outer[0] is other else other).name
                raise CaseFileError(
                    f"electrode {named!r} touches the grounded outer boundary at {where}; move it off the boundary, "
                    "or name the boundary curves as electrodes of their own and set outer = \"insulated\""
                )
            raise CaseFileError(
                f"electrodes {other.name!r} and {conductor.name!r} touch at {where}; "
                "separate them with insulation in the geometry, or merge them into one electrode"
            )
        owner[conductor.dofs] = index
