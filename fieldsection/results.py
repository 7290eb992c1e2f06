"""results.json: every number of a run, each key naming its unit."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import __version__
import re

from .case import MODELS, OUTER_BOUNDARY_KINDS, ScriptGeometry
from .certificate import SINGULAR
from .pipeline import SectionResult
from .superposition import SuperpositionCheck, check_superposition

#: a dielectric body's closed-surface bound charge, relative to its |sigma_b| integral, above which
#: the Gauss check is reported as failed (common practice, no source: a discretisation-level tolerance)
BODY_BALANCE_TOLERANCE = 1e-2

CAUTIONS = (
    "These results are a design aid computed from an idealised 2D model. They are not a certification "
    "of the insulation and do not replace type tests.",
    "Follow the codes and standards that apply where the equipment is built and used, and licensed "
    "engineering practice. Safety margins, routine and partial-discharge tests are the designer's duty.",
    "Dielectric strength depends on thickness, area, waveform, duration, temperature and moisture; "
    "the table values are typical short-time figures, not design stresses.",
    "At sharp conductor corners and edges the computed peak field grows as the mesh is refined (a field "
    "singularity); such a peak is not a converged value. Round the edge in the geometry, or judge the "
    "design by the field a short distance away.",
    "Gas gaps and voids in series with solid insulation carry a field raised by the solid's permittivity; "
    "they are where partial discharge starts. Treat flagged gas regions with particular care.",
)


def _mm(point) -> list[float]:
    return [float(point[0]) * 1e3, float(point[1]) * 1e3]


def _num(value: float | None, scale: float = 1.0) -> float | None:
    if value is None or not math.isfinite(value):
        return None
    return float(value) * scale


def _certified(cert, value: float, strength: float | None) -> dict[str, Any]:
    """A peak field with its certificate; a singular value is labelled mesh-dependent, never a peak field.

    Every status gives the same keys (``None`` where a key does not apply), so that the report can
    render any result.
    """
    share_of = (lambda v: None if strength is None else v / strength)
    out: dict[str, Any] = {
        "status": "not certified",
        "peak_E_kV_per_mm": value * 1e-6,
        "fraction_of_strength": share_of(value),
        "estimated_relative_error": None,
        "measured_growth_exponent": None,
        "corner_theory_exponent": None,
        "corner_field_side_angle_deg": None,
        "history_kV_per_mm": [],
        "local_element_size_mm": [],
        "mesh_dependent_E_kV_per_mm": None,
        "mesh_dependent_fraction_of_strength": None,
        "advised_edge_radius_mm": None,
        "advice": None,
    }
    if cert is None:
        return out
    value = cert.value  # the tracked value: its history ends with it
    singular = cert.status == SINGULAR
    share = share_of(value)
    out.update({
        "status": cert.status,
        "peak_E_kV_per_mm": None if singular else value * 1e-6,
        "fraction_of_strength": None if singular else share,
        "estimated_relative_error": _num(cert.relative_error),
        "measured_growth_exponent": _num(cert.measured_exponent),
        "corner_theory_exponent": _num(cert.theory_exponent),
        "corner_field_side_angle_deg": _num(cert.field_angle_deg),
        "history_kV_per_mm": [v * 1e-6 for v in cert.history],
        "local_element_size_mm": [h * 1e3 for h in cert.sizes],
    })
    if singular:
        out["mesh_dependent_E_kV_per_mm"] = value * 1e-6
        out["mesh_dependent_fraction_of_strength"] = share
        out["advised_edge_radius_mm"] = _num(cert.advised_radius, 1e3)
        if cert.advised_radius is not None:
            out["advice"] = (f"round the edge: a radius of about {cert.advised_radius * 1e3:.2g} mm or more brings the "
                             "local field to the hotspot threshold (a scaling estimate; draw it and re-run)")
        elif strength is not None:
            out["advice"] = ("no edge radius alone helps: the field is above the hotspot threshold even away from "
                             "the corner; lower the stress (more or better insulation, no gas gap, lower voltage)")
        else:
            out["advice"] = "round the edge; no dielectric strength is known to size the radius"
    return out


def superposition_results(check: SuperpositionCheck) -> dict[str, Any]:
    """The charge-superposition check (``superposition.py``) in results.json's units."""
    return {
        "checked": check.checked,
        "largest_relative_difference": check.largest_relative_difference,
        "meaning": "largest |V rebuilt from the free and bound charges - V of the FE solution| at probe points inside "
                   "the insulation, relative to the span of the FE potential (additive constant fitted); it falls "
                   "with the mesh, and a sign error in the charge bookkeeping makes it of order 1",
        "method": check.note,
        "potential_span_V": check.potential_span,
        "additive_constant_V": check.constant,
        "probes": int(len(check.probes) + len(check.line_points)),
        "sources": check.sources,
        "largest_relative_difference_per_region": check.region_differences,
        "free_charge_of_the_model_per_conductor_C_per_m": check.free_charge,  # one symmetry copy: the sources used
        "flux_of_D_of_the_model_per_conductor_C_per_m": check.free_charge_from_flux,  # beside them, not used
        "line_mm": [_mm(check.line[0]), _mm(check.line[1])],
    }


