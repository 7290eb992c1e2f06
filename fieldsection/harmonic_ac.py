"""AC, time-harmonic and quasi-static: -div((sigma + j omega eps) grad V) = 0 with complex phasors.

Convention: the electrode potentials of the case are **peak values** (amplitudes) of sinusoids,
V_k(t) = |V_k| cos(omega t + phi_k) with phi_k from ``[analysis.phases_deg]`` (a negative potential is an
amplitude at 180 degrees). Peak fields are then the crest values the electrostatic analysis gives at
those potentials, and the dielectric loss is the time average, P = 1/2 Re(V I*) = V_rms^2 G.

The loss of a material with loss tangent tan(d) and conductivity sigma enters as the effective
conductivity sigma_eff = sigma + omega eps tan(d) (eps'' = eps' tan(d)); a material with neither is
lossless. Each conductivity is its sigma0: no temperature or field dependence in AC. The complex
matrix A = K_sigma_eff + j omega K_eps is assembled from the two real ones (the form is linear in
its coefficient), reduced over the free DOFs and floating conductors (which carry
no net current) and solved by GMRES with the real matrix K_sigma_eff + omega K_eps as preconditioner
(see ``_ComplexSystem``), one solve per fixed conductor: the admittance matrix Y = G + j omega C per
metre follows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.constants import epsilon_0

from .case import Case
from .conduction import element_values, region_peaks, region_quadratic, stiffness_with, vertex_field, with_stiffness
from .errors import SolverError
from .hotspots import HotspotResult, find_hotspots
from .problem import AssembledProblem, conductor_indicator
from .solve import FactorisedSystem

#: relative residual at which GMRES stops, per conductor
GMRES_TOLERANCE = 1e-11
#: GMRES restarts allowed (60 iterations each)
GMRES_MAX_RESTARTS = 20


@dataclass(frozen=True)
class RegionAC:
    region: str
    material: str
    peak_E: float  # V/m, largest |E(t)| over a period at the element vertices (no recovery, no certificate)
    electrostatic_peak_E: float  # V/m, at the case's potentials without phases or conduction
    dielectric_strength: float | None
    effective_conductivity: float  # S/m, sigma + omega eps tan(d)
    loss: float  # W/m (planar) or W, time average
    elements_over_fraction: int  # elements whose peak reaches hotspot_fraction x strength
    location: tuple[float, float] = (math.nan, math.nan)  # m, where peak_E is

    @property
    def utilisation(self) -> float | None:
        return None if self.dielectric_strength is None else self.peak_E / self.dielectric_strength


@dataclass(frozen=True)
class ACResult:
    frequency: float  # Hz
    potential: np.ndarray  # complex phasor per DOF, V (peak)
    E_peak: np.ndarray  # (nelements, 3) largest |E(t)| over a period at element vertices, V/m
    loss_density: np.ndarray  # (nelements,) time-averaged W/m^3 (mean over the element's vertices)
    fixed_names: tuple[str, ...]
    phasors: np.ndarray  # complex, V, per fixed conductor
    admittance: np.ndarray  # S/m, complex (fixed x fixed)
    currents: np.ndarray  # complex A/m (peak), net current out of each fixed conductor
    regions: Mapping[str, RegionAC]
    loss: float  # W/m or W: 1/2 Re(V . conj(I)) over the fixed conductors
    loss_from_regions: float  # the sum of the regions' losses (a check on the same number)
    notes: tuple[str, ...]
    solver: str = ""
    screening: HotspotResult | None = None  # hotspots of the peak over a period against the dielectric strength

    @property
    def capacitance(self) -> np.ndarray:
        """F/m: Im(Y) / omega."""
        return self.admittance.imag / (2 * math.pi * self.frequency)

    @property
    def conductance(self) -> np.ndarray:
        """S/m: Re(Y)."""
        return self.admittance.real


class _ComplexSystem:
    """A = K_sigma + j omega K_eps over the free DOFs and floating potentials, solved by GMRES preconditioned
    with the real SPD matrix P = K_sigma + omega K_eps, factorised once by the electrostatic solver chain.

    Both parts are symmetric positive (semi)definite, so the eigenvalues of P^-1 A, (w + j t)/(w + t) for
    w, t >= 0, lie on the segment from 1 to j: at least 1/sqrt(2) from the origin whatever the frequency,
    and GMRES needs a few tens of iterations (O. Axelsson, A. Kucherov, "Real valued iterative methods for
    solving complex symmetric linear systems", Numer. Linear Algebra Appl. 7, 2000; from memory). The real
    factorisation is also several times cheaper than a complex LU (SuperLU's complex LU with pivoting took
    minutes at 2e4 unknowns here).
    """

    def __init__(self, problem: AssembledProblem, conductance: sp.csr_matrix, omega: float, method: str):
        self._A = conductance + 1j * omega * problem.stiffness
        self._system = FactorisedSystem(with_stiffness(problem, (conductance + omega * problem.stiffness).tocsr()),
                                        method)
        T = self._system.prolongation
        self._T = T
        self._reduced = (T.T @ (self._A @ T)).tocsr()
        n = self._reduced.shape[0]

        def precondition(r: np.ndarray) -> np.ndarray:
            r = np.asarray(r).reshape(-1)
            both = self._system.solve_reduced(np.asfortranarray(np.column_stack([r.real, r.imag])))
            return both[:, 0] + 1j * both[:, 1]

        self._M = spla.LinearOperator((n, n), matvec=precondition, dtype=complex)
        self.iterations = 0
        self.name = f"GMRES preconditioned by {self._system.solver_name} on K_sigma + omega K_eps"

    def solve(self, lifts: np.ndarray) -> np.ndarray:
        """Full complex DOF vectors for the boundary data ``lifts`` (ndofs, k)."""
        out = np.array(lifts, dtype=complex)
        for column in range(lifts.shape[1]):  # one GMRES run per conductor
            b = -(self._T.T @ (self._A @ out[:, column]))
            norm = np.linalg.norm(b)
            if norm == 0.0:
                continue
            count = [0]

            def tick(_):
                count[0] += 1

            x, info = spla.gmres(self._reduced, b, rtol=GMRES_TOLERANCE, atol=0.0, restart=60,
                                 maxiter=GMRES_MAX_RESTARTS, M=self._M, callback=tick, callback_type="pr_norm")
            achieved = np.linalg.norm(b - self._reduced @ x) / norm
            self.iterations += count[0]
            if info != 0 or not achieved <= 10 * GMRES_TOLERANCE:
                raise SolverError(f"the AC solve (GMRES) did not converge: relative residual {achieved:.1e} after "
                                  f"{count[0]} iterations (wanted {GMRES_TOLERANCE:.0e})")
            out[:, column] += self._T @ x
        if not np.all(np.isfinite(out)):
            raise SolverError("the AC solve produced non-finite potentials; the system is ill-conditioned")
        return out

    def close(self) -> None:
        self._system.close()


def peak_over_period(real: np.ndarray, imag: np.ndarray) -> np.ndarray:
    """max over t of |Re((a + j b) e^{j w t})| for 2D vectors a, b (..., 2): the semi-major axis of the
    polarisation ellipse."""
    aa = (real**2).sum(axis=-1)
    bb = (imag**2).sum(axis=-1)
    ab = (real * imag).sum(axis=-1)
    return np.sqrt(0.5 * (aa + bb) + np.sqrt(0.25 * (aa - bb) ** 2 + ab**2))


def analyse_ac(case: Case, problem: AssembledProblem, electrostatic_E_magnitude: np.ndarray) -> ACResult:
    """The steady sinusoidal state at ``case.analysis.frequency`` on ``problem`` (the last electrostatic pass)."""
    settings = case.analysis
    omega = settings.omega
    copies = problem.symmetry_copies
    eps = epsilon_0 * problem.relative_permittivity
    sigma_eff = element_values(problem, lambda m: (m.conductivity or 0.0)) \
        + omega * eps * element_values(problem, lambda m: (m.loss_tangent or 0.0))
    conductance = stiffness_with(problem, sigma_eff)
    A = conductance + 1j * omega * problem.stiffness  # problem.stiffness is K_eps
    system = _ComplexSystem(problem, conductance, omega, case.solver)
    fixed = problem.fixed
    lifts = conductor_indicator(problem, fixed)
    try:
        if len(fixed) > 1:  # A annihilates constants: the unit solutions sum to 1, so the last one needs no solve
            unit = np.empty(lifts.shape, dtype=complex)
            unit[:, :-1] = system.solve(lifts[:, :-1])
            unit[:, -1] = 1.0 - unit[:, :-1].sum(axis=1)
        else:
            unit = system.solve(lifts)
    finally:
        system.close()
    # amplitudes from the case (the problem's conductors hold the electrostatic instant t = 0)
    phasors = np.array([case.electrodes.get(c.name, c.potential)
                        * np.exp(1j * math.radians(settings.phases_deg.get(c.name, 0.0))) for c in fixed])
    u = unit @ phasors
    L = conductor_indicator(problem, fixed)
    admittance = copies * (L.T @ (A @ unit))
    currents = copies * (L.T @ (A @ u))
    loss = 0.5 * float(np.real(phasors @ np.conj(currents)))

    E_re, E_im = vertex_field(problem, u.real), vertex_field(problem, u.imag)
    E_peak = peak_over_period(E_re, E_im)
    mean_square = 0.5 * ((E_re**2).sum(axis=-1) + (E_im**2).sum(axis=-1)).mean(axis=1)  # time average of |E|^2
    loss_density = sigma_eff * mean_square
    peaks = region_peaks(problem, E_peak)
    screening = find_hotspots(problem, E_peak, case.hotspot_fraction)
    where = {p.region: p.location for p in screening.region_peaks}
    electrostatic = region_peaks(problem, electrostatic_E_magnitude)
    losses = region_quadratic(problem, sigma_eff, u)
    section = problem.section
    regions = {}
    for name, material in problem.material_of_region.items():
        elements = section.elements_of(name)
        strength = material.dielectric_strength
        over = 0 if strength is None else int((E_peak[elements].max(axis=1) >= case.hotspot_fraction * strength).sum())
        regions[name] = RegionAC(name, material.name, peaks[name], electrostatic[name], strength,
                                 float(sigma_eff[elements].mean()) if elements.size else 0.0,
                                 0.5 * copies * losses[name], over, where[name])
    notes = []
    if any(settings.phases_deg.values()):
        notes.append("the electrostatic sections of this report are the instant t = 0, each electrode at "
                     "V cos(phase); the peak over a period is in this section")
    lossless = sorted({m.name for m in problem.material_of_region.values()
                       if m.conductivity is None and m.loss_tangent is None})
    if lossless:
        notes.append(f"no conductivity or loss tangent for {', '.join(lossless)}: taken as lossless")
    return ACResult(settings.frequency, u, E_peak, loss_density, tuple(c.name for c in fixed), phasors, admittance,
                    currents, regions, loss, float(sum(r.loss for r in regions.values())), tuple(notes),
                    f"{system.name}, {system.iterations} iterations", screening)
