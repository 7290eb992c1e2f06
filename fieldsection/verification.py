"""The verification suite: shipped reference cases, run on this machine and this version.

The cases live in ``data/verification.toml`` (their geometries in ``data/geometries/``): each model is
solved (one mesh, or adaptively where the entry says), and each of its checks compares a computed quantity
with a published closed form or value, within a tolerance for the fast default or for ``full`` mode (finer
meshes, tighter tolerances). ``run_suite`` returns a :class:`SuiteResult`; ``write_suite_report`` writes
``verification.json`` and ``verification.md`` atomically. The test suite runs the same list
(``tests/test_verification.py``), so there is one list of references.
"""

from __future__ import annotations

import json
import math
import os
import platform
import sys
import time
import tomllib
from dataclasses import dataclass, field
from importlib import metadata, resources
from pathlib import Path
from typing import Any, Callable

import numpy as np
from scipy.constants import epsilon_0
from scipy.special import ellipk, ellipkm1

from . import __version__
from .errors import CaseFileError, ReportError

GEOMETRY_FOLDER = "geometries"
#: a formula's value must match its worked value this closely (the worked value guards the formula)
WORKED_VALUE_AGREEMENT = 1e-5
#: packages whose versions the report names
PACKAGES = ("numpy", "scipy", "scikit-fem", "gmsh", "matplotlib", "pyamg", "pypardiso", "meshio", "jinja2")


# ------------------------------------------------------------------------------ reference functions
def cohn_stripline(width: float, spacing: float, relative_permittivity: float) -> float:
    """Capacitance per metre of a zero-thickness strip centred between two plates: C = 4 eps K(k') / K(k),
    k = 1 / cosh(pi w / 2 b) (Cohn 1954)."""
    k = 1 / math.cosh(math.pi * width / (2 * spacing))
    return float(4 * epsilon_0 * relative_permittivity * ellipkm1(k * k) / ellipk(k * k))


def hammerstad_jensen(u: float, er: float) -> float:
    """Quasi-static capacitance per metre of a zero-thickness microstrip of width/height u (Hammerstad and
    Jensen 1980): C = eps_eff / (c0 Z01)."""
    from scipy.constants import c as c0, mu_0

    eta0 = math.sqrt(mu_0 / epsilon_0)
    f = 6 + (2 * math.pi - 6) * math.exp(-(30.666 / u) ** 0.7528)
    z01 = eta0 / (2 * math.pi) * math.log(f / u + math.sqrt(1 + (2 / u) ** 2))
    a = 1 + math.log((u**4 + (u / 52) ** 2) / (u**4 + 0.432)) / 49 + math.log(1 + (u / 18.1) ** 3) / 18.7
    b = 0.564 * ((er - 0.9) / (er + 3)) ** 0.053
    eps_eff = (er + 1) / 2 + (er - 1) / 2 * (1 + 10 / u) ** (-a * b)
    return eps_eff / (c0 * z01)


_NAMESPACE = {"pi": math.pi, "e": math.e, "sqrt": math.sqrt, "log": math.log, "acosh": math.acosh,
              "cosh": math.cosh, "tanh": math.tanh, "eps0": epsilon_0, "cohn_stripline": cohn_stripline,
              "hammerstad_jensen": hammerstad_jensen}


def reference_value(reference: float | str) -> float:
    """A number, or a formula of the names in ``_NAMESPACE`` (shipped data only: no builtins)."""
    if isinstance(reference, (int, float)):
        return float(reference)
    try:
        return float(eval(reference, {"__builtins__": {}}, dict(_NAMESPACE)))  # noqa: S307 (our own data file)
    except Exception as exc:
        raise CaseFileError(f"verification reference {reference!r} cannot be evaluated ({type(exc).__name__}: {exc}); "
                            f"it may use numbers and {', '.join(_NAMESPACE)}") from None


# ------------------------------------------------------------------------------------------- quantities
def _capacitance(result, check) -> float:
    return result.capacitance.two_level.from_energy


def _peak_field(result, check) -> float:
    return next(p.peak_E for p in result.hotspots.region_peaks if p.region == check["region"])