def _refinement(result: SectionResult) -> dict[str, Any]:
    settings = result.case.refinement
    rows = []
    previous = None
    for k, record in enumerate(result.passes):
        C = record.capacitance * result.capacitance.copies
        change = None
        if previous is not None:
            change = float(np.abs(C - previous).max() / np.abs(np.diag(C)).max())
        rows.append({
            "pass": k + 1,
            "degrees_of_freedom": record.ndofs,
            "triangles": record.nelements,
            "capacitance_diagonal_pF_per_m": (np.diag(C) * 1e12).tolist(),
            "capacitance_relative_change": change,
            "estimated_energy_error": record.estimated_error,
            "peak_E_kV_per_mm": {name: v * 1e-6 for name, v in record.region_peaks.items()},
        })
        previous = C
    return {
        "adaptive": settings.adaptive,
        "stopped_because": result.stop_reason,
        "capacitance_tolerance": settings.capacitance_tolerance,
        "field_tolerance": settings.field_tolerance,
        "max_dofs": settings.max_dofs,
        "error_indicator": "Zienkiewicz-Zhu: energy of (recovered E - computed E) per element; the recovered E is "
                           "the L2 projection onto continuous polynomials of the element order, region by region",
        "passes": rows,
    }


def build_results(result: SectionResult, superposition: SuperpositionCheck | None = None) -> dict[str, Any]:
    """Every number of a run; for a body of revolution the per-metre keys become whole-body ones.

    ``superposition``: the charge-superposition check of this result, if already computed (else it is)."""
    results = _build(result)
    if superposition is None:
        superposition = check_superposition(result.solution)
    results["charge_superposition_check"] = superposition_results(superposition)
    results["timings"]["superposition_check_seconds"] = superposition.seconds
    if result.case.model != "planar":
        results = _whole_body(results)
    if result.conduction is not None:  # a DC or AC analysis ran beside the electrostatic one (names its own keys)
        from .analysis_report import analysis_results

        results["analysis"] = analysis_results(result)
    missing: list[str] = []
    results = _finite_only(results, "", missing)
    if missing:
        results["cautions"].append(
            f"{len(missing)} value(s) could not be computed as finite numbers and are given as null: "
            f"{', '.join(missing[:5])}{' ...' if len(missing) > 5 else ''}. Treat this run's results with suspicion "
            "(extreme permittivity contrast, degenerate elements, or electrodes almost touching)."
        )
    return results


def _finite_only(value: Any, path: str, missing: list[str]) -> Any:
    """The same tree with numpy values as plain Python and every NaN or infinity replaced by None (listed)."""
    if isinstance(value, dict):
        return {k: _finite_only(v, f"{path}.{k}" if path else str(k), missing) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite_only(v, f"{path}[{i}]", missing) for i, v in enumerate(value)]
    if isinstance(value, np.ndarray):
        return _finite_only(value.tolist(), path, missing)
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(value):
            missing.append(path)
            return None
        return float(value)
    return value


