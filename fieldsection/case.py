"""Case: what to solve. Read from a TOML case file or built in Python.

The case file schema (documented in the README) is fieldsection's own::

    title = "..."
    [geometry]      script, length_unit, [geometry.parameters]
    [regions]       physical surface name -> material name
    [materials.X]   case-defined materials
    [electrodes]    physical curve/surface name -> potential ("12 kV", or { potential = ... }),
                    or a floating conductor { floating = true, charge = "0 C/m" }
    [boundary]      outer = "grounded" | "insulated" | "open"; [boundary.curves] name = "insulated"
    [symmetry]      copies = 2 (the model is half of the full section)
    [hotspots]      fraction = 0.5
    [mesh]          size, near_electrodes, element_order, curved, refinements, [mesh.region_sizes]
    [refinement]    adaptive, capacitance_tolerance, field_tolerance, max_dofs, max_passes
    [solver]        method = "auto" | "direct" | "iterative"
    [analysis]      kind = "electrostatic" | "dc" | "ac", and their settings (analysis.py)

Everything here is validated without touching the geometry; names are checked against the
geometry's physical groups in the mesh stage.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Callable, Mapping

from .analysis import AnalysisSettings, parse_analysis
from .probes import ProbeLine, parse_probes
from .errors import CaseFileError, FieldSectionError
from .materials import Material, lookup_material, material_from_mapping
from .units import to_si

OUTER_BOUNDARY_KINDS = {
    "grounded": "held at 0 V (a grounded enclosure)",
    "insulated": "zero normal D (a symmetry line or an insulated far wall)",
    "open": "unbounded free space beyond a circle, by inversion of the exterior onto a disc",
}
CURVE_KINDS = ("insulated",)
MODELS = {
    "planar": "a cross-section of a long object; results per metre of length",
    "axisymmetric": "a body of revolution about the y axis (x is the radius); results for the whole body",
}
ELEMENT_ORDERS = (1, 2, 3)
MAX_REFINEMENTS = 6  # each uniform refinement multiplies the element count by 4
DEFAULT_HOTSPOT_FRACTION = 0.5
#: a potential above this is taken as a unit mistake (the energy of such a field would overflow doubles
#: long before; no equipment this tool is for comes near it)
LARGEST_POTENTIAL = 1e9
SOLVER_METHODS = {
    "auto": "chosen by the size of the system and the solvers installed",
    "direct": "a sparse factorisation reused for every conductor (PARDISO if installed, else SuperLU)",
    "iterative": "conjugate gradients with an algebraic-multigrid preconditioner (less memory on big models)",
}


@dataclass(frozen=True)
class ScriptGeometry:
    """A gmsh ``.geo`` script; ``parameters`` override its ``DefineConstant`` numbers."""

    path: Path
    parameters: Mapping[str, float] = field(default_factory=dict)
    length_unit_m: float = 1.0  # metres per script length unit
    trusted: bool = False  # allow commands that run programs (System, SystemCall, ...)


@dataclass(frozen=True)
class BuilderGeometry:
    """A geometry built in Python: ``build(geom)`` receives a ``pygmsh.geo.Geometry``.

    It must add named physical groups (``geom.add_physical(entities, label=...)``).
    """

    build: Callable[[Any], None]
    length_unit_m: float = 1.0


@dataclass(frozen=True)
class MeshSettings:
    """Mesh sizes in metres; ``None`` leaves the choice to the script and gmsh."""

    size: float | None = None
    near_electrodes: float | None = None
    region_sizes: Mapping[str, float] = field(default_factory=dict)
    element_order: int = 2
    curved: bool = True  # second-order geometry: mid-edge nodes placed on arcs
    #: mesh at 2**k times the sizes, then split every triangle into four, k times; None (the default):
    #: chosen by the meshing stage, 0 unless the mesh would be big (see ``gmsh_adapter.AUTO_SPLIT_ABOVE``)
    refinements: int | None = None
    #: largest mesh (vertices) to attempt; None: derived from the machine's memory (``mesh_budget``)
    max_nodes: int | None = None

    def __post_init__(self) -> None:
        n = self.max_nodes
        if n is not None and (isinstance(n, bool) or not isinstance(n, int) or n < 100):
            raise CaseFileError(f"max_nodes = {n!r}: a whole number of mesh nodes, at least 100")
        k = self.refinements
        if k is not None and (isinstance(k, bool) or not isinstance(k, int) or not 0 <= k <= MAX_REFINEMENTS):
            raise CaseFileError(
                f"mesh.refinements = {k!r}: \"auto\" or a whole number from 0 to {MAX_REFINEMENTS}, how many times "
                "every triangle of a coarser mesh is split into four (each split halves the element size)"
            )
        if self.element_order not in ELEMENT_ORDERS:
            raise CaseFileError(
                f"mesh.element_order = {self.element_order!r}: use one of {ELEMENT_ORDERS} (2 is the default)"
            )
        for label, value in [("mesh.size", self.size), ("mesh.near_electrodes", self.near_electrodes)] + [
            (f"mesh.region_sizes.{k}", v) for k, v in self.region_sizes.items()
        ]:
            if value is not None and not (math.isfinite(value) and value > 0):
                raise CaseFileError(f"{label} = {value!r}: a mesh size must be a positive length such as '0.5 mm'")


@dataclass(frozen=True)
class Refinement:
    """Adaptive refinement: refine where the error indicator is large until the results settle.

    The loop stops when, between two passes, every capacitance entry changes by less than
    ``capacitance_tolerance`` (relative to the diagonal) and every non-singular peak field by less
    than ``field_tolerance``, or when the next mesh would exceed ``max_dofs`` or ``max_passes``.
    ``adaptive = False`` solves once on the first mesh.
    """

    adaptive: bool = True
    capacitance_tolerance: float = 1e-4
    field_tolerance: float = 5e-3
    max_dofs: int = 200_000
    max_passes: int = 8

    def __post_init__(self) -> None:
        if not isinstance(self.adaptive, bool):
            raise CaseFileError(f"refinement.adaptive = {self.adaptive!r}: must be true or false, without quotes")
        for label, value in [("refinement.capacitance_tolerance", self.capacitance_tolerance),
                             ("refinement.field_tolerance", self.field_tolerance)]:
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not (0 < value < 1):
                raise CaseFileError(f"{label} = {value!r}: a relative change between passes, in (0, 1), e.g. 1e-3")
        for label, value, least in [("refinement.max_dofs", self.max_dofs, 100),
                                    ("refinement.max_passes", self.max_passes, 1)]:
            if isinstance(value, bool) or not isinstance(value, int) or value < least:
                raise CaseFileError(f"{label} = {value!r}: a whole number of at least {least}")


SINGLE_MESH = Refinement(adaptive=False)


@dataclass(frozen=True)
class Case:
    """Everything needed to mesh, solve and report one cross-section. SI units throughout."""

    name: str
    geometry: ScriptGeometry | BuilderGeometry
    regions: Mapping[str, Material]
    electrodes: Mapping[str, float]
    outer_boundary: str = "grounded"
    hotspot_fraction: float = DEFAULT_HOTSPOT_FRACTION
    mesh: MeshSettings = field(default_factory=MeshSettings)
    title: str = ""
    source_file: Path | None = None
    floating: Mapping[str, float] = field(default_factory=dict)  # name -> net charge, C/m
    insulated_curves: frozenset[str] = frozenset()  # symmetry lines and insulated walls among the curves
    symmetry_copies: int = 1  # the model is 1/copies of the full section
    model: str = "planar"  # or "axisymmetric": x is the radius r >= 0, y the axis z
    gas_pressure: float = 101_325.0  # Pa, for the partial-discharge screening of gas regions
    refinement: Refinement = field(default_factory=Refinement)
    solver: str = "auto"  # linear solver: a key of SOLVER_METHODS
    analysis: AnalysisSettings = field(default_factory=AnalysisSettings)  # [analysis]: electrostatic, dc or ac
    probes: tuple[ProbeLine, ...] = ()  # [probes]: lines along which the report samples V, |E| and the share

    def __post_init__(self) -> None:
        if not self.regions:
            raise CaseFileError(f"case {self.name!r}: no [regions]; map every physical surface to a material")
        # in an axisymmetric open model the point at infinity (0 V) is the fixed conductor
        infinity_fixed = self.model == "axisymmetric" and self.outer_boundary == "open" and bool(self.floating)
        if not self.electrodes and not infinity_fixed:
            detail = " (only floating ones: one conductor needs a fixed potential)" if self.floating else ""
            raise CaseFileError(
                f"case {self.name!r}: no electrode with a potential{detail}; give at least one physical curve "
                "or surface a potential under [electrodes]"
            )
        for label, names in [("an electrode", set(self.electrodes) | set(self.floating)),
                             ("an insulated curve", set(self.insulated_curves))]:
            both = sorted(set(self.regions) & names)
            if both:
                raise CaseFileError(
                    f"{both[0]!r} is both a dielectric region and {label}; a conductor region is an "
                    "electrode only: remove it from [regions]"
                )
        clash = sorted((set(self.electrodes) | set(self.floating)) & set(self.insulated_curves))
        if clash:
            raise CaseFileError(f"{clash[0]!r} is both an electrode and an insulated curve; keep one")
        both = sorted(set(self.electrodes) & set(self.floating))
        if both:
            raise CaseFileError(f"electrodes.{both[0]}: both a potential and floating; give one of the two")
        for name, potential in self.electrodes.items():
            if isinstance(potential, bool) or not isinstance(potential, (int, float)) or not math.isfinite(potential):
                raise CaseFileError(f"electrodes.{name}: potential {potential!r} is not a finite number of volts")
            if abs(potential) > LARGEST_POTENTIAL:
                raise CaseFileError(f"electrodes.{name}: potential {potential:.3g} V is beyond "
                                    f"{LARGEST_POTENTIAL:.0e} V; check the unit (e.g. '12 kV')")
        for name, charge in self.floating.items():
            if not math.isfinite(charge):
                raise CaseFileError(f"electrodes.{name}: charge {charge!r} is not finite")
        if not (math.isfinite(self.gas_pressure) and self.gas_pressure > 0):
            raise CaseFileError(f"hotspots.gas_pressure = {self.gas_pressure!r} Pa: must be a positive pressure, "
                                "e.g. '1 atm' or '0.5 MPa'")
        if self.solver not in SOLVER_METHODS:
            raise CaseFileError(f"solver.method = {self.solver!r}: use one of {', '.join(map(repr, SOLVER_METHODS))}")
        if self.model not in MODELS:
            raise CaseFileError(f"geometry.model = {self.model!r}: use one of {', '.join(map(repr, MODELS))}")
        copies = self.symmetry_copies
        if isinstance(copies, bool) or not isinstance(copies, int) or copies < 1:
            raise CaseFileError(
                f"symmetry.copies = {copies!r}: a whole number >= 1, how many copies of the model make the "
                "full section (2 for a half model, 4 for a quarter)"
            )
        if self.outer_boundary not in OUTER_BOUNDARY_KINDS:
            raise CaseFileError(
                f"boundary.outer = {self.outer_boundary!r}: use one of {', '.join(map(repr, OUTER_BOUNDARY_KINDS))}"
            )
        f = self.hotspot_fraction
        if isinstance(f, bool) or not isinstance(f, (int, float)) or not (0 < f <= 1):
            raise CaseFileError(
                f"hotspots.fraction = {f!r}: must be in (0, 1], the share of a material's dielectric "
                "strength above which an element is flagged (e.g. 0.5)"
            )
        object.__setattr__(self, "regions", MappingProxyType(dict(self.regions)))
        object.__setattr__(self, "electrodes", MappingProxyType(dict(self.electrodes)))
        object.__setattr__(self, "floating", MappingProxyType(dict(self.floating)))
        object.__setattr__(self, "insulated_curves", frozenset(self.insulated_curves))

    @property
    def conductor_names(self) -> frozenset[str]:
        """Every electrode, with a fixed potential or floating."""
        return frozenset(self.electrodes) | frozenset(self.floating)


_TOP_KEYS = {"title", "geometry", "regions", "materials", "electrodes", "boundary", "hotspots", "mesh", "symmetry",
             "refinement", "solver", "analysis", "probes"}


def _table(data: Mapping[str, Any], key: str, where: str) -> Mapping[str, Any]:
    value = data.get(key, {})
    if not isinstance(value, Mapping):
        raise CaseFileError(f"{where}: [{key}] must be a table, got {type(value).__name__}")
    return value


def _check_keys(table: Mapping[str, Any], allowed: set[str], where: str) -> None:
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise CaseFileError(f"{where}: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(allowed))}")


def _script_parameter(name: str, value: Any, length_unit_m: float) -> float:
    """A script parameter: a plain number, or a length converted into the script's unit."""
    if isinstance(value, bool):
        raise CaseFileError(f"geometry.parameters.{name}: a boolean cannot be a gmsh number")
    where = f"geometry.parameters.{name}"
    if isinstance(value, str):
        try:
            value = float(value)  # a quoted plain number is a plain number, not metres
        except ValueError:
            return to_si(value, "length", where) / length_unit_m
    if not isinstance(value, (int, float)) or not math.isfinite(value):
        raise CaseFileError(f"{where}: {value!r} is not a finite number or a length such as '2 mm'")
    return float(value)


