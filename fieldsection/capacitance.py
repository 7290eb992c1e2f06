"""Capacitance per unit length: the Maxwell matrix two ways, and the case's charges.

With U the unit solutions and L the indicator of each conductor's DOFs:
- from electrode charge (the reaction at the conductor's DOFs): C_Q = L^T K U;
- from stored energy: C_W = U^T K U (C_W[i, i] = 2 W_i / (1 V)^2).
They agree to solver precision by construction; the flux integral of D.n over each electrode
surface is independent of that identity and differs by the discretisation error.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .charges import ChargeResult
from .fields import ElementFields
from .solve import Solution


@dataclass(frozen=True)
class CapacitanceResult:
    names: tuple[str, ...]
    maxwell_from_charge: np.ndarray  # F/m, (N, N)
    maxwell_from_energy: np.ndarray  # F/m
    relative_difference: float  # max |C_Q - C_W| / max |C_W|
    asymmetry: float  # max |C - C^T| / max |C|
    charges_from_reaction: np.ndarray  # C/m per conductor, for the case's potentials
    charges_from_flux: np.ndarray  # C/m per conductor, integral of sigma_f
    energy_per_length: float  # J/m
    two_level: "TwoLevelCapacitance | None"

    @property
    def mutual(self) -> np.ndarray:
        """Two-terminal (partial) capacitances between conductor pairs, F/m: -C_ij off the diagonal."""
        m = -self.maxwell_from_charge.copy()
        np.fill_diagonal(m, 0.0)
        return m

    @property
    def to_others(self) -> np.ndarray:
        """Row sums: each conductor's capacitance to infinity/ungrounded space, F/m (~0 when enclosed)."""
        return self.maxwell_from_charge.sum(axis=1)


@dataclass(frozen=True)
class TwoLevelCapacitance:
    """When the case's conductors sit at exactly two potentials: C between the two groups."""

    high: tuple[str, ...]
    low: tuple[str, ...]
    voltage: float  # V, high minus low
    from_energy: float  # F/m, 2 W / V^2
    from_charge: float  # F/m, Q_high / V (reaction)
    from_flux: float  # F/m, Q_high / V (flux of D)

    @property
    def relative_difference(self) -> float:
        return abs(self.from_charge - self.from_energy) / abs(self.from_energy)

    @property
    def flux_relative_difference(self) -> float:
        return abs(self.from_flux - self.from_energy) / abs(self.from_energy)


def compute_capacitance(solution: Solution, fields: ElementFields, charges: ChargeResult) -> CapacitanceResult:
    problem = solution.problem
    K = problem.stiffness
    U = solution.unit_potentials
    lifts = np.zeros_like(U)
    for i, conductor in enumerate(problem.conductors):
        lifts[conductor.dofs, i] = 1.0
    KU = K @ U
    c_charge = lifts.T @ KU
    c_energy = U.T @ KU
    scale = max(np.abs(c_energy).max(), np.finfo(float).tiny)
    potentials = np.array([c.potential for c in problem.conductors])
    reaction = lifts.T @ (K @ solution.potential)
    flux = np.array([c.charge_from_flux for c in charges.conductors])
    names = tuple(c.name for c in problem.conductors)

    two_level = None
    levels = np.unique(potentials)
    if levels.size == 2:
        high = potentials == levels[1]
        voltage = float(levels[1] - levels[0])
        two_level = TwoLevelCapacitance(
            high=tuple(n for n, h in zip(names, high) if h),
            low=tuple(n for n, h in zip(names, high) if not h),
            voltage=voltage,
            from_energy=2 * fields.energy_per_length / voltage**2,
            from_charge=float(reaction[high].sum()) / voltage,
            from_flux=float(flux[high].sum()) / voltage,
        )
    return CapacitanceResult(
        names=names,
        maxwell_from_charge=c_charge,
        maxwell_from_energy=c_energy,
        relative_difference=float(np.abs(c_charge - c_energy).max() / scale),
        asymmetry=float(np.abs(c_charge - c_charge.T).max() / scale),
        charges_from_reaction=reaction,
        charges_from_flux=flux,
        energy_per_length=fields.energy_per_length,
        two_level=two_level,
    )
