"""DC steady conduction: -div(sigma grad V) = 0 on the electrostatic problem's mesh and conductors.

Under a DC voltage held long enough (many times eps/sigma) the field is set by the conductivities,
not the permittivities. With sigma(T, E) = sigma0 exp(alpha (T - T_ref) + beta |E|) (the empirical form
common for polymeric and paper HVDC insulation) the problem is nonlinear and is solved by Picard
(fixed-point) iterations: sigma from the last potential, a linear solve, until the largest change of
the potential is below ``tolerance`` times the largest electrode voltage; the iterates are
Anderson-accelerated (``_anderson``).

Reported: the DC field and its peak per region against the material's DC strength, the leakage current
per conductor, the conductance matrix (linear case), the free interface charge
rho_s = (D_b - D_a) . n_ab = (eps_b/sigma_b - eps_a/sigma_a) J_n at every interface between dielectrics
(Maxwell-Wagner), the time constant eps/sigma per region, the Joule loss per region, and the peak
field right after a polarity reversal (the DC steady field minus twice the electrostatic one: the
reversal's capacitive step, before any charge moves).
Per-metre values for a planar model, whole-body values for an axisymmetric one; times ``symmetry_copies``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Mapping

import numpy as np
from scipy.constants import epsilon_0

from .analysis import AnalysisSettings
from .case import Case
from .conduction import (as_solution, coefficient_points, conductor_facets, element_values, field_magnitude_at_points,
                         fixed_lift, interface_faces, jump_density, material_per_element, region_peaks,
                         region_quadratic, stiffness_with, vertex_field, with_stiffness)
from .errors import MaterialError, SolverError
from .fields import outward_flux
from .hotspots import HotspotResult, find_hotspots
from .problem import AssembledProblem, conductor_indicator
from .solve import FactorisedSystem, solve

#: a region whose DC peak field differs from its electrostatic one by more than this factor (either way)
#: raises the warning that the DC field distribution differs strongly (common practice, no source)
DIFFERS_FACTOR = 1.5
#: Anderson acceleration of the Picard iterations: how many earlier steps enter each update
ANDERSON_DEPTH = 5


@dataclass(frozen=True)
class RegionDC:
    region: str
    material: str
    peak_E: float  # V/m, largest vertex value (no recovery, no certificate)
    electrostatic_peak_E: float  # V/m, the same measure on the electrostatic solution
    dc_strength: float | None  # V/m
    time_constant: tuple[float, float]  # s, eps/sigma: least and largest over the region's elements
    conductivity: tuple[float, float]  # S/m, least and largest over the region's elements
    joule_loss: float  # W/m (planar) or W (axisymmetric)
    reversal_peak_E: float = 0.0  # V/m, right after a polarity reversal from the DC steady state (same measure)
    location: tuple[float, float] = (math.nan, math.nan)  # m, where peak_E is

    @property
    def utilisation(self) -> float | None:
        return None if self.dc_strength is None else self.peak_E / self.dc_strength

    @property
    def reversal_utilisation(self) -> float | None:
        return None if self.dc_strength is None else self.reversal_peak_E / self.dc_strength

    @property
    def ratio_to_electrostatic(self) -> float:
        return self.peak_E / self.electrostatic_peak_E if self.electrostatic_peak_E > 0 else math.inf


@dataclass(frozen=True)
class InterfaceDC:
    region_a: str
    region_b: str
    free_charge: float  # C/m (planar) or C: integral of rho_s, n from a to b
    peak_abs_density: float  # C/m^2
    facets: np.ndarray
    density: np.ndarray  # (n, 2) C/m^2 at the facet ends (mesh.facets order)


@dataclass(frozen=True)
class DCResult:
    """The steady DC state of the case, on the electrostatic problem's mesh."""

    potential: np.ndarray  # V per DOF
    E: np.ndarray  # (nelements, 3, 2) V/m at element vertices
    E_magnitude: np.ndarray  # (nelements, 3)
    conductivity: np.ndarray  # S/m per element (mean over its points for sigma(T, E))
    nonlinear: bool
    iterations: int  # linear solves (1 for a linear case)
    last_change: float  # relative potential change of the last iteration (0 for a linear case)
    tolerance: float
    conductor_names: tuple[str, ...]
    currents: np.ndarray  # A/m (planar) or A: net current leaving each conductor into the insulation
    conductance: np.ndarray | None  # S/m, (fixed x fixed) Maxwell-form conductance matrix; linear case only
    fixed_names: tuple[str, ...]
    regions: Mapping[str, RegionDC]
    interfaces: tuple[InterfaceDC, ...]
    loss: float  # W/m or W, sum of V_k I_k
    #: s, d^T K_eps d / d^T K_sigma d for d = electrostatic - DC potential: the time constant of the change from
    #: the capacitive to the resistive distribution after a voltage step (exact when one mode is excited, as
    #: for layers in series; a weighted mean of the excited modes' otherwise); None when the two coincide
    relaxation_time: float | None
    warnings: tuple[str, ...]
    temperatures: Mapping[str, str]  # region -> description of its temperature
    solver: str
    #: the hotspot screening of the DC field against each material's DC strength (no DC strength: not screened)
    screening: HotspotResult | None = None


