"""The field's power law at a corner, from the geometry alone.

Near a corner the potential behaves as r^lambda f(theta), so |E| ~ r^(lambda - 1): singular when
lambda < 1. For one dielectric wedge of opening angle beta between conductor faces, lambda = pi / beta
(beta = 3 pi / 2 at a 90-degree conductor corner, so |E| ~ r^(-1/3); beta = 2 pi at a foil edge:
r^(-1/2)); E. J. Rothwell, M. J. Cloud, Electromagnetics, CRC Press 2001, section 3.2.9; J. D.
Jackson, Classical Electrodynamics, 3rd ed., section 2.11. With several dielectric wedges (a triple
point) lambda is the smallest positive root of the wedge eigenproblem: f and eps f' continuous across
each material interface, f = 0 on a conductor face, eps f' = 0 on an insulated face; solved here with
2 x 2 transfer matrices across the wedges.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from .problem import AssembledProblem

FIXED, INSULATED = "fixed", "insulated"  # the two kinds of face that bound a field sector
#: an exponent below this is a singularity worth reporting (-0.05: a 171-degree conductor edge)
SINGULAR_EXPONENT = -0.05


@dataclass(frozen=True)
class CornerTheory:
    """The most singular field sector at a mesh vertex."""

    exponent: float  # of |E| against the distance r from the corner: lambda - 1
    field_angle: float  # rad, the opening of that sector (the dielectric side)
    n_materials: int  # number of dielectric wedges of different permittivity in it

    @property
    def singular_enough(self) -> bool:
        """Singular beyond the slight re-entrance of a curve drawn with few segments."""
        return self.exponent < SINGULAR_EXPONENT


def wedge_eigenvalue(wedges: list[tuple[float, float]], start: str, end: str) -> float:
    """Smallest lambda > 0 for wedges [(angle rad, eps_r), ...] in order, bounded by faces ``start``, ``end``."""
    grid = np.linspace(1e-4, 4.0, 4001)

    def end_values(lam: np.ndarray) -> np.ndarray:
        # state (f, eps f' / lambda) carried across each wedge by its 2 x 2 transfer matrix
        f = np.zeros_like(lam) if start == FIXED else np.ones_like(lam)
        g = np.ones_like(lam) if start == FIXED else np.zeros_like(lam)
        for angle, eps in wedges:
            c, s = np.cos(lam * angle), np.sin(lam * angle)
            f, g = c * f + s / eps * g, -eps * s * f + c * g
        return f if end == FIXED else g

    values = end_values(grid)
    change = np.flatnonzero(np.sign(values[:-1]) * np.sign(values[1:]) <= 0)
    if change.size == 0:
        return float("inf")
    k = change[0]
    if values[k] == 0:
        return float(grid[k])
    return float(brentq(lambda x: float(end_values(np.array([x]))[0]), grid[k], grid[k + 1], xtol=1e-12))


def corner_theory(problem: AssembledProblem, vertex: int) -> CornerTheory | None:
    """The field exponent at mesh vertex ``vertex``; None where no conductor or boundary face meets it
    (a corner between dielectrics alone, whose exponent needs the full periodic eigenproblem)."""
    mesh = problem.section.mesh
    centre = mesh.p[:, vertex]
    if problem.axisymmetric and abs(centre[0]) <= 1e-9 * np.ptp(mesh.p[0]):
        return None  # on the axis a corner is the tip of a cone, not a wedge
    elements = np.flatnonzero((mesh.t == vertex).any(axis=0) & ~problem.section.exterior)
    facet_of = _facets_at(mesh, vertex)
    curved = problem.section.curved
    items = []  # (start angle, opening, first other vertex, second other vertex, element), counter-clockwise
    for k in elements:  # the few elements around one vertex
        others = [int(w) for w in mesh.t[:, k] if w != vertex]
        d = mesh.p[:, others] - centre[:, None]
        if curved:  # the tangent at the vertex of each quadratic edge, not its chord
            mid = mesh.doflocs[:, [mesh.nvertices + facet_of[w] for w in others]]
            d = 4 * mid - 3 * centre[:, None] - mesh.p[:, others]
        angles = np.arctan2(d[1], d[0])
        first, second = (0, 1) if d[0, 0] * d[1, 1] - d[1, 0] * d[0, 1] > 0 else (1, 0)
        opening = (angles[second] - angles[first]) % (2 * np.pi)
        items.append((angles[first], opening, others[first], others[second], int(k)))
    items.sort(key=lambda item: item[0])
    n = len(items)
    neighbours, facets = np.array(list(facet_of.keys())), np.array(list(facet_of.values()))
    claimed = np.concatenate([c.facets for c in problem.conductors]) if problem.conductors else np.zeros(0, int)
    on_conductor = set(neighbours[np.isin(facets, claimed)].tolist())

    def stops_after(i: int) -> bool:
        here, after = items[i], items[(i + 1) % n]
        return (n == 1 or here[3] != after[2] or here[3] in on_conductor
                or not problem.dielectric[here[4]] or not problem.dielectric[after[4]])

    def face(w: int, neighbour_is_conductor: bool) -> str:
        # a conductor's facet or a meshed conductor beyond: fixed; any other edge of the field region is
        # insulated (insulated curves, an insulated outer boundary, the axis of revolution)
        return FIXED if neighbour_is_conductor or w in on_conductor else INSULATED

    breaks = [i for i in range(n) if stops_after(i)]
    if not breaks:
        return None
    best: CornerTheory | None = None
    for b_index, b in enumerate(breaks):
        stop = breaks[(b_index + 1) % len(breaks)]
        run_ids = []
        i = (b + 1) % n
        while True:
            run_ids.append(i)
            if i == stop:
                break
            i = (i + 1) % n
        run = [items[i] for i in run_ids]
        if not all(problem.dielectric[item[4]] for item in run):
            continue
        before, after = items[b], items[(stop + 1) % n]
        start = face(run[0][2], before[3] == run[0][2] and not problem.dielectric[before[4]])
        end = face(run[-1][3], after[2] == run[-1][3] and not problem.dielectric[after[4]])
        wedges: list[tuple[float, float]] = []
        for _, opening, _, _, k in run:
            eps = float(problem.relative_permittivity[k])
            if wedges and wedges[-1][1] == eps:
                wedges[-1] = (wedges[-1][0] + opening, eps)
            else:
                wedges.append((opening, eps))
        lam = wedge_eigenvalue(wedges, start, end)
        theory = CornerTheory(lam - 1.0, sum(w[0] for w in wedges), len({w[1] for w in wedges}))
        if best is None or theory.exponent < best.exponent:
            best = theory
    return best


def _facets_at(mesh, vertex: int) -> dict[int, int]:
    """Facet index of each edge (vertex, w), keyed by the other vertex w."""
    ends = mesh.facets
    at = np.flatnonzero((ends == vertex).any(axis=0))
    other = np.where(ends[0, at] == vertex, ends[1, at], ends[0, at])
    return {int(w): int(f) for w, f in zip(other, at)}
