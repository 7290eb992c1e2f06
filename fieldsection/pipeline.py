"""The pipeline, stage by stage: case -> mesh -> assembled problem -> solution -> derived quantities.

Each stage's output is an immutable value passed downstream; nothing reaches back upstream. With
adaptive refinement the whole chain runs again on a finer mesh (gmsh's first mesh, refined where the
previous pass's error indicator asks), until the capacitance and every non-singular peak field settle.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, fields as dataclass_fields
from functools import partial
from typing import Callable, Mapping

import numpy as np
from scipy.spatial import cKDTree

from .adapt import PassRecord, region_vertex_fields, wanted_element_sizes
from .analysis import check_against_case, electrostatic_case, run_analysis
from .blas_threads import one_blas_thread
from .capacitance import CapacitanceResult, compute_capacitance
from .case import Case
from .certificate import SINGULAR, PeakCertificate, certify
from .charges import ChargeResult, compute_charges
from .discharge import CoronaCheck, GasGapScreening, screen_corona, screen_gas_gaps
from .fields import ElementFields, element_fields
from .gmsh_adapter import RawMesh, mesh_geometry
from .hotspots import HotspotResult, find_hotspots
from .local_refinement import refined_raw
from .mesh import SectionMesh, add_open_space, build_section_mesh, find_open_circle
from .problem import AssembledProblem, assemble
from .recovery import Projector, Recovery, projector, recover_field, refinement_indicator
from .singularity import corner_theory
from .solve import Solution, solve

#: mesh growth wanted of each adaptive pass (DOFs of the next mesh / DOFs of this one)
GROWTH_PER_PASS = 2.5
#: refinement makes more elements than the wanted sizes imply (the closure's green and blue elements; an
#: element asked to grow keeps its size): about 1.35 x on the demo; learnt anew from each pass
FIRST_OVERSHOOT = 1.35


@dataclass(frozen=True)
class Certificates:
    """A certificate for every reported peak: per dielectric region, per hotspot, per triple point."""

    regions: Mapping[str, PeakCertificate]
    hotspots: tuple[PeakCertificate, ...]  # in the order of ``HotspotResult.hotspots``
    triple_points: tuple[PeakCertificate, ...]  # in the order of ``HotspotResult.triple_points``


@dataclass(frozen=True)
class _Computed:
    """What one pass computes on its mesh, from the mesh to the capacitance and the recovered field."""

    section: SectionMesh
    problem: AssembledProblem
    solution: Solution
    fields: ElementFields
    charges: ChargeResult
    capacitance: CapacitanceResult
    recovery: Recovery
    #: |E| at element vertices (nelements, 3), V/m: the field the peaks and hotspots are searched on
    #: (``Recovery.peak_search_field``)
    peak_search_field: np.ndarray


@dataclass(frozen=True)
class SectionResult(_Computed):
    """Everything computed for one case (on the last mesh); the report stage only reads it."""

    case: Case
    hotspots: HotspotResult
    gas_gaps: tuple[GasGapScreening, ...] = ()
    stage_seconds: dict[str, float] = field(default_factory=dict)
    passes: tuple[PassRecord, ...] = ()
    certificates: Certificates | None = None
    stop_reason: str = ""
    corona: tuple[CoronaCheck, ...] = ()
    #: the DC (conduction_dc.DCResult) or AC (harmonic_ac.ACResult) result of [analysis], on the last mesh
    conduction: object | None = None


@dataclass(frozen=True)
class _Pass(_Computed):
    """One pass of the loop; once a newer pass exists only ``record`` is kept (the rest is None)."""

    record: PassRecord
    raw: RawMesh | None = None  # the mesh as meshed or refined, before open space: the next pass refines it
    projector: Projector | None = None  # the recovery's projection on this mesh, for the next pass's indicator


@one_blas_thread()
def analyse(case: Case, on_stage: Callable[[str], None] | None = None) -> SectionResult:
    """Run every computing stage for ``case``; ``on_stage(name)`` is called as each stage starts."""
    seconds: dict[str, float] = {}
    if case.analysis.kind != "electrostatic":  # the analysis's names and materials, before any meshing
        check_against_case(case.analysis, case.regions, case.electrodes, case.floating)
    given, case = case, electrostatic_case(case)  # AC with phases: the electrostatic solution is the instant t = 0

    def stage(name: str, work: Callable[[], object]):
        if on_stage is not None:
            on_stage(name)
        start = time.perf_counter()
        value = work()
        seconds[name] = seconds.get(name, 0.0) + time.perf_counter() - start
        return value

    settings = case.refinement
    passes: list[_Pass] = []
    next_mesh: RawMesh | None = None  # None: gmsh meshes the geometry
    stop_reason = "adaptive refinement is off: one mesh" if not settings.adaptive else ""
    growth = GROWTH_PER_PASS
    overshoot = FIRST_OVERSHOOT  # DOFs gmsh delivers / DOFs asked for, learnt from the passes so far
    peaks: tuple[HotspotResult, Certificates] | None = None  # of the last pass, once checked

    def refine(source: _Pass) -> RawMesh:
        def work() -> RawMesh:
            indicator = refinement_indicator(source.solution, source.projector)
            wanted = wanted_element_sizes(source.section, indicator,
                                          case.mesh.element_order, growth)
            return refined_raw(source.raw, wanted[:len(source.raw.triangles)], case.mesh.curved)
        return stage("refine", work)

    while True:
        current = _one_pass(case, next_mesh, stage)
        if passes:
            overshoot = current.problem.ndofs / (passes[-1].record.ndofs * growth)
        if passes and current.problem.ndofs > settings.max_dofs:
            # gmsh made more elements than asked: ask for fewer, or stop at the budget
            growth *= 0.9 * settings.max_dofs / current.problem.ndofs
            if growth * overshoot < 1.15:
                stop_reason = f"DOF budget of {settings.max_dofs} spent"
                break
            next_mesh = refine(passes[-1])
            continue
        if passes:  # an earlier pass lives on as its record only: its mesh, matrix and fields are freed
            passes[-1] = _Pass(None, None, None, None, None, None, None, None, passes[-1].record, None)
        passes.append(current)
        peaks = None
        if not settings.adaptive:
            break
        if len(passes) >= 2:
            settled, peaks = stage("convergence", lambda: _settled(case, passes))
            if settled:
                stop_reason = f"converged in {len(passes)} passes"
                break
        if len(passes) >= settings.max_passes:
            stop_reason = f"pass limit of {settings.max_passes} reached"
            break
        target = min(GROWTH_PER_PASS, 0.9 * settings.max_dofs / current.problem.ndofs)
        if target < 1.15:
            stop_reason = f"DOF budget of {settings.max_dofs} spent"
            break
        growth = target / overshoot
        next_mesh = refine(current)

    last = passes[-1]
    problem = last.problem
    if peaks is None:
        hotspots = stage("hotspots", lambda: find_hotspots(problem, last.peak_search_field, case.hotspot_fraction))
        certificates = stage("certificates", lambda: _certify_all(case, passes, hotspots))
    else:  # the convergence check of the last pass found them already
        hotspots, certificates = peaks
    gas_gaps = stage("gas gaps", lambda: screen_gas_gaps(problem, last.fields, case.gas_pressure))
    corona = stage("corona", lambda: screen_corona(problem, last.peak_search_field, case.gas_pressure))
    conduction = None
    if case.analysis.kind != "electrostatic":
        conduction = stage(case.analysis.kind, lambda: run_analysis(given, problem, last.fields.E_magnitude,
                                                                             last.solution.potential))
    computed = {f.name: getattr(last, f.name) for f in dataclass_fields(_Computed)}
    return SectionResult(**computed, case=case, hotspots=hotspots, gas_gaps=gas_gaps, stage_seconds=seconds,
                         passes=tuple(p.record for p in passes), certificates=certificates,
                         stop_reason=stop_reason, corona=corona, conduction=conduction)


def _one_pass(case: Case, refined: RawMesh | None, stage) -> _Pass:
    start = time.perf_counter()
    own = refined if refined is not None else stage("mesh", partial(mesh_geometry, case.geometry, case.mesh,
                                                                    case.conductor_names))
    circle = None
    if case.outer_boundary == "open":
        circle = find_open_circle(own, case.conductor_names | case.insulated_curves, case.model == "axisymmetric")
    raw = stage("open space", (lambda: own) if circle is None else partial(add_open_space, own, circle))
    section = stage("convert mesh", partial(build_section_mesh, raw, circle))
    # gmsh's arrays (~70 MB at a million nodes) are kept, as ``own``, only for the next pass to refine
    del raw
    if not case.refinement.adaptive:
        own = None
    problem = stage("assemble", lambda: assemble(case, section))
    if refined is not None and problem.ndofs > case.refinement.max_dofs:
        return _Pass(section, problem, None, None, None, None, None, None, None, own)  # over budget: not solved
    solution = stage("solve", lambda: solve(problem, case.solver))
    fields = stage("fields", lambda: element_fields(solution))
    project = stage("recovery", partial(projector, solution))
    recovery = stage("recovery", lambda: recover_field(solution, fields, project))
    charges = stage("charges", lambda: compute_charges(solution, fields))
    capacitance = stage("capacitance", lambda: compute_capacitance(solution, fields, charges))
    peak_search_field = recovery.peak_search_field(fields.E_magnitude, problem.element_order)
    vertex_fields = region_vertex_fields(section, peak_search_field, list(problem.material_of_region))
    record = PassRecord(problem.ndofs, section.mesh.nelements, capacitance.maxwell_from_charge,
                        capacitance.energy_per_length, recovery.estimated_error,
                        {name: float(v.values.max()) for name, v in vertex_fields.items()}, vertex_fields,
                        time.perf_counter() - start)
    return _Pass(section, problem, solution, fields, charges, capacitance, recovery, peak_search_field, record, own,
                 project if case.refinement.adaptive else None)


def _settled(case: Case, passes: list[_Pass]) -> tuple[bool, tuple[HotspotResult, Certificates] | None]:
    """Whether the capacitance has settled (and is small by the indicator's own estimate) and every peak
    (per region, per hotspot, at each triple point) has settled or been found singular; with the hotspots
    and certificates of the last pass when they were looked at."""
    before, now = passes[-2].record, passes[-1].record
    scale = np.abs(np.diag(now.capacitance)).max()
    tolerance = case.refinement.capacitance_tolerance
    if np.abs(now.capacitance - before.capacitance).max() > tolerance * scale:
        return False, None
    if now.estimated_error ** 2 > tolerance:  # (energy-norm error)^2 ~ relative error of the capacitance
        return False, None
    last = passes[-1]
    hotspots = find_hotspots(last.problem, last.peak_search_field, case.hotspot_fraction)
    certificates = _certify_all(case, passes, hotspots)
    every = [*certificates.regions.values(), *certificates.hotspots, *certificates.triple_points]
    return all(c.status != "not converged" for c in every), (hotspots, certificates)


def _certify_regions(case: Case, passes: list[_Pass], tree: cKDTree, own_fields: dict | None
                     ) -> dict[str, PeakCertificate]:
    problem = passes[-1].problem
    out = {}
    for name in problem.material_of_region:
        field_now = passes[-1].record.vertex_fields[name]
        k = int(np.argmax(field_now.values))
        values = [p.record.region_peaks[name] for p in passes]
        sizes = [float(f.sizes[int(np.argmax(f.values))]) for f in (p.record.vertex_fields[name] for p in passes)]
        out[name] = _certificate(case, passes, tree, name, field_now.points[k], values, sizes, own_fields)
    return out


def _certificate(case: Case, passes: list[_Pass], tree: cKDTree, region: str, point: np.ndarray,
                 values: list[float], sizes: list[float], own_fields: dict | None = None) -> PeakCertificate:
    last = passes[-1]
    section = last.section
    # the geometry corner a peak belongs to may be a vertex or two away from the largest value
    near = section.corner_vertices[np.sort(np.asarray(tree.query_ball_point(point, 2.5 * sizes[-1]), dtype=np.int64))]
    theories = [(t, v) for t, v in ((corner_theory(last.problem, int(v)), v) for v in near) if t is not None]
    theory, corner = min(theories, key=lambda item: item[0].exponent, default=(None, None))
    strength = last.problem.material_of_region[region].dielectric_strength
    allowed = None if strength is None else case.hotspot_fraction * strength
    single_mesh_error = None
    if own_fields is not None:  # one mesh: the gap between the element's own and the recovered field
        own = own_fields[region].peak_near(point, 1e-9 * float(np.ptp(section.mesh.p)))
        if own is not None and values[-1] > 0:
            single_mesh_error = abs(own[0] - values[-1]) / values[-1]
    largest = max(last.record.region_peaks.values())
    constant = None
    if theory is not None and theory.singular_enough:
        constant = _corner_constant(last.record.vertex_fields[region], section.mesh.p[:, corner], sizes[-1],
                                    theory.exponent)
    return certify(values, sizes, theory, case.refinement.field_tolerance, allowed, single_mesh_error,
                   negligible=1e-9 * largest, corner_constant=constant)


def _corner_constant(field, corner: np.ndarray, size: float, exponent: float) -> float | None:
    """c in |E| = c r^s around a corner, from the vertices 4 to 16 element sizes away (the largest over
    directions); None if too few vertices lie there."""
    r = np.hypot(*(field.points - corner).T)
    ring = (r >= 4 * size) & (r <= 16 * size)
    if ring.sum() < 5:
        return None
    return float((field.values[ring] * r[ring] ** -exponent).max())


def _track(passes: list[_Pass], region: str, point: np.ndarray) -> tuple[list[float], list[float]]:
    """The peak of ``region`` near ``point`` in every pass: within 1.5 local element sizes of it (the
    sizes of that pass, so that a thin feature's other corner is not taken for this one)."""
    values, sizes = [], []
    for p in passes:
        field = p.record.vertex_fields[region]
        _, nearest = field.tree.query(point)
        found = field.peak_near(point, max(1.5 * float(field.sizes[nearest]),
                                           float(np.hypot(*(field.points[nearest] - point))) * (1 + 1e-9)))
        values.append(found[0])
        sizes.append(found[1])
    return values, sizes


def _certify_all(case: Case, passes: list[_Pass], hotspots: HotspotResult) -> Certificates:
    last = passes[-1]
    section = last.section
    tree = cKDTree(section.mesh.p[:, section.corner_vertices].T)  # the geometry corners only: a few dozen
    own_fields = None
    if len(passes) == 1:  # the element's own field beside the recovered one, for the single-mesh estimate
        own_fields = region_vertex_fields(section, last.fields.E_magnitude, list(last.problem.material_of_region),
                                          like=last.record.vertex_fields)
    regions = _certify_regions(case, passes, tree, own_fields)
    spots = []
    for spot in hotspots.hotspots:
        values, sizes = _track(passes, spot.region, np.array(spot.location))
        spots.append(_certificate(case, passes, tree, spot.region, np.array(spot.location), values, sizes,
                                  own_fields))
    triples = []
    for point in hotspots.triple_points:
        values, sizes = _track(passes, point.gas_region, np.array(point.location))
        triples.append(_certificate(case, passes, tree, point.gas_region, np.array(point.location), values, sizes,
                                    own_fields))
    return Certificates(regions, tuple(spots), tuple(triples))


STAGES = ("mesh", "open space", "convert mesh", "assemble", "solve", "fields", "recovery", "charges", "capacitance",
          "refine", "convergence", "hotspots", "certificates", "gas gaps", "corona")
__all__ = ["SINGULAR", "STAGES", "Certificates", "SectionResult", "analyse"]