def _anderson(picard, scale: float, tolerance: float, max_iterations: int) -> tuple[np.ndarray, int, float]:
    """Fixed point u = picard(u), Anderson-accelerated (type II, the last ``ANDERSON_DEPTH`` steps).

    Returns (u, linear solves, relative change): the change is max |picard(u) - u| / ``scale`` of the last
    step, and u is that last Picard image. H. F. Walker, P. Ni, "Anderson acceleration for fixed-point
    iterations", SIAM J. Numer. Anal. 49(4), 2011 (from memory). The history is dropped whenever the change
    grows tenfold over the best so far (the update then falls back to plain Picard).
    """
    u = picard(None)
    solves, change, best = 1, math.inf, math.inf
    steps_f: list[np.ndarray] = []
    steps_g: list[np.ndarray] = []
    last_f = last_g = None
    while solves < max_iterations:
        g = picard(u)
        solves += 1
        f = g - u
        change = float(np.abs(f).max()) / scale
        if change <= tolerance:
            return g, solves, change
        if change > 10 * best:
            steps_f.clear()
            steps_g.clear()
            last_f = None
        best = min(best, change)
        if last_f is not None:
            steps_f.append(f - last_f)
            steps_g.append(g - last_g)
            del steps_f[:-ANDERSON_DEPTH], steps_g[:-ANDERSON_DEPTH]
        last_f, last_g = f, g
        if steps_f:
            gamma = np.linalg.lstsq(np.column_stack(steps_f), f, rcond=None)[0]
            u = g - np.column_stack(steps_g) @ gamma
        else:
            u = g
    return u, solves, change


#: beta |E| above which exp() overflows in double precision (exp(709.8) is the largest double)
LARGEST_FIELD_EXPONENT = 700.0


def _sigma_function(problem: AssembledProblem, settings: AnalysisSettings):
    """(sigma(|E|) at the coefficient points, is-nonlinear), with the temperatures fixed."""
    x, y = coefficient_points(problem)
    section = problem.section
    materials = material_per_element(problem)
    sigma0 = element_values(problem, lambda m: m.conductivity)[:, None]
    beta = element_values(problem, lambda m: m.conductivity_beta)[:, None]
    exponent = np.zeros(x.shape)
    for index, material in enumerate(materials):  # the temperature term, region by region
        if material is None or material.conductivity_alpha == 0.0:
            continue
        name = section.region_names[index]
        profile = settings.temperatures.get(name)
        if profile is None:
            continue  # at the material's reference temperature
        rows = section.region_of_element == index
        exponent[rows] = material.conductivity_alpha * (profile.at(x[rows], y[rows])
                                                        - material.conductivity_reference_temperature)
    base = sigma0 * np.exp(exponent)
    nonlinear = bool(np.any(beta))
    if nonlinear and section.exterior.any():
        beta[section.exterior] = 0.0  # open space beyond the circle: the Kelvin image's field is not E; sigma0 there

    def sigma(magnitude: np.ndarray | None) -> np.ndarray:
        if magnitude is None or not beta.any():
            return base
        growth = beta * magnitude
        if growth.max() > LARGEST_FIELD_EXPONENT:  # exp() would overflow: refuse rather than solve with inf
            k = int(np.unravel_index(np.argmax(growth), growth.shape)[0])
            material = materials[section.region_of_element[k]]
            raise MaterialError(
                f"material {material.name!r}: the field factor exp(beta |E|) of its conductivity overflows at |E| = "
                f"{float(magnitude.flat[np.argmax(growth)]) / 1e6:.4g} kV/mm (beta = {material.conductivity_beta * 1e6:.4g} "
                "mm/kV); check conductivity_beta, or round the sharp edge where the field is singular")
        return base * np.exp(growth)

    return sigma, nonlinear