def _mean_field(result, check) -> float:
    elements = result.section.elements_of(check["region"])
    mean = result.fields.element_mean_E[elements]
    areas = result.section.element_areas[elements]
    return float((np.hypot(*mean.T) * areas).sum() / areas.sum())


def _peak_bound_charge(result, check) -> float:
    pair = {check["region"], check["other"]}
    face = next(i for i in result.charges.interfaces if {i.region_a, i.region_b} == pair)
    return face.peak_abs_sigma_b


def _superposition(result, check) -> float:
    from .superposition import check_superposition

    return check_superposition(result.solution).largest_relative_difference


def _certificate(result, check):
    return result.certificates.regions[check["region"]]


def _air_paschen() -> tuple[float, float, float]:
    from .materials import lookup_material

    return lookup_material("air").paschen


def _paschen_minimum(result, check) -> float:
    from .discharge import paschen_voltage

    a, b, gamma = constants = _air_paschen()
    return paschen_voltage(math.e * math.log1p(1 / gamma) / a, constants)


def _dakin_1cm(result, check) -> float:
    from .discharge import ATMOSPHERE, dakin_air_voltage

    return dakin_air_voltage(ATMOSPHERE * 1e-2)


def _peek(radius: float) -> Callable:
    def quantity(result, check) -> float:
        from .discharge import peek_onset_field

        return peek_onset_field(radius)
    return quantity


#: quantity name -> (function of (SectionResult or None, check entry), unit)
QUANTITIES: dict[str, tuple[Callable[[Any, dict], float], str]] = {
    "capacitance": (_capacitance, "F/m"),
    "capacitance_to_infinity": (_capacitance, "F"),
    "peak_field": (_peak_field, "V/m"),
    "mean_field": (_mean_field, "V/m"),
    "peak_bound_charge": (_peak_bound_charge, "C/m^2"),
    "superposition_difference": (_superposition, "1"),
    "corner_theory_exponent": (lambda r, c: _certificate(r, c).theory_exponent, "1"),
    "corner_measured_exponent": (lambda r, c: _certificate(r, c).measured_exponent, "1"),
    "paschen_minimum_voltage": (_paschen_minimum, "V"),
    "dakin_breakdown_voltage_1cm": (_dakin_1cm, "V"),
    "peek_onset_field_1cm": (_peek(1e-2), "V/m"),
    "peek_onset_field_1mm": (_peek(1e-3), "V/m"),
}


# ------------------------------------------------------------------------------------------------ data
@dataclass(frozen=True)
class ReferenceCase:
    """One model (or formula group) of the suite and its checks, as in the data file."""

    name: str
    title: str
    entry: dict
    checks: tuple[dict, ...]

    @property
    def has_model(self) -> bool:
        return "geometry" in self.entry

    def runs_in(self, full: bool) -> bool:
        return ("full" if full else "fast") in self.entry.get("modes", ["fast", "full"])


def load_cases(path: str | os.PathLike | None = None) -> tuple[ReferenceCase, ...]:
    """The shipped reference cases (or those of ``path``), checked for complete entries."""
    if path is None:
        text = resources.files("fieldsection").joinpath("data/verification.toml").read_text(encoding="utf-8")
    else:
        text = Path(path).read_text(encoding="utf-8")
    data = tomllib.loads(text)
    cases = []
    for name, entry in data.items():
        checks = tuple(entry.get("check", ()))
        for check in checks:
            missing = {"quantity", "reference", "source", "tolerance", "full_tolerance"} - set(check)
            if missing or check["quantity"] not in QUANTITIES:
                raise CaseFileError(f"verification case {name!r}: a check lacks {sorted(missing)} or names an unknown "
                                    f"quantity; quantities: {', '.join(QUANTITIES)}")
        cases.append(ReferenceCase(name, entry.get("title", name), {k: v for k, v in entry.items() if k != "check"},
                                   checks))
    return tuple(cases)


def _geometry_path(name: str) -> Path:
    return Path(str(resources.files("fieldsection").joinpath("data", GEOMETRY_FOLDER, name)))