def _text(value: Any, where: str, choices: Mapping[str, str] | None = None) -> str:
    """A string value; with ``choices``, one of their keys."""
    listed = "" if choices is None else f": use one of {', '.join(map(repr, choices))}"
    if not isinstance(value, str):
        raise CaseFileError(f"{where} = {value!r}: must be text in quotes{listed}")
    if choices is not None and value not in choices:
        raise CaseFileError(f"{where} = {value!r}{listed}")
    return value


def _starts_with_number(text: str) -> bool:
    return bool(re.match(r"\s*[+-]?[\d.]", text))


def _whole(value: Any, where: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise CaseFileError(f"{where} = {value!r}: must be a whole number without quotes, e.g. 2")
    return value


def _refinements(value: Any) -> int | None:
    if value == "auto":
        return None
    if isinstance(value, str):
        raise CaseFileError(f"mesh.refinements = {value!r}: must be \"auto\" or a whole number without quotes, e.g. 2")
    return _whole(value, "mesh.refinements")


def _flag(value: Any, where: str) -> bool:
    if not isinstance(value, bool):
        raise CaseFileError(f"{where} = {value!r}: must be true or false, without quotes")
    return value


def _electrode(name: str, value: Any) -> tuple[str, float]:
    """("potential", V) or ("floating", net charge in C/m) from an [electrodes] entry."""
    where = f"electrodes.{name}"
    if isinstance(value, Mapping):
        _check_keys(value, {"potential", "floating", "charge"}, where)
        floating = value.get("floating", False)
        if not isinstance(floating, bool):
            raise CaseFileError(f"{where}: floating must be true or false, got {floating!r}")
        if floating:
            if "potential" in value:
                raise CaseFileError(f"{where}: a floating conductor takes its potential from the solve; "
                                    "remove 'potential' or 'floating'")
            return "floating", value.get("charge", 0.0)  # converted once the model (C/m or C) is known
        if "charge" in value:
            raise CaseFileError(f"{where}: a charge is given only to a floating conductor; add floating = true")
        if "potential" not in value:
            raise CaseFileError(f"{where}: give its potential, e.g. {name} = {{ potential = '1 kV' }}, "
                                "or make it floating = true")
        value = value["potential"]
    return "potential", to_si(value, "voltage", where)


def load_case(path: str | Path, *, trust_script: bool = False) -> Case:
    """Read and validate a TOML case file.

    The geometry script is looked up beside the case file, then in a ``geometries/`` folder
    beside it or one level up.
    """
    path = Path(path)
    if not path.is_file():
        raise CaseFileError(f"case file {str(path)!r} not found; give the path of a .toml case file")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise CaseFileError(f"case file {path.name}: not UTF-8 text; save it as UTF-8 TOML") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        found = re.search(r"at line (\d+)", str(exc))
        culprit = ""
        if found and 0 < int(found.group(1)) <= len(text.splitlines()):
            culprit = f" [{text.splitlines()[int(found.group(1)) - 1].strip()}]"
        raise CaseFileError(
            f"case file {path.name}: {exc}{culprit}; each key may appear once (an electrode gets exactly one "
            "potential) and strings need quotes"
        ) from None
    return case_from_mapping(data, name=path.stem, base_dir=path.parent, where=path.name,
                             source_file=path.resolve(), trust_script=trust_script)


def case_from_mapping(
    data: Mapping[str, Any],
    *,
    name: str,
    base_dir: str | Path,
    where: str | None = None,
    source_file: Path | None = None,
    trust_script: bool = False,
) -> Case:
    """Validate a case given as the mapping a TOML case file parses into.

    ``base_dir`` is where the geometry script is looked up (as for a case file in that folder);
    ``where`` names the source in error messages (default: ``name``). Design studies build their
    variants this way, from a base case's mapping with some values replaced.
    """
    case_name, where = name, where or name
    base_dir = Path(base_dir)
    if not isinstance(data, Mapping):
        raise CaseFileError(f"{where}: a case must be a table of sections, got {type(data).__name__}")
    _check_keys(data, _TOP_KEYS, where)

    geometry_table = _table(data, "geometry", where)
    _check_keys(geometry_table, {"script", "length_unit", "parameters", "model"}, f"{where} [geometry]")
    if "script" not in geometry_table:
        raise CaseFileError(f"{where}: [geometry] needs script = \"name.geo\"")
    unit_name = _text(geometry_table.get("length_unit", "m"), "geometry.length_unit")
    try:
        length_unit_m = to_si(unit_name if _starts_with_number(unit_name) else f"1 {unit_name}", "length",
                              "geometry.length_unit")
    except FieldSectionError:
        length_unit_m = 0.0
    if not length_unit_m > 0:
        raise CaseFileError(f"geometry.length_unit = {unit_name!r}: give the unit of the script's coordinates, "
                            "e.g. 'mm' or 'm'")
    script = _find_script(_text(geometry_table["script"], "geometry.script"), base_dir)
    if script.suffix.lower() != ".geo":
        raise CaseFileError(f"geometry.script = {script.name!r}: give a gmsh geometry script (.geo)")
    parameters = {
        str(k): _script_parameter(str(k), v, length_unit_m)
        for k, v in _table(geometry_table, "parameters", f"{where} [geometry]").items()
    }

    case_materials: dict[str, Material] = {}
    for name, entry in _table(data, "materials", where).items():
        if not isinstance(entry, Mapping):
            raise CaseFileError(f"{where}: [materials.{name}] must be a table with relative_permittivity etc.")
        case_materials[name] = material_from_mapping(name, entry, f"materials.{name}")

    regions: dict[str, Material] = {}
    for region, material_name in _table(data, "regions", where).items():
        if not isinstance(material_name, str):
            raise CaseFileError(f"regions.{region}: give a material name, got {material_name!r}")
        try:
            regions[region] = lookup_material(material_name, case_materials)
        except FieldSectionError as exc:
            raise CaseFileError(f"regions.{region}: {exc}") from None

    electrodes: dict[str, float] = {}
    floating: dict[str, float] = {}
    model = _text(geometry_table.get("model", "planar"), "geometry.model", MODELS)
    charge_kind = "charge" if model == "planar" else "total charge"
    for key, value in _table(data, "electrodes", where).items():
        kind, number = _electrode(str(key), value)
        if kind == "floating":
            floating[str(key)] = to_si(number, charge_kind, f"electrodes.{key}.charge")
        else:
            electrodes[str(key)] = number

    boundary = _table(data, "boundary", where)
    _check_keys(boundary, {"outer", "curves"}, f"{where} [boundary]")
    insulated = set()
    for curve, kind in _table(boundary, "curves", f"{where} [boundary]").items():
        if not isinstance(kind, str) or kind not in CURVE_KINDS:
            raise CaseFileError(
                f"boundary.curves.{curve} = {kind!r}: use {' or '.join(map(repr, CURVE_KINDS))} (zero normal D); "
                "a curve at a fixed potential is an electrode"
            )
        insulated.add(str(curve))
    symmetry = _table(data, "symmetry", where)
    _check_keys(symmetry, {"copies"}, f"{where} [symmetry]")
    hotspots = _table(data, "hotspots", where)
    _check_keys(hotspots, {"fraction", "gas_pressure"}, f"{where} [hotspots]")
    mesh_table = _table(data, "mesh", where)
    _check_keys(
        mesh_table, {"size", "near_electrodes", "region_sizes", "element_order", "curved", "refinements"},
        f"{where} [mesh]"
    )

    def optional_length(key: str) -> float | None:
        return None if key not in mesh_table else to_si(mesh_table[key], "length", f"mesh.{key}")

    mesh = MeshSettings(
        size=optional_length("size"),
        near_electrodes=optional_length("near_electrodes"),
        region_sizes={
            str(k): to_si(v, "length", f"mesh.region_sizes.{k}")
            for k, v in _table(mesh_table, "region_sizes", f"{where} [mesh]").items()
        },
        element_order=_whole(mesh_table.get("element_order", 2), "mesh.element_order"),
        curved=_flag(mesh_table.get("curved", True), "mesh.curved"),
        refinements=_refinements(mesh_table.get("refinements", "auto")),
    )
    refinement_table = _table(data, "refinement", where)
    _check_keys(refinement_table, {"adaptive", "capacitance_tolerance", "field_tolerance", "max_dofs", "max_passes"},
                f"{where} [refinement]")
    defaults = Refinement()
    refinement = Refinement(
        adaptive=_flag(refinement_table.get("adaptive", defaults.adaptive), "refinement.adaptive"),
        capacitance_tolerance=refinement_table.get("capacitance_tolerance", defaults.capacitance_tolerance),
        field_tolerance=refinement_table.get("field_tolerance", defaults.field_tolerance),
        max_dofs=_whole(refinement_table.get("max_dofs", defaults.max_dofs), "refinement.max_dofs"),
        max_passes=_whole(refinement_table.get("max_passes", defaults.max_passes), "refinement.max_passes"),
    )
    solver_table = _table(data, "solver", where)
    _check_keys(solver_table, {"method"}, f"{where} [solver]")
    title = _text(data.get("title", ""), "title")
    return Case(
        name=case_name,
        title=str(title),
        geometry=ScriptGeometry(script, parameters, length_unit_m, trusted=trust_script),
        regions=regions,
        electrodes=electrodes,
        outer_boundary=_text(boundary.get("outer", "grounded"), "boundary.outer", OUTER_BOUNDARY_KINDS),
        hotspot_fraction=hotspots.get("fraction", DEFAULT_HOTSPOT_FRACTION),
        mesh=mesh,
        source_file=source_file,
        floating=floating,
        insulated_curves=frozenset(insulated),
        symmetry_copies=_whole(symmetry.get("copies", 1), "symmetry.copies"),
        model=model,
        gas_pressure=to_si(hotspots.get("gas_pressure", 101_325.0), "pressure", "hotspots.gas_pressure"),
        refinement=refinement,
        solver=_text(solver_table.get("method", "auto"), "solver.method", SOLVER_METHODS),
        analysis=parse_analysis(data.get("analysis"), where),
        probes=parse_probes(data.get("probes"), where),
    )


def _find_script(name: str, case_dir: Path) -> Path:
    candidates = [case_dir / name, case_dir / "geometries" / name, case_dir.parent / "geometries" / name]
    for candidate in candidates:
        if candidate.is_file():
            return candidate.resolve()
    tried = ", ".join(str(c) for c in candidates)
    raise CaseFileError(
        f"geometry script {name!r} not found (looked in: {tried}); put it beside the case file or in geometries/"
    )