def analyse_dc(case: Case, problem: AssembledProblem, electrostatic_E_magnitude: np.ndarray,
               electrostatic_potential: np.ndarray, *, iterate: bool | None = None) -> DCResult:
    """The DC steady state on ``problem`` (the last electrostatic pass), compared with its solution.

    ``iterate``: Picard iterations (True) or one linear solve (False); None: iterate when a conductivity
    depends on the field.
    """
    settings = case.analysis
    copies = problem.symmetry_copies
    sigma_of, nonlinear = _sigma_function(problem, settings)
    if iterate is not None:
        nonlinear = iterate
    potentials = np.array([c.potential for c in problem.fixed])
    scale = max(float(np.abs(potentials).max()), 1e-300)
    conductance = None
    if not nonlinear:
        sigma = sigma_of(None)
        K = stiffness_with(problem, sigma)
        dc_problem = with_stiffness(problem, K)
        solution = solve(dc_problem, case.solver)
        u, iterations, change, solver_name = solution.potential, 1, 0.0, solution.solver
        L = conductor_indicator(dc_problem, dc_problem.fixed)
        conductance = copies * (L.T @ (K @ solution.unit_potentials))
    else:
        names: list[str] = []

        def picard(previous: np.ndarray | None) -> np.ndarray:
            """The potential for sigma taken from ``previous`` (None: at zero field)."""
            at = np.zeros(coefficient_points(problem)[0].shape) if previous is None else \
                field_magnitude_at_points(problem, previous)
            iterated = with_stiffness(problem, stiffness_with(problem, sigma_of(at)))
            system = FactorisedSystem(iterated, case.solver)
            try:
                names.append(system.solver_name)
                return system.solve(fixed_lift(iterated, potentials), np.zeros((len(iterated.floating), 1)))[:, 0]
            finally:
                system.close()

        u, iterations, change = _anderson(picard, scale, settings.tolerance, settings.max_iterations)
        solver_name = names[-1]
        if change > settings.tolerance:
            raise SolverError(
                f"the DC conduction iterations (sigma depends on the field) did not converge: relative change "
                f"{change:.1e} after {iterations} solves, wanted {settings.tolerance:.0e}; raise "
                "analysis.max_iterations, or check conductivity_beta (beta |E| of order 10 or more makes the problem "
                "very stiff)")
        sigma = sigma_of(field_magnitude_at_points(problem, u))
        K = stiffness_with(problem, sigma)
        dc_problem = with_stiffness(problem, K)

    every = dc_problem.conductors
    currents = copies * (conductor_indicator(dc_problem, every).T @ (K @ u))
    E = vertex_field(problem, u)
    magnitude = np.hypot(E[..., 0], E[..., 1])
    sigma_element = sigma.mean(axis=1) if sigma.ndim == 2 else sigma
    eps = epsilon_0 * problem.relative_permittivity

    peaks = region_peaks(problem, magnitude)
    against_dc = replace(problem, material_of_region={r: replace(m, dielectric_strength=m.dc_strength)
                                                      for r, m in problem.material_of_region.items()})
    screening = find_hotspots(against_dc, magnitude, case.hotspot_fraction)
    where = {p.region: p.location for p in screening.region_peaks}
    electrostatic = region_peaks(problem, electrostatic_E_magnitude)
    # right after a polarity reversal (+V to -V in a time short against eps/sigma) the free charge has not
    # moved: the DC steady field plus the capacitive field of the step -2V
    reversed_E = vertex_field(problem, u - 2 * electrostatic_potential)
    reversal = region_peaks(problem, np.hypot(reversed_E[..., 0], reversed_E[..., 1]))
    joule = region_quadratic(problem, sigma, u)
    section = problem.section
    regions = {}
    for name, material in problem.material_of_region.items():
        elements = section.elements_of(name)
        s = sigma_element[elements]
        tau = eps[elements] / s
        regions[name] = RegionDC(name, material.name, peaks[name], electrostatic[name], material.dc_strength,
                                 (float(tau.min()), float(tau.max())), (float(s.min()), float(s.max())),
                                 copies * joule[name], reversal[name], where[name])

    interfaces = _interface_charges(problem, u, eps, copies)
    warnings = []
    differing = [r for r in regions.values()
                 if r.peak_E > 0 and not (1 / DIFFERS_FACTOR <= r.ratio_to_electrostatic <= DIFFERS_FACTOR)]
    if differing:
        listed = ", ".join(f"{r.region} x{r.ratio_to_electrostatic:.3g}" for r in differing)
        warnings.append(f"the DC field differs strongly from the electrostatic one (peak |E| DC / electrostatic: "
                        f"{listed}); under DC the conductivities, not the permittivities, share the voltage, and "
                        "they depend strongly on temperature and field")
    gases = sorted(name for name, m in problem.material_of_region.items() if m.kind == "gas")
    if gases:
        warnings.append(f"gas regions {', '.join(gases)} are taken as ohmic conductors; a gas conducts by ions "
                        "that saturate at low field, so its DC field here is a rough estimate only")
    unknown = sorted(r.region for r in regions.values() if r.dc_strength is None)
    if unknown:
        warnings.append(f"no DC strength known for {', '.join(unknown)}: the DC peak is not checked against a "
                        "strength there (the AC dielectric strength is not a DC limit)")
    temperatures = {name: (settings.temperatures[name].describe() if name in settings.temperatures else
                           f"{problem.material_of_region[name].conductivity_reference_temperature:g} degC "
                           "(the material's reference)")
                    for name in problem.material_of_region}
    fixed_index = [i for i, c in enumerate(every) if not c.floating]
    loss = float(np.dot(potentials, currents[fixed_index]))
    d = electrostatic_potential - u
    resistive = float(d @ (K @ d))
    relaxation = None
    if resistive > 1e-20 * float(u @ (K @ u)):
        relaxation = float(d @ (problem.stiffness @ d)) / resistive
    return DCResult(u, E, magnitude, sigma_element, nonlinear, iterations, change if nonlinear else 0.0,
                    settings.tolerance, tuple(c.name for c in every), currents, conductance,
                    tuple(c.name for c in dc_problem.fixed), regions, interfaces, loss, relaxation, tuple(warnings),
                    temperatures, solver_name, screening)


def _interface_charges(problem: AssembledProblem, u: np.ndarray, eps: np.ndarray, copies: int
                       ) -> tuple[InterfaceDC, ...]:
    """Free charge on each interface between dielectrics: the jump of D . n, from a to b."""
    faces = interface_faces(problem, conductor_facets(problem))
    if not faces.pairs:
        return ()
    D = eps[:, None, None] * vertex_field(problem, u)
    density = jump_density(faces, D)
    solution = as_solution(problem, u)
    a, b = faces.side_a, faces.side_b
    out_a = outward_flux(solution, a.elements, a.local_vertices, a.outward_normals, eps[a.elements])
    out_b = outward_flux(solution, b.elements, b.local_vertices, b.outward_normals, eps[b.elements])
    total = -(out_a + out_b)  # outward D flux of both sides: (D_a - D_b) . n_ab
    out = []
    for k, (ra, rb) in enumerate(faces.pairs):
        sel = faces.facet_pair == k
        out.append(InterfaceDC(ra, rb, copies * float(total[sel].sum()), float(np.abs(density[sel]).max()),
                               a.facets[sel], density[sel]))
    return tuple(out)