def build_case(reference: ReferenceCase, full: bool):
    """The :class:`~fieldsection.case.Case` of a reference model."""
    from .case import SINGLE_MESH, Case, MeshSettings, Refinement, ScriptGeometry
    from .materials import Material

    entry = reference.entry
    parameters = dict(entry.get("parameters", {}))
    if full:
        parameters.update(entry.get("full_parameters", {}))
    regions = {region: Material(f"eps_r {er:g}", float(er), None) for region, er in entry["regions"].items()}
    refinement = SINGLE_MESH
    if entry.get("adaptive", False):
        refinement = Refinement(max_dofs=int(entry.get("max_dofs", 40_000)), max_passes=10)
    return Case(
        name=f"verify-{reference.name}",
        geometry=ScriptGeometry(_geometry_path(entry["geometry"]), parameters, 1e-3),
        regions=regions,
        electrodes={k: float(v) for k, v in entry["electrodes"].items()},
        outer_boundary=entry.get("outer", "grounded"),
        model=entry.get("model", "planar"),
        mesh=MeshSettings(element_order=int(entry.get("order", 2))),
        refinement=refinement,
    )


# ------------------------------------------------------------------------------------------------- run
@dataclass(frozen=True)
class CheckResult:
    case: str
    title: str
    quantity: str
    unit: str
    computed: float | None
    reference: float
    source: str
    error_kind: str  # "relative" or "absolute"
    error: float | None
    tolerance: float
    passed: bool
    dofs: int | None
    seconds: float  # of the model's solve (shared by its checks)
    solver: str
    note: str = ""


@dataclass(frozen=True)
class SuiteResult:
    full: bool
    checks: tuple[CheckResult, ...]
    environment: dict = field(default_factory=dict)
    seconds: float = 0.0

    @property
    def passed(self) -> bool:
        return all(c.passed for c in self.checks)


def environment(solvers: set[str]) -> dict:
    versions = {}
    for package in PACKAGES:
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = None
    return {"fieldsection": __version__, "python": sys.version.split()[0], "platform": platform.platform(),
            "machine": platform.machine(), "cpus": os.cpu_count(), "packages": versions,
            "linear_solvers_used": sorted(solvers)}


def run_case(reference: ReferenceCase, full: bool) -> list[CheckResult]:
    """Solve a reference model (if it has one) and evaluate its checks."""
    from .pipeline import analyse

    result, dofs, solver, note = None, None, "", ""
    start = time.perf_counter()
    if reference.has_model:
        try:
            result = analyse(build_case(reference, full))
            dofs, solver = int(result.problem.ndofs), result.solution.solver
        except Exception as exc:  # a reference model that fails to solve is a failed verification
            note = f"the model failed: {type(exc).__name__}: {exc}"
    seconds = time.perf_counter() - start
    out = []
    for check in reference.checks:
        function, unit = QUANTITIES[check["quantity"]]
        value = reference_value(check["reference"])
        if "worked_value" in check and abs(value - check["worked_value"]) > WORKED_VALUE_AGREEMENT * abs(value):
            raise CaseFileError(f"verification case {reference.name!r}: the formula {check['reference']!r} gives "
                                f"{value:.8g}, not its worked value {check['worked_value']:.8g}; fix the data file")
        computed, row_note = None, note
        if not note:
            try:
                computed = function(result, check)
            except Exception as exc:
                row_note = f"the quantity could not be computed: {type(exc).__name__}: {exc}"
        kind = check.get("error", "relative")
        tolerance = float(check["full_tolerance" if full else "tolerance"])
        error = None
        if computed is not None and math.isfinite(computed):
            error = abs(computed - value) if kind == "absolute" else abs(computed / value - 1)
        passed = error is not None and error <= tolerance
        out.append(CheckResult(reference.name, reference.title, check["quantity"], unit,
                               None if computed is None else float(computed), value, check["source"], kind, error,
                               tolerance, passed, dofs, seconds, solver, row_note))
    return out