def _whole_body(value: Any) -> Any:
    """Rename "..._pF_per_m" to "..._pF" and so on (not "_per_mm"): an axisymmetric model is a whole body."""
    if isinstance(value, dict):
        return {re.sub(r"_per_m(?![m0-9])", "", k): _whole_body(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_whole_body(v) for v in value]
    return value


def _build(result: SectionResult) -> dict[str, Any]:
    case, problem, section = result.case, result.problem, result.section
    mesh = section.mesh
    cap = result.capacitance
    geometry = case.geometry
    x, y = mesh.p  # one coordinate row at a time: 2D fancy indexing is several times slower
    start, end = mesh.facets
    edge = np.hypot(x[start] - x[end], y[start] - y[end])
    pf = 1e12
    certificates = result.certificates

    floating_potential = {c.name: float(v) for c, v in zip(problem.floating, result.solution.floating_potentials)}
    copies = cap.copies  # charges are reported for the full section
    bodies = []
    for body in result.charges.bodies:
        imbalance = abs(body.bound_charge) / body.absolute_bound_charge if body.absolute_bound_charge > 0 else 0.0
        bodies.append({
            "region": body.region,
            "total_bound_charge_C_per_m": copies * body.bound_charge,
            "integral_of_abs_sigma_b_C_per_m": copies * body.absolute_bound_charge,
            "relative_imbalance": imbalance,
            "check_passed": imbalance <= BODY_BALANCE_TOLERANCE,
        })

    two_level = None
    if cap.two_level is not None:
        t = cap.two_level
        two_level = {
            "high_potential_conductors": list(t.high),
            "low_potential_conductors": list(t.low),
            "voltage_V": t.voltage,
            "from_energy_pF_per_m": t.from_energy * pf,
            "from_electrode_charge_pF_per_m": t.from_charge * pf,
            "from_surface_flux_pF_per_m": _num(t.from_flux, pf),
            "relative_difference_charge_vs_energy": t.relative_difference,
            "relative_difference_flux_vs_energy": _num(t.flux_relative_difference),
        }

    return {
        "fieldsection_version": __version__,
        "case": {
            "name": case.name,
            "title": case.title,
            "case_file": str(case.source_file) if case.source_file else None,
            "geometry_script": str(geometry.path) if isinstance(geometry, ScriptGeometry) else "Python builder",
            "script_parameters": dict(geometry.parameters) if isinstance(geometry, ScriptGeometry) else {},
            "model": case.model,
            "model_meaning": MODELS[case.model],
            "outer_boundary": case.outer_boundary,
            "outer_boundary_meaning": OUTER_BOUNDARY_KINDS[case.outer_boundary],
            "hotspot_fraction": case.hotspot_fraction,
            "element_order": case.mesh.element_order,
            "uniform_refinements": "auto" if case.mesh.refinements is None else case.mesh.refinements,
        },
        "mesh": {
            "vertices": int(mesh.nvertices),
            "triangles": int(mesh.nelements),
            "degrees_of_freedom": int(problem.ndofs),
            "curved_elements": section.curved,
            "uniform_splits": int(section.uniform_splits),
            "shortest_edge_mm": float(edge.min()) * 1e3,
            "longest_edge_mm": float(edge.max()) * 1e3,
            "triangles_per_region": {n: int((section.region_of_element == i).sum()) for i, n in enumerate(section.region_names)},
            "gmsh_warnings": list(section.gmsh_warnings),
        },
        "materials": [
            {
                "region": region,
                "material": m.name,
                "kind": m.kind,
                "relative_permittivity": m.relative_permittivity,
                "dielectric_strength_kV_per_mm": _num(m.dielectric_strength, 1e-6),
                "loss_tangent": m.loss_tangent,
                "source": m.source,
            }
            for region, m in problem.material_of_region.items()
        ],
        "electrodes": [
            {
                "name": c.name,
                "floating": c.floating,
                "potential_V": floating_potential.get(c.name, c.potential),
                "charge_from_reaction_C_per_m": float(cap.charges_from_reaction[i]),
                # a conductor without a surface (the point at infinity) has no flux to integrate
                "charge_from_surface_flux_C_per_m": float(cap.charges_from_flux[i]) if c.facets.size else None,
                "peak_free_surface_charge_uC_per_m2":
                    result.charges.conductors[i].peak_abs_sigma_f * 1e6 if c.facets.size else None,
            }
            for i, c in enumerate(problem.conductors)
        ],
        "capacitance": {
            "conductors": list(cap.names),
            "maxwell_matrix_pF_per_m": (cap.maxwell_from_charge * pf).tolist(),
            "maxwell_matrix_from_energy_pF_per_m": (cap.maxwell_from_energy * pf).tolist(),
            "relative_difference_charge_vs_energy": cap.relative_difference,
            "relative_asymmetry": cap.asymmetry,
            "mutual_pF_per_m": (cap.mutual * pf).tolist(),
            "to_reference_pF_per_m": (cap.to_reference * pf).tolist(),
            "diagonally_dominant": cap.diagonally_dominant,
            "symmetry_copies": cap.copies,
            "two_level": two_level,
        },
        "stored_energy_J_per_m": cap.energy_per_length,
        "bound_charge": {
            "convention": "sigma_b = P.n with n pointing out of each dielectric; on an interface a|b the two sides add; "
                          "totals for the full section (symmetry copies included)",
            "faces": [
                {
                    "between": [i.region_a, i.region_b],
                    "total_C_per_m": copies * i.bound_charge,
                    "peak_abs_sigma_b_uC_per_m2": i.peak_abs_sigma_b * 1e6,
                }
                for i in result.charges.interfaces
            ],
            "bodies": bodies,
            "body_balance_tolerance": BODY_BALANCE_TOLERANCE,
        },
        "refinement": _refinement(result),
        "peak_fields": [
            {
                "region": p.region,
                "material": p.material,
                "location_mm": _mm(p.location),
                "dielectric_strength_kV_per_mm": _num(p.strength, 1e-6),
                **_certified(certificates.regions.get(p.region) if certificates else None, p.peak_E, p.strength),
            }
            for p in result.hotspots.region_peaks
        ],
        "hotspots": [
            {
                "rank": k + 1,
                "region": h.region,
                "material": h.material,
                "location_mm": _mm(h.location),
                "area_mm2": h.area * 1e6,  # of the region in the drawn model
                "triangles": h.n_elements,
                "nearest_electrode": h.nearest_electrode,
                "distance_to_electrode_mm": _num(h.distance_to_electrode, 1e3),
                **_certified(certificates.hotspots[k] if certificates else None, h.peak_E,
                             h.peak_E / h.utilisation if h.utilisation else None),
            }
            for k, h in enumerate(result.hotspots.hotspots)
        ],
        "triple_points": [
            {
                "location_mm": _mm(tp.location),
                "electrode": tp.electrode,
                "gas_region": tp.gas_region,
                "solid_region": tp.solid_region,
                "E_in_solid_kV_per_mm_on_this_mesh": tp.E_solid * 1e-6,
                "gas": _certified(certificates.triple_points[k] if certificates else None, tp.E_gas,
                                  tp.E_gas / tp.gas_utilisation if tp.gas_utilisation else None),
            }
            for k, tp in enumerate(result.hotspots.triple_points)
        ],
        "gas_gap_screening": {
            "method": "Paschen's law (and, for air, the lower Dakin uniform-field fit) for a uniform gap as long as "
                      "the field line through the gas region's peak; margin = breakdown voltage / voltage across",
            "pressure_kPa": result.case.gas_pressure * 1e-3,
            "regions": [
                {
                    "region": g.region,
                    "material": g.material,
                    "start_mm": _mm(g.start),
                    "ends_mm": [_mm(g.ends[0]), _mm(g.ends[1])],
                    "field_line_length_mm": g.length * 1e3,
                    "voltage_across_V": g.voltage,
                    "breakdown_voltage_V": _num(g.breakdown_voltage),
                    "inception_margin": _num(g.margin),
                }
                for g in result.gas_gaps
            ],
        },
        "corona_onset": {
            "method": "Peek's law for smooth round conductors in air, parallel-wire constants (g0 = 30 kV/cm peak, "
                      "0.301 cm^0.5), relative air density = pressure / 101.325 kPa (25 degC), polished surface; "
                      "margin = onset field / surface field",
            "conductors": [
                {
                    "electrode": c.electrode,
                    "gas_region": c.gas_region,
                    "radius_mm": c.radius * 1e3,
                    "surface_E_kV_per_mm": c.surface_field * 1e-6,
                    "onset_E_kV_per_mm": c.onset_field * 1e-6,
                    "margin": _num(c.margin),
                    "location_mm": _mm(c.location),
                }
                for c in result.corona
            ],
        },
        "solver": {"requested": case.solver, "used": result.solution.solver,
                   "relative_residual": result.solution.relative_residual},
        "notes": list(problem.notes),
        "cautions": list(CAUTIONS),
        # the only part of a run that differs between two runs of the same case
        "timings": {"stage_seconds": result.stage_seconds,
                    "pass_seconds": [record.seconds for record in result.passes]},
    }
