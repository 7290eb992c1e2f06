"""The pipeline, stage by stage: case -> mesh -> assembled problem -> solution -> derived quantities.

Each stage's output is an immutable value passed downstream; nothing reaches back upstream.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

from .capacitance import CapacitanceResult, compute_capacitance
from .case import Case
from .charges import ChargeResult, compute_charges
from .discharge import GasGapScreening, screen_gas_gaps
from .fields import ElementFields, element_fields
from .gmsh_adapter import mesh_geometry
from .hotspots import HotspotResult, find_hotspots
from .mesh import SectionMesh, add_open_space, build_section_mesh, find_open_circle
from .problem import AssembledProblem, assemble
from .solve import Solution, solve


@dataclass(frozen=True)
class SectionResult:
    """Everything computed for one case; the report stage only reads it."""

    case: Case
    section: SectionMesh
    problem: AssembledProblem
    solution: Solution
    fields: ElementFields
    charges: ChargeResult
    capacitance: CapacitanceResult
    hotspots: HotspotResult
    gas_gaps: tuple[GasGapScreening, ...] = ()
    stage_seconds: dict[str, float] = field(default_factory=dict)


def analyse(case: Case, on_stage: Callable[[str], None] | None = None) -> SectionResult:
    """Run every computing stage for ``case``; ``on_stage(name)`` is called as each stage starts."""
    seconds: dict[str, float] = {}

    def stage(name: str, work: Callable[[], object]):
        if on_stage is not None:
            on_stage(name)
        start = time.perf_counter()
        value = work()
        seconds[name] = time.perf_counter() - start
        return value

    raw = stage("mesh", lambda: mesh_geometry(case.geometry, case.mesh, case.conductor_names))
    circle = None
    if case.outer_boundary == "open":
        circle = find_open_circle(raw, case.conductor_names | case.insulated_curves, case.model == "axisymmetric")
    raw = stage("open space", lambda: raw if circle is None else add_open_space(raw, circle))
    section = stage("convert mesh", lambda: build_section_mesh(raw, circle))
    problem = stage("assemble", lambda: assemble(case, section))
    solution = stage("solve", lambda: solve(problem, case.solver))
    fields = stage("fields", lambda: element_fields(solution))
    charges = stage("charges", lambda: compute_charges(solution, fields))
    capacitance = stage("capacitance", lambda: compute_capacitance(solution, fields, charges))
    hotspots = stage("hotspots", lambda: find_hotspots(problem, fields, case.hotspot_fraction))
    gas_gaps = stage("gas gaps", lambda: screen_gas_gaps(problem, fields, case.gas_pressure))
    return SectionResult(case, section, problem, solution, fields, charges, capacitance, hotspots, gas_gaps, seconds)


STAGES = ("mesh", "open space", "convert mesh", "assemble", "solve", "fields", "charges", "capacitance", "hotspots", "gas gaps")
