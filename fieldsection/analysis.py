"""The analysis kind of a case: electrostatic (the default), DC steady conduction, or AC time-harmonic.

The case file's section (fieldsection's own schema)::

    [analysis]
    kind = "dc"                      # "electrostatic" (default), "dc" or "ac"
    tolerance = 1e-8                 # dc, sigma(T, E) only: relative potential change that ends the iterations
    max_iterations = 60              # dc, sigma(T, E) only
    frequency = "50 Hz"              # ac only
    [analysis.phases_deg]            # ac only: phase of each electrode's potential, degrees (default 0)
    bar_a = 0
    bar_b = -120
    [analysis.temperature_degC]      # dc only: temperature per region (default: each material's reference)
    insulation = 70                  # uniform, or a linear profile between two points:
    screen = { start = ["0 mm", "0 mm"], end = ["10 mm", "0 mm"], at_start = 90, at_end = 60, along = "radius" }

``along = "line"`` (default) takes the temperature linear in the projection onto start -> end, held
constant beyond the two points; ``along = "radius"`` linear in the distance from ``start`` (a cable's
axis), from ``at_start`` at ``inner_radius`` (default 0) to ``at_end`` at the distance of ``end``.

The electrostatic solution is always computed; a DC or AC analysis runs after it on the same mesh
(the last adaptive pass) and is reported beside it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from .errors import CaseFileError
from .units import to_si

KINDS = {
    "electrostatic": "a perfect insulator: the field follows the permittivities (the default)",
    "dc": "steady DC conduction: the field follows the conductivities, sigma(T, E) allowed",
    "ac": "time-harmonic, quasi-static: sigma + j omega eps, electrode phasors, dielectric loss",
}
ALONG = ("line", "radius")
DEFAULT_TOLERANCE = 1e-8
DEFAULT_MAX_ITERATIONS = 60


@dataclass(frozen=True)
class TemperatureProfile:
    """A temperature in degC at every point of a region: uniform (``start`` None) or linear between two points.

    ``along = "line"``: linear in the projection onto start -> end; ``"radius"``: linear in the distance
    from ``start`` between ``inner_radius`` (``at_start``) and |end - start| (``at_end``). Held constant
    beyond the two ends.
    """

    at_start: float
    at_end: float | None = None
    start: tuple[float, float] | None = None  # m
    end: tuple[float, float] | None = None  # m
    along: str = "line"
    inner_radius: float = 0.0  # m, "radius" only

    def __post_init__(self) -> None:
        if self.along not in ALONG:
            raise CaseFileError(f"temperature profile: along = {self.along!r}, use one of "
                                f"{', '.join(map(repr, ALONG))}")
        numbers = [self.at_start] + ([] if self.start is None else [self.at_end, *self.start, *(self.end or ())])
        if self.start is not None and (self.end is None or self.at_end is None):
            raise CaseFileError("temperature profile: a linear profile needs start, end, at_start and at_end")
        if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in numbers):
            raise CaseFileError(f"temperature profile: {numbers!r} must be finite numbers (degC, m)")
        if self.start is not None:
            span = math.hypot(self.end[0] - self.start[0], self.end[1] - self.start[1])
            if span <= 0 or (self.along == "radius" and not 0 <= self.inner_radius < span):
                raise CaseFileError("temperature profile: its end must lie away from its start (and beyond "
                                    "inner_radius)")

    def at(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """degC at the points (x, y) (arrays of one shape, m)."""
        if self.start is None:
            return np.full(np.shape(x), self.at_start)
        sx, sy = self.start
        ex, ey = self.end
        if self.along == "line":
            dx, dy = ex - sx, ey - sy
            s = ((x - sx) * dx + (y - sy) * dy) / (dx * dx + dy * dy)
        else:
            outer = math.hypot(ex - sx, ey - sy)
            s = (np.hypot(x - sx, y - sy) - self.inner_radius) / (outer - self.inner_radius)
        s = np.clip(s, 0.0, 1.0)
        return self.at_start + s * (self.at_end - self.at_start)

    def describe(self) -> str:
        if self.start is None:
            return f"{self.at_start:g} degC"
        if self.along == "radius":
            outer = math.hypot(self.end[0] - self.start[0], self.end[1] - self.start[1])
            return (f"linear in the distance from ({self.start[0] * 1e3:g}, {self.start[1] * 1e3:g}) mm: "
                    f"{self.at_start:g} degC at {self.inner_radius * 1e3:g} mm to {self.at_end:g} degC at "
                    f"{outer * 1e3:g} mm")
        return (f"linear along the line ({self.start[0] * 1e3:g}, {self.start[1] * 1e3:g}) mm -> "
                f"({self.end[0] * 1e3:g}, {self.end[1] * 1e3:g}) mm, {self.at_start:g} -> {self.at_end:g} degC")


@dataclass(frozen=True)
class AnalysisSettings:
    """Which analysis runs, with its settings (SI units; temperatures in degC)."""

    kind: str = "electrostatic"
    frequency: float | None = None  # Hz, ac
    phases_deg: Mapping[str, float] = field(default_factory=dict)  # ac, electrode -> degrees
    temperatures: Mapping[str, TemperatureProfile] = field(default_factory=dict)  # dc, region -> profile
    tolerance: float = DEFAULT_TOLERANCE  # dc with sigma(T, E)
    max_iterations: int = DEFAULT_MAX_ITERATIONS

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise CaseFileError(f"analysis.kind = {self.kind!r}: use one of {', '.join(map(repr, KINDS))}")
        if self.kind == "ac":
            f = self.frequency
            if f is None:
                raise CaseFileError("analysis.frequency: an AC analysis needs a frequency, e.g. frequency = \"50 Hz\"")
            if not (math.isfinite(f) and f > 0):
                raise CaseFileError(f"analysis.frequency = {f!r} Hz: must be a positive frequency, e.g. \"50 Hz\"")
        elif self.frequency is not None or self.phases_deg:
            raise CaseFileError(f"analysis.frequency / analysis.phases_deg apply to kind = \"ac\" only, "
                                f"not {self.kind!r}; remove them")
        if self.kind != "dc" and self.temperatures:
            raise CaseFileError(f"analysis.temperature_degC applies to kind = \"dc\" only, not {self.kind!r}; "
                                "remove it")
        t = self.tolerance
        if isinstance(t, bool) or not isinstance(t, (int, float)) or not (0 < t < 1):
            raise CaseFileError(f"analysis.tolerance = {t!r}: a relative change of the potential in (0, 1), e.g. 1e-8")
        n = self.max_iterations
        if isinstance(n, bool) or not isinstance(n, int) or n < 1:
            raise CaseFileError(f"analysis.max_iterations = {n!r}: a whole number of at least 1, without quotes")
        object.__setattr__(self, "phases_deg", MappingProxyType(dict(self.phases_deg)))
        object.__setattr__(self, "temperatures", MappingProxyType(dict(self.temperatures)))

    @property
    def omega(self) -> float:
        return 2 * math.pi * (self.frequency or 0.0)


_KEYS = {"kind", "frequency", "phases_deg", "temperature_degC", "tolerance", "max_iterations"}
_PROFILE_KEYS = {"start", "end", "at_start", "at_end", "along", "inner_radius"}


def _number(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise CaseFileError(f"{where} = {value!r}: must be a finite number without quotes")
    return float(value)


def _point(value: Any, where: str) -> tuple[float, float]:
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise CaseFileError(f"{where} = {value!r}: give a point as two lengths, e.g. [\"0 mm\", \"5 mm\"]")
    return (to_si(value[0], "length", f"{where}[0]"), to_si(value[1], "length", f"{where}[1]"))


def _profile(value: Any, where: str) -> TemperatureProfile:
    if not isinstance(value, Mapping):
        return TemperatureProfile(_number(value, where))
    unknown = sorted(set(value) - _PROFILE_KEYS)
    if unknown:
        raise CaseFileError(f"{where}: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(_PROFILE_KEYS))}")
    missing = [k for k in ("start", "end", "at_start", "at_end") if k not in value]
    if missing:
        raise CaseFileError(f"{where}: a linear temperature profile needs {', '.join(missing)} "
                            "(start and end points, at_start and at_end in degC); or give one number")
    along = value.get("along", "line")
    if along not in ALONG:
        raise CaseFileError(f"{where}.along = {along!r}: use one of {', '.join(map(repr, ALONG))}")
    start, end = _point(value["start"], f"{where}.start"), _point(value["end"], f"{where}.end")
    inner = to_si(value.get("inner_radius", 0.0), "length", f"{where}.inner_radius")
    span = math.hypot(end[0] - start[0], end[1] - start[1])
    if span <= 0 or (along == "radius" and not 0 <= inner < span):
        raise CaseFileError(f"{where}: the profile's end must lie away from its start (and beyond inner_radius)")
    if "inner_radius" in value and along != "radius":
        raise CaseFileError(f"{where}.inner_radius applies to along = \"radius\" only")
    return TemperatureProfile(_number(value["at_start"], f"{where}.at_start"),
                              _number(value["at_end"], f"{where}.at_end"), start, end, along, inner)


def parse_analysis(table: Any, where: str) -> AnalysisSettings:
    """The [analysis] section of a case file (absent: electrostatic)."""
    if table is None:
        return AnalysisSettings()
    if not isinstance(table, Mapping):
        raise CaseFileError(f"{where}: [analysis] must be a table, got {type(table).__name__}")
    unknown = sorted(set(table) - _KEYS)
    if unknown:
        raise CaseFileError(f"{where} [analysis]: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(_KEYS))}")
    kind = table.get("kind", "electrostatic")
    if not isinstance(kind, str):
        raise CaseFileError(f"analysis.kind = {kind!r}: use one of {', '.join(map(repr, KINDS))}")
    frequency = None if "frequency" not in table else to_si(table["frequency"], "frequency", "analysis.frequency")
    phases = table.get("phases_deg", {})
    if not isinstance(phases, Mapping):
        raise CaseFileError(f"analysis.phases_deg must be a table of electrode = degrees, got {phases!r}")
    temperatures = table.get("temperature_degC", {})
    if not isinstance(temperatures, Mapping):
        raise CaseFileError(f"analysis.temperature_degC must be a table of region = degC, got {temperatures!r}")
    return AnalysisSettings(
        kind=kind,
        frequency=frequency,
        phases_deg={str(k): _number(v, f"analysis.phases_deg.{k}") for k, v in phases.items()},
        temperatures={str(k): _profile(v, f"analysis.temperature_degC.{k}") for k, v in temperatures.items()},
        tolerance=table.get("tolerance", DEFAULT_TOLERANCE),
        max_iterations=table.get("max_iterations", DEFAULT_MAX_ITERATIONS),
    )


def check_against_case(settings: AnalysisSettings, regions: Mapping[str, Any], electrodes: Mapping[str, float],
                       floating: Mapping[str, float]) -> None:
    """Names in the analysis settings must be the case's; DC needs every region's conductivity."""
    for name in settings.phases_deg:
        if name not in electrodes:
            extra = " (a floating conductor takes its potential from the solve)" if name in floating else ""
            raise CaseFileError(f"analysis.phases_deg.{name}: no electrode {name!r} with a potential{extra}; "
                                f"electrodes: {', '.join(sorted(electrodes))}")
    for name in settings.temperatures:
        if name not in regions:
            raise CaseFileError(f"analysis.temperature_degC.{name}: no region {name!r}; "
                                f"regions: {', '.join(sorted(regions))}")
    if settings.kind == "dc":
        for region, material in regions.items():
            if material.conductivity is None:
                raise CaseFileError(
                    f"regions.{region}: material {material.name!r} has no conductivity, which the DC analysis needs "
                    f"(the steady field follows the conductivities); give it one, e.g. conductivity = \"1e-15 S/m\" "
                    f"under [materials.{material.name}]")


def electrostatic_case(case: Any) -> Any:
    """The case the electrostatic analysis solves: for AC with phases, the instant t = 0, each electrode at
    V cos(phase) (a three-phase set of equal amplitudes would otherwise be one potential); else ``case``."""
    settings = case.analysis
    if settings.kind != "ac" or not any(settings.phases_deg.values()):
        return case
    from dataclasses import replace

    return replace(case, electrodes={name: value * math.cos(math.radians(settings.phases_deg.get(name, 0.0)))
                                     for name, value in case.electrodes.items()})


def run_analysis(case: Any, problem: Any, electrostatic_E_magnitude: np.ndarray,
                 electrostatic_potential: np.ndarray) -> Any:
    """The DC or AC result for ``case`` on the electrostatic problem's mesh; None for an electrostatic case."""
    kind = case.analysis.kind
    if kind == "dc":
        from .conduction_dc import analyse_dc

        return analyse_dc(case, problem, electrostatic_E_magnitude, electrostatic_potential)
    if kind == "ac":
        from .harmonic_ac import analyse_ac

        return analyse_ac(case, problem, electrostatic_E_magnitude)
    return None
