"""Partial-discharge screening of gas regions: Paschen's law along the field line through the peak.

For every gas region whose material carries Townsend-Paschen constants, the field line through the
region's highest field is followed both ways until it leaves the gas. Its length d and the voltage
across it, U = integral of |E| along it, are compared with the breakdown voltage of a uniform gap
of that length at the gas pressure. The margin U_breakdown / U below 1 means a discharge can start
there. The comparison treats the line as a uniform gap: in a strongly non-uniform field it is an
estimate, not a criterion (a streamer integral would be next).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .fields import ElementFields
from .mesh import fit_circle
from .problem import AssembledProblem

#: standard atmosphere, Pa
ATMOSPHERE = 101_325.0
_MAX_STEPS = 20_000


def paschen_voltage(pressure_gap: float, constants: tuple[float, float, float]) -> float:
    """Breakdown voltage (V) of a uniform gap by the Townsend criterion (Paschen's law).

    V = B p d / (ln(A p d) - ln(ln(1 + 1/gamma))), p d in Pa m; infinite left of the curve's
    asymptote, where no breakdown by this mechanism can occur.
    """
    a, b, gamma = constants
    denominator = math.log(a * pressure_gap) - math.log(math.log1p(1 / gamma)) if pressure_gap > 0 else -1.0
    return b * pressure_gap / denominator if denominator > 0 else math.inf


def dakin_air_voltage(pressure_gap: float) -> float:
    """Uniform-field breakdown of air near atmospheric pressure, V: 6.72 sqrt(pd) + 24.36 pd kV with pd in
    bar cm (Dakin et al., Electra 32, 1974, as reproduced in Kuffel, Zaengl & Kuffel, High Voltage
    Engineering, 2000; from memory). Used with the Paschen curve, the lower of the two."""
    pd_bar_cm = pressure_gap / 1e5 * 1e2
    return 1e3 * (6.72 * math.sqrt(pd_bar_cm) + 24.36 * pd_bar_cm)


#: Peek's law for smooth round conductors in air: E_v = g0 m delta (1 + c / sqrt(delta r)), r in cm,
#: g0 = 30 kV/cm (peak), c = 0.301 cm^0.5 (F. W. Peek, Dielectric Phenomena in High Voltage Engineering,
#: McGraw-Hill 1929; as given in Kuffel, Zaengl & Kuffel, High Voltage Engineering, 2000). The
#: parallel-wire constants, which give a lower onset than the coaxial ones (31, 0.308): the safe side.
PEEK_G0 = 30e5  # V/m
PEEK_C = 0.301  # cm^0.5


def peek_onset_field(radius: float, relative_density: float = 1.0, surface_factor: float = 1.0) -> float:
    """Corona onset field (V/m, peak) at the surface of a round conductor of ``radius`` (m) in air.

    ``relative_density`` delta is 1 at 25 degC and 101.3 kPa; ``surface_factor`` m is 1 for a polished
    surface (0.93-0.98 weathered, 0.83-0.87 stranded, Peek 1929).
    """
    if not radius > 0:
        raise ValueError(f"a conductor radius must be positive, got {radius!r} m")
    r_cm = radius * 100.0
    return PEEK_G0 * surface_factor * relative_density * (1.0 + PEEK_C / math.sqrt(relative_density * r_cm))


@dataclass(frozen=True)
class CoronaCheck:
    """Surface field of a round conductor in air against Peek's onset field."""

    electrode: str
    gas_region: str
    radius: float  # m, of the circle the conductor's surface follows
    surface_field: float  # V/m, largest recovered |E| on the conductor's surface in the air
    onset_field: float  # V/m, Peek's law at the gas pressure, 25 degC, polished surface
    location: tuple[float, float]  # m

    @property
    def margin(self) -> float:
        """Onset field over surface field: below 1, corona is expected."""
        return self.onset_field / self.surface_field if self.surface_field > 0 else math.inf


def screen_corona(problem: AssembledProblem, magnitude: np.ndarray, pressure: float = ATMOSPHERE
                  ) -> tuple[CoronaCheck, ...]:
    """Every conductor whose surface is a circle (or an arc of one) and touches air: Peek's law.

    ``magnitude`` (nelements, 3) is |E| at the element vertices. Planar models only: Peek's law is
    for long round conductors. The relative air density is taken as pressure / 101.325 kPa (25 degC).
    """
    if problem.axisymmetric:
        return ()
    section = problem.section
    mesh = section.mesh
    names = section.region_names
    air = np.array([problem.material_of_region.get(n) is not None and problem.material_of_region[n].name == "air"
                    for n in names])
    out = []
    for conductor in problem.conductors:
        if conductor.facets.size < 6:
            continue
        vertices = np.unique(mesh.facets[:, conductor.facets])
        _, radius, deviation = fit_circle(mesh.p[:, vertices].T)
        if deviation > 1e-3 * radius:
            continue  # not round
        in_air = air[section.region_of_element[conductor.facet_dielectric_element]]
        if not in_air.any():
            continue
        elements = conductor.facet_dielectric_element[in_air]
        on_surface = np.isin(mesh.t[:, elements], vertices).T  # (k, 3)
        values = np.where(on_surface, magnitude[elements], 0.0)
        k = np.unravel_index(np.argmax(values), values.shape)
        where = mesh.p[:, mesh.t[k[1], elements[k[0]]]]
        region = names[section.region_of_element[elements[k[0]]]]
        out.append(CoronaCheck(conductor.name, region, radius, float(values[k]),
                               peek_onset_field(radius, pressure / ATMOSPHERE), (float(where[0]), float(where[1]))))
    return tuple(sorted(out, key=lambda check: check.margin))


@dataclass(frozen=True)
class GasGapScreening:
    region: str
    material: str
    start: tuple[float, float]  # m, where the region's field is highest
    ends: tuple[tuple[float, float], tuple[float, float]]  # m, where the field line leaves the gas
    length: float  # m
    voltage: float  # V across the field line
    breakdown_voltage: float  # V, for a uniform gap of that length at the pressure
    pressure: float  # Pa

    @property
    def margin(self) -> float:
        """Breakdown voltage over the voltage across the gap: below 1, a discharge can start."""
        return self.breakdown_voltage / self.voltage if self.voltage > 0 else math.inf


def screen_gas_gaps(problem: AssembledProblem, fields: ElementFields, pressure: float = ATMOSPHERE
                    ) -> tuple[GasGapScreening, ...]:
    """One screening per gas region with Paschen constants, lowest margin first."""
    section = problem.section
    mesh = section.mesh
    walker = _FieldLineWalker(mesh, ~section.exterior, section.region_of_element, fields, section.element_areas)
    out = []
    for name, material in problem.material_of_region.items():
        if material.kind != "gas" or material.paschen is None:
            continue
        elements = section.elements_of(name)
        hottest = elements[np.argmax(fields.element_peak_E[elements])]
        start = mesh.p[:, mesh.t[:, hottest]].mean(axis=1)
        legs = [walker.follow(start, int(hottest), sign) for sign in (1.0, -1.0)]
        length = legs[0][1] + legs[1][1]
        voltage = legs[0][2] + legs[1][2]
        breakdown = paschen_voltage(pressure * length, material.paschen)
        if material.name == "air":
            breakdown = min(breakdown, dakin_air_voltage(pressure * length))
        out.append(GasGapScreening(name, material.name, (float(start[0]), float(start[1])),
                                   (legs[0][0], legs[1][0]), length, voltage, breakdown, pressure))
    return tuple(sorted(out, key=lambda s: s.margin))


class _FieldLineWalker:
    """Marches along a field line through the section's straight (corner) triangles, midpoint rule, steps
    of a fifth of an element. Each step lands in the same element or a near one, so points are located
    among the neighbours of the last element first; a search tree is built only if that fails. The
    open-space image (not ``drawn``) counts as outside."""

    def __init__(self, mesh, drawn: np.ndarray, region_of_element: np.ndarray, fields: ElementFields,
                 areas: np.ndarray):
        self.mesh, self.drawn, self.region, self.fields, self.areas = mesh, drawn, region_of_element, fields, areas
        self.x, self.y = mesh.p[0], mesh.p[1]
        self._tree = None

    def _corners(self, ks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        vertices = self.mesh.t[:3, ks]
        return self.x[vertices], self.y[vertices]  # each (3, len(ks))

    def _barycentric(self, point: np.ndarray, ks: np.ndarray) -> np.ndarray:
        x, y = self._corners(ks)
        det = (x[1] - x[0]) * (y[2] - y[0]) - (x[2] - x[0]) * (y[1] - y[0])
        s = ((point[0] - x[0]) * (y[2] - y[0]) - (x[2] - x[0]) * (point[1] - y[0])) / det
        t = ((x[1] - x[0]) * (point[1] - y[0]) - (point[0] - x[0]) * (y[1] - y[0])) / det
        return np.array([1 - s - t, s, t])

    def _first_holding(self, point: np.ndarray, ks: np.ndarray) -> int:
        inside = (self._barycentric(point, ks) >= -1e-12).all(axis=0)
        return int(ks[np.argmax(inside)]) if inside.any() else -1

    def _neighbours(self, ks: np.ndarray) -> np.ndarray:
        around = self.mesh.f2t[:, self.mesh.t2f[:, ks]].ravel()
        return np.unique(around[around >= 0])

    def locate(self, point: np.ndarray, near: int) -> int:
        """Element holding ``point`` (searched from element ``near`` outwards), or -1 outside the drawn section."""
        ring = np.array([near])
        for _ in range(3):  # the element, its neighbours, theirs (the open-space image overlaps: skipped)
            found = self._first_holding(point, ring[self.drawn[ring]])
            if found >= 0:
                return found
            ring = self._neighbours(ring)
        if self._tree is None:
            from scipy.spatial import cKDTree

            t = self.mesh.t[:3]
            self._ids = np.flatnonzero(self.drawn)
            self._tree = cKDTree(np.column_stack([self.x[t[:, self._ids]].mean(axis=0),
                                                  self.y[t[:, self._ids]].mean(axis=0)]))
        for count in (32, 1024):  # a big element beside a finely meshed band may be far down the list
            _, nearest = self._tree.query(point, k=min(count, self._ids.size))
            found = self._first_holding(point, self._ids[np.atleast_1d(nearest)])
            if found >= 0:
                return found
        return -1

    def _size(self, k: int) -> float:
        return float(np.sqrt(2.0 * self.areas[k]))

    def field(self, point: np.ndarray, k: int) -> np.ndarray:
        """E at ``point`` in element k: linear in the vertex values (exact for P1 and straight P2)."""
        return self._barycentric(point, np.array([k]))[:, 0] @ self.fields.E[k]

    def follow(self, start: np.ndarray, element: int, sign: float) -> tuple[tuple[float, float], float, float]:
        """(end point, length, integral of |E|) along sign * E from ``start`` (in ``element``) until its region ends."""
        point = np.asarray(start, dtype=float)
        region = self.region[element]
        k = element
        length = volts = 0.0

        def within(candidate: int) -> bool:
            return candidate >= 0 and self.region[candidate] == region

        for _ in range(_MAX_STEPS):  # steps along one line, not a loop over the mesh
            if not within(k):
                break
            step = 0.2 * self._size(k)
            e = self.field(point, k)
            if not np.hypot(*e) > 0:
                break
            middle = point + 0.5 * step * sign * e / np.hypot(*e)
            km = self.locate(middle, k)
            e_mid = self.field(middle, km) if within(km) else e  # near the region's edge: Euler's step
            magnitude = float(np.hypot(*e_mid))
            if not magnitude > 0:
                break
            ahead = point + step * sign * e_mid / magnitude
            k_ahead = self.locate(ahead, k)
            if not within(k_ahead):
                # the region ends within this step: find where by bisection, and stop there
                inside, outside = 0.0, step
                for _ in range(30):
                    trial = 0.5 * (inside + outside)
                    if within(self.locate(point + trial * sign * e_mid / magnitude, k)):
                        inside = trial
                    else:
                        outside = trial
                point = point + inside * sign * e_mid / magnitude
                length += inside
                volts += inside * magnitude
                break
            point, k = ahead, k_ahead
            length += step
            volts += step * magnitude
        return (float(point[0]), float(point[1])), float(length), float(volts)