def run_suite(full: bool = False, names: list[str] | None = None,
              on_case: Callable[[str], None] | None = None, cases: tuple[ReferenceCase, ...] | None = None
              ) -> SuiteResult:
    """Run every reference case (or those named) in fast or full mode."""
    cases = load_cases() if cases is None else cases
    known = {c.name for c in cases}
    for name in names or ():
        if name not in known:
            raise CaseFileError(f"verify --case {name!r}: no such reference case; cases: {', '.join(sorted(known))}")
    start = time.perf_counter()
    rows: list[CheckResult] = []
    for reference in cases:  # a dozen models, not a loop over the mesh
        if names and reference.name not in names:
            continue
        if not names and not reference.runs_in(full):
            continue
        if on_case:
            on_case(reference.name)
        rows += run_case(reference, full)
    solvers = {r.solver for r in rows if r.solver}
    return SuiteResult(full, tuple(rows), environment(solvers), time.perf_counter() - start)


# ---------------------------------------------------------------------------------------------- report
def _cell(text: str) -> str:
    """Text for a Markdown table cell (a literal | would end the cell)."""
    return text.replace("|", "\\|")


def _markdown(suite: SuiteResult) -> str:
    env = suite.environment
    lines = [
        f"# fieldsection verification ({'full' if suite.full else 'fast'} mode): "
        f"{'ALL PASSED' if suite.passed else 'FAILED'}",
        "",
        f"{sum(c.passed for c in suite.checks)} of {len(suite.checks)} checks passed in {suite.seconds:.1f} s.",
        "",
        "| case | quantity | computed | reference | error | tolerance | result | DOFs | seconds | source |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    for c in suite.checks:
        computed = "–" if c.computed is None else f"{c.computed:.8g} {c.unit}"
        error = "–" if c.error is None else f"{c.error:.2e} ({c.error_kind})"
        verdict = "pass" if c.passed else "**FAIL**" + (f": {_cell(c.note)}" if c.note else "")
        lines.append(f"| {c.case} | {c.quantity} | {computed} | {c.reference:.8g} {c.unit} | {error} | "
                     f"{c.tolerance:.1e} | {verdict} | {c.dofs if c.dofs is not None else '–'} | {c.seconds:.2f} | "
                     f"{_cell(c.source)} |")
    lines += ["", "## Environment", ""]
    lines += [f"- fieldsection {env['fieldsection']}, Python {env['python']}, {env['platform']}, {env['cpus']} CPUs",
              f"- linear solvers used: {', '.join(env['linear_solvers_used']) or 'none'}",
              "- packages: " + ", ".join(f"{k} {v}" for k, v in env["packages"].items() if v is not None)]
    lines += ["", "Passing these checks shows the solver reproduces published closed forms on this machine; it is "
              "not a certification of any design. Follow the applicable codes and standards and licensed practice; "
              "margins and partial-discharge tests remain the designer's duty.", ""]
    return "\n".join(lines)


def suite_json(suite: SuiteResult) -> dict:
    return {
        "mode": "full" if suite.full else "fast",
        "all_passed": suite.passed,
        "seconds": suite.seconds,
        "environment": suite.environment,
        "checks": [{
            "case": c.case, "title": c.title, "quantity": c.quantity, "unit": c.unit, "computed": c.computed,
            "reference": c.reference, "source": c.source, "error_kind": c.error_kind, "error": c.error,
            "tolerance": c.tolerance, "passed": c.passed, "degrees_of_freedom": c.dofs, "seconds": c.seconds,
            "linear_solver": c.solver, "note": c.note,
        } for c in suite.checks],
    }


def write_suite_report(suite: SuiteResult, reports_dir: str | os.PathLike) -> Path:
    """Write ``reports_dir/verification/`` (verification.json and verification.md) atomically."""
    reports_dir = Path(reports_dir)
    try:
        reports_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"cannot create the reports folder {str(reports_dir)!r}: {exc.strerror}") from None
    from .report import built_whole

    with built_whole(reports_dir, "verification", "the verification report") as staging:
        (staging / "verification.json").write_text(json.dumps(suite_json(suite), indent=2), encoding="utf-8")
        (staging / "verification.md").write_text(_markdown(suite), encoding="utf-8")
    return reports_dir / "verification"
