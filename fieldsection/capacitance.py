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
from .problem import conductor_indicator
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
    copies: int = 1  # every number above is for the full section: the model times this

    @property
    def to_reference(self) -> np.ndarray:
        """Each conductor's capacitance to everything not in the matrix (row sums), F/m.

        ~0 when the conductors enclose the field (a grounded outer boundary is then a row of its own);
        with an insulated or open outer boundary it is the capacitance to the far surroundings.
        """
        return self.maxwell_from_charge.sum(axis=1)

    @property
    def diagonally_dominant(self) -> bool:
        """C_ii >= sum_j |C_ij| over j != i, as every physical Maxwell matrix is (up to round-off)."""
        C = self.maxwell_from_charge
        off = np.abs(C).sum(axis=1) - np.abs(np.diag(C))
        return bool(np.all(np.diag(C) >= off - 1e-9 * np.abs(C).max()))

    @property
    def mutual(self) -> np.ndarray:
        """Two-terminal (partial) capacitances between conductor pairs, F/m: -C_ij off the diagonal."""
        m = -self.maxwell_from_charge.copy()
        np.fill_diagonal(m, 0.0)
        return m


@dataclass(frozen=True)
class TwoLevelCapacitance:
    """When the case's conductors sit at exactly two potentials: C between the two groups."""

    high: tuple[str, ...]
    low: tuple[str, ...]
    voltage: float  # V, high minus low, in the case
    from_energy: float  # F/m, 2 W / V^2 for the groups at 1 V and 0 V
    from_charge: float  # F/m, Q_high / V (reaction)
    from_flux: float  # F/m, Q_high / V (flux of D over the electrode surface in the case's solution)

    @property
    def relative_difference(self) -> float:
        return abs(self.from_charge - self.from_energy) / abs(self.from_energy)

    @property
    def flux_relative_difference(self) -> float:
        """NaN where the flux cannot measure C (a floating conductor carries a net charge)."""
        return abs(self.from_flux - self.from_energy) / abs(self.from_energy)


def compute_capacitance(solution: Solution, fields: ElementFields, charges: ChargeResult) -> CapacitanceResult:
    """Maxwell matrix over the fixed-potential conductors (floating ones uncharged), per ``copies`` of the model."""
    problem = solution.problem
    copies = problem.symmetry_copies
    K = problem.stiffness
    U = solution.unit_potentials
    fixed = problem.fixed
    every = problem.conductors
    fixed_index = [i for i, c in enumerate(every) if not c.floating]
    indicator = conductor_indicator(problem, every)
    lifts = indicator[:, fixed_index]
    KU = K @ U
    c_charge = copies * (lifts.T @ KU)
    c_energy = copies * (U.T @ KU)
    scale = max(np.abs(c_energy).max(), np.finfo(float).tiny)
    reaction = copies * (indicator.T @ (K @ solution.potential))
    flux = copies * np.array([c.charge_from_flux for c in charges.conductors])
    names = tuple(c.name for c in fixed)

    two_level = None
    potentials = np.array([c.potential for c in fixed])
    levels = np.unique(potentials)
    if levels.size == 2:
        high = potentials == levels[1]
        voltage = float(levels[1] - levels[0])
        unit = high.astype(float)  # the high group at 1 V, the low one at 0 V
        # the flux charges belong to the case's potentials; they measure C only when floating conductors are uncharged
        uncharged = all(c.charge == 0.0 for c in problem.floating)
        fixed_flux = flux[fixed_index]
        two_level = TwoLevelCapacitance(
            high=tuple(n for n, h in zip(names, high) if h),
            low=tuple(n for n, h in zip(names, high) if not h),
            voltage=voltage,
            from_energy=float(unit @ c_energy @ unit),
            from_charge=float(unit @ c_charge @ unit),
            from_flux=float(fixed_flux[high].sum()) / voltage if uncharged else float("nan"),
        )
    return CapacitanceResult(
        names=names,
        maxwell_from_charge=c_charge,
        maxwell_from_energy=c_energy,
        relative_difference=float(np.abs(c_charge - c_energy).max() / scale),
        asymmetry=float(np.abs(c_charge - c_charge.T).max() / scale),
        charges_from_reaction=reaction,
        charges_from_flux=flux,
        energy_per_length=copies * fields.energy_per_length,
        two_level=two_level,
        copies=copies,
    )
