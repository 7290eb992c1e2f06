"""Reporting the DC or AC analysis: the "analysis" block of results.json, two figures, CLI summary lines.

Engineers' units at this edge only: kV/mm, uC/m^2, pF/m; conductances, currents and losses in SI
(S/m, A/m, W/m), labelled in every key. Per-length keys end in "_per_m" for a planar model and
drop it for an axisymmetric one (whole-body values), as the rest of results.json; material
conductivities keep their S/m.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any, Callable

import numpy as np
from scipy.constants import epsilon_0

from .analysis import KINDS
from .conduction_dc import DIFFERS_FACTOR, DCResult
from .harmonic_ac import ACResult

PEAK_NOTE = ("largest value at the element vertices of this analysis's solution on the electrostatic analysis's "
             "last mesh; not recovered and not certified (compare with the electrostatic peaks, which are)")


def _num(value: float | None, scale: float = 1.0) -> float | None:
    if value is None or not math.isfinite(value):
        return None
    return float(value) * scale


def _materials(problem) -> list[dict[str, Any]]:
    return [
        {
            "region": region,
            "material": m.name,
            "conductivity_S_per_m": m.conductivity,
            "conductivity_alpha_per_K": m.conductivity_alpha,
            "conductivity_beta_mm_per_kV": m.conductivity_beta * 1e6,
            "conductivity_reference_temperature_degC": m.conductivity_reference_temperature,
            "dc_strength_kV_per_mm": _num(m.dc_strength, 1e-6),
            "loss_tangent": m.loss_tangent,
            "conductivity_source": m.conductivity_source,
        }
        for region, m in problem.material_of_region.items()
    ]


def analysis_results(result) -> dict[str, Any]:
    """The "analysis" block of results.json for a DC or AC run."""
    extra = result.conduction
    if isinstance(extra, DCResult):
        return _dc(result, extra)
    return _ac(result, extra)


def _per_length(result) -> str:
    """The suffix of per-length keys: "_per_m" for a planar model, none for a body of revolution."""
    return "_per_m" if result.case.model == "planar" else ""


def _dc(result, dc: DCResult) -> dict[str, Any]:
    L = _per_length(result)
    return {
        "kind": "dc",
        "meaning": KINDS["dc"],
        "mesh": "the electrostatic analysis's last mesh",
        "conductivity_model": "sigma = sigma0 exp(alpha (T - T_ref) + beta |E|) per material",
        "materials": _materials(result.problem),
        "temperatures": dict(dc.temperatures),
        "nonlinear": dc.nonlinear,
        "method": ("Picard iterations: sigma from the last potential (at the quadrature points), one linear solve "
                   "each, Anderson-accelerated (depth 5); stop when a Picard step changes the potential by less than "
                   "the tolerance times the largest electrode voltage"
                   if dc.nonlinear else "one linear solve (sigma does not depend on the field)"),
        "linear_solves": dc.iterations,
        "tolerance": dc.tolerance if dc.nonlinear else None,
        "last_relative_change": dc.last_change if dc.nonlinear else None,
        "linear_solver": dc.solver,
        f"leakage_current_A{L}": {n: float(i) for n, i in zip(dc.conductor_names, dc.currents)},
        "conductance_conductors": list(dc.fixed_names),
        f"conductance_matrix_S{L}": None if dc.conductance is None else dc.conductance.tolist(),
        f"joule_loss_W{L}": dc.loss,
        "relaxation_time_s": dc.relaxation_time,
        "relaxation_time_meaning": "d.K_eps.d / d.K_sigma.d for d = electrostatic minus DC potential: the time "
                                   "constant of the change from the capacitive to the resistive field after a "
                                   "voltage step (exact for layers in series, the Maxwell-Wagner time; a weighted mean of the "
                                   "excited modes otherwise); null when the two distributions coincide",
        "peak_fields_note": PEAK_NOTE,
        "peak_fields": [
            {
                "region": r.region,
                "material": r.material,
                "peak_E_kV_per_mm": r.peak_E * 1e-6,
                "location_mm": _mm(r.location),
                "electrostatic_peak_E_kV_per_mm": r.electrostatic_peak_E * 1e-6,
                "ratio_dc_to_electrostatic": _num(r.ratio_to_electrostatic),
                "dc_strength_kV_per_mm": _num(r.dc_strength, 1e-6),
                "fraction_of_dc_strength": r.utilisation,
                "conductivity_range_S_per_m": list(r.conductivity),
                "time_constant_eps_over_sigma_range_s": list(r.time_constant),
                f"joule_loss_W{L}": r.joule_loss,
                "polarity_reversal_peak_E_kV_per_mm": r.reversal_peak_E * 1e-6,
                "polarity_reversal_fraction_of_dc_strength": r.reversal_utilisation,
            }
            for r in dc.regions.values()
        ],
        "interface_free_charge": {
            "convention": "rho_s = (D_b - D_a) . n_ab = (eps_b/sigma_b - eps_a/sigma_a) J_n, n_ab from region a to "
                          "region b; totals for the full section",
            "faces": [
                {"between": [i.region_a, i.region_b], f"total_C{L}": i.free_charge,
                 "peak_abs_rho_s_uC_per_m2": i.peak_abs_density * 1e6}
                for i in dc.interfaces
            ],
        },
        "hotspots_against_dc_strength": _hotspots(dc.screening),
        "polarity_reversal": "the field right after the voltage is reversed (from the DC steady state, faster than "
                             "eps/sigma): the DC field minus twice the electrostatic field",
        "differs_factor": DIFFERS_FACTOR,
        "warnings": list(dc.warnings),
    }


def _mm(point) -> list[float]:
    return [float(point[0]) * 1e3, float(point[1]) * 1e3]


def _hotspots(screening) -> list[dict[str, Any]]:
    """The flagged regions of a screening, highest share of strength first (no certificate: one mesh)."""
    if screening is None:
        return []
    return [
        {
            "rank": k + 1,
            "region": h.region,
            "material": h.material,
            "peak_E_kV_per_mm": h.peak_E * 1e-6,
            "fraction_of_strength": h.utilisation,
            "location_mm": _mm(h.location),
            "area_mm2": h.area * 1e6,
            "nearest_electrode": h.nearest_electrode,
        }
        for k, h in enumerate(screening.hotspots)
    ]


def _phasor(z: complex) -> dict[str, float]:
    return {"magnitude": float(abs(z)), "phase_deg": float(np.degrees(np.angle(z)))}


def _ac(result, ac: ACResult) -> dict[str, Any]:
    L = _per_length(result)
    names = list(ac.fixed_names)
    return {
        "kind": "ac",
        "meaning": KINDS["ac"],
        "mesh": "the electrostatic analysis's last mesh",
        "frequency_Hz": ac.frequency,
        "convention": "electrode potentials are peak values (amplitudes) with the given phases; currents are peak "
                      "phasors; losses are time averages, P = 1/2 Re(V I*) = V_rms^2 G; peak |E| is the largest "
                      "over a period (the semi-major axis of the field's ellipse)",
        "loss_model": "effective conductivity sigma + omega eps tan(delta) per material",
        "materials": _materials(result.problem),
        "linear_solver": ac.solver,
        "electrode_phasors_V": {n: _phasor(z) for n, z in zip(names, ac.phasors)},
        f"electrode_currents_A{L}": {n: _phasor(z) for n, z in zip(names, ac.currents)},
        "conductors": names,
        f"capacitance_matrix_pF{L}": (ac.capacitance * 1e12).tolist(),
        f"conductance_matrix_S{L}": ac.conductance.tolist(),
        f"dielectric_loss_W{L}": ac.loss,
        f"dielectric_loss_sum_of_regions_W{L}": ac.loss_from_regions,
        "peak_fields_note": PEAK_NOTE,
        "regions": [
            {
                "region": r.region,
                "material": r.material,
                "peak_E_over_period_kV_per_mm": r.peak_E * 1e-6,
                "location_mm": _mm(r.location),
                "electrostatic_peak_E_kV_per_mm": r.electrostatic_peak_E * 1e-6,
                "dielectric_strength_kV_per_mm": _num(r.dielectric_strength, 1e-6),
                "fraction_of_strength": r.utilisation,
                "elements_at_or_above_hotspot_fraction": r.elements_over_fraction,
                "effective_conductivity_S_per_m": r.effective_conductivity,
                f"dielectric_loss_W{L}": r.loss,
            }
            for r in ac.regions.values()
        ],
        "hotspots": _hotspots(ac.screening),
        "notes": list(ac.notes),
    }


def analysis_figures(result) -> list[tuple[str, str, Callable[[Path], Path]]]:
    """(file, caption, draw(path)) for the |E| and loss-density figures of the DC or AC analysis."""
    extra = result.conduction
    problem = result.problem
    if isinstance(extra, DCResult):
        loss = extra.conductivity * (extra.E_magnitude**2).mean(axis=1)
        return [
            ("dc_field.png", "DC steady state: peak |E| per element (the field the conductivities set)",
             lambda p: plot_element_values(problem, extra.E_magnitude.max(axis=1) * 1e-6, p, "|E| (kV/mm)",
                                           "DC steady state: peak |E| per element")),
            ("dc_loss.png", "DC steady state: Joule loss density sigma |E|^2 per element",
             lambda p: plot_element_values(problem, loss, p, "loss density (W/m³)",
                                           "DC steady state: loss density", logarithmic=True)),
        ]
    return [
        ("ac_field.png", f"AC at {extra.frequency:g} Hz: peak |E| over a period per element",
         lambda p: plot_element_values(problem, extra.E_peak.max(axis=1) * 1e-6, p, "|E| (kV/mm)",
                                       f"AC at {extra.frequency:g} Hz: peak |E| over a period")),
        ("ac_loss.png", f"AC at {extra.frequency:g} Hz: time-averaged dielectric loss density per element",
         lambda p: plot_element_values(problem, extra.loss_density, p, "loss density (W/m³)",
                                       f"AC at {extra.frequency:g} Hz: dielectric loss density", logarithmic=True)),
    ]


def plot_element_values(problem, values: np.ndarray, path: str | os.PathLike, label: str, title: str,
                        logarithmic: bool = False) -> Path:
    """One value per dielectric element, conductors grey; a logarithmic scale for values spanning decades."""
    from matplotlib.colors import LogNorm, Normalize

    from . import figures as fig_module

    dielectric = problem.dielectric & ~problem.section.exterior
    shown = values[dielectric]
    positive = shown[shown > 0]
    if logarithmic and positive.size and positive.max() > 1e3 * positive.min():
        norm = LogNorm(max(positive.min(), positive.max() * 1e-8), positive.max())
        values = np.maximum(values, norm.vmin)
    else:
        norm = Normalize(0.0, float(shown.max()) if shown.size and shown.max() > 0 else 1.0)
    top = float(shown.max()) if shown.size else 0.0
    return fig_module.plot_element_map(problem, values, norm, path, label, f"{title}, max {top:.3g}")


def summary_lines(result) -> list[str]:
    """What the CLI prints about the DC or AC analysis."""
    extra = result.conduction
    per = "/m" if result.case.model == "planar" else ""
    lines = []
    if isinstance(extra, DCResult):
        how = (f"Picard, {extra.iterations} linear solves to a relative change of {extra.last_change:.1e}"
               if extra.nonlinear else "linear")
        lines.append(f"analysis: DC steady conduction ({how})")
        for name, current in zip(extra.conductor_names, extra.currents):
            lines.append(f"  leakage current out of {name}: {current:.4g} A{per}")
        for r in extra.regions.values():
            share = "" if r.utilisation is None else f", {100 * r.utilisation:.1f} % of DC strength"
            lines.append(f"  DC peak |E| in {r.region}: {r.peak_E * 1e-6:.4g} kV/mm (electrostatic "
                         f"{r.electrostatic_peak_E * 1e-6:.4g}, after a polarity reversal "
                         f"{r.reversal_peak_E * 1e-6:.4g}){share}")
        lines += [f"  warning: {w}" for w in extra.warnings]
    else:
        lines.append(f"analysis: AC at {extra.frequency:g} Hz; dielectric loss {extra.loss:.4g} W{per} (time average, "
                     "potentials as peak values)")
        for r in extra.regions.values():
            lines.append(f"  peak |E| over a period in {r.region}: {r.peak_E * 1e-6:.4g} kV/mm, "
                         f"loss {r.loss:.4g} W{per}")
    return lines


ANALYSIS_FIELDS_FILE = "analysis_fields.vtk"


def write_analysis_vtk(result, path: str | os.PathLike) -> Path:
    """The DC or AC fields as a legacy binary VTK file beside the electrostatic one (SI units).

    Point data at the corner vertices: DC ``V_dc``; AC ``V_real`` and ``V_imag`` (peak phasor, V). Cell
    data: ``E_dc`` (centroid, V/m) and ``E_dc_magnitude_peak``, or ``E_peak_over_period`` (V/m);
    ``loss_density`` (W/m^3, time average for AC); ``conductivity`` (S/m, DC: as solved; AC: sigma + omega
    eps tan(delta)); ``region_id``. The mapped exterior of an open-space circle is left out.
    """
    import meshio

    from .vtk_export import write_legacy_vtk

    extra, problem = result.conduction, result.problem
    mesh = problem.section.mesh
    n = mesh.nvertices
    points = np.zeros((n, 3))
    points[:, :2] = mesh.p[:, :n].T
    if isinstance(extra, DCResult):
        centroid = np.zeros((mesh.nelements, 3))
        centroid[:, :2] = extra.E.mean(axis=1)
        point_data = {"V_dc": extra.potential[:n]}
        cells = {"E_dc": centroid, "E_dc_magnitude_peak": extra.E_magnitude.max(axis=1),
                 "loss_density": extra.conductivity * (extra.E_magnitude**2).mean(axis=1),
                 "conductivity": extra.conductivity}
    else:
        from .conduction import element_values

        omega = 2 * math.pi * extra.frequency
        sigma_eff = element_values(problem, lambda m: m.conductivity or 0.0) + omega * epsilon_0 \
            * problem.relative_permittivity * element_values(problem, lambda m: m.loss_tangent or 0.0)
        point_data = {"V_real": extra.potential[:n].real, "V_imag": extra.potential[:n].imag}
        cells = {"E_peak_over_period": extra.E_peak.max(axis=1), "loss_density": extra.loss_density,
                 "conductivity": sigma_eff}
    cells["region_id"] = problem.section.region_of_element.astype(np.int32)
    drawn = ~problem.section.exterior
    grid = meshio.Mesh(points, [("triangle", np.ascontiguousarray(mesh.t[:, drawn].T, dtype=np.int64))],
                       point_data={k: np.ascontiguousarray(v, dtype=np.float64) for k, v in point_data.items()},
                       cell_data={k: [np.ascontiguousarray(v[drawn])] for k, v in cells.items()})
    return write_legacy_vtk(grid, path)
