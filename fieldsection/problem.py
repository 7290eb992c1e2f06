"""Assembly stage: mesh + case -> the discrete variable-permittivity Poisson problem.

Solves -div(eps grad V) = 0 in the dielectrics; conductors are Dirichlet sets (a physical curve,
usually the rim of a hole, or a meshed physical surface held at one potential); the rest of the
outer boundary is grounded or carries zero normal D, as the case says.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np
import scipy.sparse as sp
from scipy.constants import epsilon_0
from skfem import Basis, ElementTriP1, ElementTriP2

from .case import Case
from .errors import CaseFileError, MeshError
from .forms import permittivity_laplace
from .materials import Material
from .mesh import EXTERIOR, SectionMesh

OUTER_BOUNDARY = "outer boundary"
_ELEMENTS = {1: ElementTriP1, 2: ElementTriP2}


@dataclass(frozen=True)
class Conductor:
    """A set of DOFs at one potential, and the facets where it meets the dielectric.

    ``facet_dielectric_element[k]`` is the dielectric element beside ``facets[k]``. A floating
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

    @property
    def fixed(self) -> tuple[Conductor, ...]:
        """Conductors held at a given potential (the rows of the capacitance matrix)."""
        return tuple(c for c in self.conductors if not c.floating)

    @property
    def floating(self) -> tuple[Conductor, ...]:
        return tuple(c for c in self.conductors if c.floating)

    @property
    def element_order(self) -> int:
        return 2 if isinstance(self.basis.elem, ElementTriP2) else 1

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


def _dielectric_side(section: SectionMesh, facets: np.ndarray, dielectric: np.ndarray, what: str) -> np.ndarray:
    """The dielectric element beside each facet; raise where there is none."""
    f2t = section.mesh.f2t[:, facets]
    first = np.where((f2t[0] >= 0) & dielectric[np.maximum(f2t[0], 0)], f2t[0], -1)
    second = np.where((f2t[1] >= 0) & dielectric[np.maximum(f2t[1], 0)], f2t[1], -1)
    both = (first >= 0) & (second >= 0)
    if both.any():
        x, y = section.mesh.p[:, section.mesh.facets[:, facets[both][0]]].mean(axis=1)
        raise MeshError(
            f"{what} runs through a dielectric near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm; an electrode curve must "
            "bound a hole or a conductor region, not split a dielectric"
        )
    side = np.maximum(first, second)
    return side


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


def assemble(case: Case, section: SectionMesh) -> AssembledProblem:
    """Build K and the conductor DOF sets; checks the case against the mesh's names."""
    _check_names(case, section)
    mesh = section.mesh
    basis = Basis(mesh, _ELEMENTS[case.mesh.element_order](), intorder=2 * case.mesh.element_order)

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

    # eps[:, None] broadcasts over quadrature points (a flat array would be read as nodal values)
    stiffness = permittivity_laplace.assemble(basis, eps=(epsilon_0 * er)[:, None]).tocsr()

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
        side = _dielectric_side(section, facets, dielectric, f"electrode {name!r}") if facets.size else facets
        keep = side >= 0
        if floating and not keep.any():
            raise CaseFileError(
                f"floating electrode {name!r} touches no dielectric, so its potential is undefined; surround it "
                "with insulation in the geometry"
            )
        conductors.append(Conductor(name, np.nan if floating else value, np.unique(dofs), facets[keep], side[keep],
                                    is_region, floating, value if floating else 0.0))

    if case.outer_boundary == "grounded":
        claimed = [section.curve_facets[c.name] for c in conductors if not c.is_region]
        claimed += [section.curve_facets[name] for name in case.insulated_curves]
        outer = np.setdiff1d(mesh.boundary_facets(), np.concatenate(claimed) if claimed else [])
        outer = outer[dielectric[mesh.f2t[0, outer]]]
        if outer.size:
            dofs = basis.get_dofs(facets=outer).all()
            for other in conductors:  # nodes shared with a named 0 V electrode belong to it
                if other.potential == 0.0:
                    dofs = np.setdiff1d(dofs, other.dofs)
            conductors.append(Conductor(OUTER_BOUNDARY, 0.0, np.unique(dofs), outer, mesh.f2t[0, outer]))

    _check_touching(conductors, basis)
    taken = np.concatenate([c.dofs for c in conductors])
    free = np.setdiff1d(np.arange(basis.N), taken)
    material_of_region = dict(case.regions)
    return AssembledProblem(section, basis, stiffness, er, material_of_region, dielectric, tuple(conductors),
                            free, case.outer_boundary, case.symmetry_copies)


def _check_touching(conductors: list[Conductor], basis: Basis) -> None:
    owner = np.full(basis.N, -1, dtype=np.int64)
    for index, conductor in enumerate(conductors):
        shared = conductor.dofs[owner[conductor.dofs] >= 0]
        if shared.size:
            other = conductors[owner[shared[0]]]
            x, y = basis.doflocs[:, shared[0]]
            raise CaseFileError(
                f"electrodes {other.name!r} and {conductor.name!r} touch at ({x * 1e3:.4g}, {y * 1e3:.4g}) mm; "
                "separate them with insulation in the geometry, or merge them into one electrode"
            )
        owner[conductor.dofs] = index
