"""Dielectric materials: the shipped table and case-defined materials."""

from __future__ import annotations

import difflib
import json
import math
import re
import tomllib
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Any, Mapping

from .errors import MaterialError
from .units import to_si

MATERIAL_KINDS = ("gas", "liquid", "solid")


@dataclass(frozen=True)
class Material:
    """A linear, isotropic dielectric.

    ``dielectric_strength`` is in V/m (SI); ``None`` means unknown, and the material is then
    left out of the hotspot screening (the report says so).
    """

    name: str
    relative_permittivity: float
    dielectric_strength: float | None
    kind: str = "solid"
    loss_tangent: float | None = None
    source: str = ""
    paschen: tuple[float, float, float] | None = None  # A (1/(Pa m)), B (V/(Pa m)), secondary emission
    #: S/m at ``conductivity_reference_temperature`` and zero field; None: unknown (needed by the DC analysis)
    conductivity: float | None = None
    #: sigma(T, E) = conductivity * exp(alpha (T - T_ref) + beta |E|), alpha in 1/K, beta in m/V (conduction_dc.py)
    conductivity_alpha: float = 0.0
    conductivity_beta: float = 0.0
    conductivity_reference_temperature: float = 20.0  # degC
    dc_strength: float | None = None  # V/m, the strength under steady DC stress; None: unknown
    conductivity_source: str = ""  # where the conduction values come from

    def __post_init__(self) -> None:
        er = self.relative_permittivity
        if not (isinstance(er, (int, float)) and math.isfinite(er) and er > 0):
            raise MaterialError(
                f"material {self.name!r}: relative permittivity {er!r} must be a positive number "
                "(vacuum is 1; a non-positive value has no physical meaning in electrostatics)"
            )
        if er < 1:
            raise MaterialError(
                f"material {self.name!r}: relative permittivity {er} is below 1, which no passive "
                "dielectric has in electrostatics; check the value"
            )
        strength = self.dielectric_strength
        if strength is not None and not (math.isfinite(strength) and strength > 0):
            raise MaterialError(
                f"material {self.name!r}: dielectric strength {strength!r} V/m must be positive, or omit it"
            )
        if self.kind not in MATERIAL_KINDS:
            raise MaterialError(
                f"material {self.name!r}: kind {self.kind!r} is not one of {', '.join(MATERIAL_KINDS)}"
            )
        tan_d = self.loss_tangent
        if tan_d is not None and not (math.isfinite(tan_d) and tan_d >= 0):
            raise MaterialError(f"material {self.name!r}: loss tangent {tan_d!r} must be >= 0, or omit it")
        sigma = self.conductivity
        if sigma is not None and not (math.isfinite(sigma) and sigma > 0):
            raise MaterialError(f"material {self.name!r}: conductivity {sigma!r} S/m must be positive, or omit it")
        if self.dc_strength is not None and not (math.isfinite(self.dc_strength) and self.dc_strength > 0):
            raise MaterialError(f"material {self.name!r}: DC strength {self.dc_strength!r} V/m must be positive, "
                                "or omit it")
        for label, value in [("conductivity_alpha_per_K", self.conductivity_alpha),
                             ("conductivity_beta", self.conductivity_beta),
                             ("conductivity_reference_temperature_degC", self.conductivity_reference_temperature)]:
            if not math.isfinite(value):
                raise MaterialError(f"material {self.name!r}: {label} {value!r} is not a finite number")
        if self.conductivity_beta < 0 or self.conductivity_alpha < 0:
            raise MaterialError(f"material {self.name!r}: conductivity_alpha_per_K and conductivity_beta must be >= 0 "
                                "(conductivity that falls with temperature or field is not modelled)")
        if self.conductivity_alpha > LARGEST_CONDUCTIVITY_ALPHA:
            raise MaterialError(f"material {self.name!r}: conductivity_alpha_per_K {self.conductivity_alpha:g} is beyond "
                                f"{LARGEST_CONDUCTIVITY_ALPHA:g} per K (insulation: of order 0.01-0.1 per K); check it")
        if self.conductivity_beta > LARGEST_CONDUCTIVITY_BETA:
            raise MaterialError(f"material {self.name!r}: conductivity_beta {self.conductivity_beta:g} m/V is beyond "
                                f"{LARGEST_CONDUCTIVITY_BETA:g} m/V (10 mm/kV; insulation: of order 0.01-0.1 mm/kV); a bare "
                                "number is read in m/V: write it with its unit, e.g. '0.03 mm/kV'")


#: bounds far above any insulation's measured sigma(T, E) coefficients (of order 0.01-0.1 per K and 0.01-0.1 mm/kV:
#: common practice, no source), to catch a unit slip before exp() overflows
LARGEST_CONDUCTIVITY_ALPHA = 1.0  # per K
LARGEST_CONDUCTIVITY_BETA = 1e-5  # m/V, 10 mm/kV


_ALLOWED_KEYS = {
    "kind",
    "relative_permittivity",
    "dielectric_strength",
    "dielectric_strength_kV_per_mm",
    "loss_tangent",
    "source",
    "paschen_A_per_kPa_cm",
    "paschen_B_V_per_kPa_cm",
    "secondary_emission",
    "conductivity",
    "conductivity_alpha_per_K",
    "conductivity_beta",
    "conductivity_reference_temperature_degC",
    "dc_strength",
    "dc_strength_kV_per_mm",
    "conductivity_source",
}
_PASCHEN_KEYS = ("paschen_A_per_kPa_cm", "paschen_B_V_per_kPa_cm", "secondary_emission")


def material_from_mapping(name: str, entry: Mapping[str, Any], where: str) -> Material:
    """Build a :class:`Material` from a TOML table; ``where`` prefixes error messages."""
    unknown = set(entry) - _ALLOWED_KEYS
    if unknown:
        raise MaterialError(
            f"{where}: unknown key(s) {sorted(unknown)}; allowed: {sorted(_ALLOWED_KEYS)}"
        )
    if "relative_permittivity" not in entry:
        raise MaterialError(f"{where}: 'relative_permittivity' is required")
    er = _plain_number(entry, "relative_permittivity", where)
    strength: float | None = None
    if "dielectric_strength" in entry and "dielectric_strength_kV_per_mm" in entry:
        raise MaterialError(f"{where}: give either dielectric_strength or dielectric_strength_kV_per_mm, not both")
    if "dielectric_strength" in entry:
        strength = to_si(entry["dielectric_strength"], "field", f"{where}.dielectric_strength")
    elif "dielectric_strength_kV_per_mm" in entry:
        strength = _plain_number(entry, "dielectric_strength_kV_per_mm", where) * 1e6
    tan_d = None if "loss_tangent" not in entry else _plain_number(entry, "loss_tangent", where)
    for key in ("kind", "source"):
        if key in entry and not isinstance(entry[key], str):
            raise MaterialError(f"{where}.{key} = {entry[key]!r}: must be text in quotes"
                                + (f", one of {', '.join(MATERIAL_KINDS)}" if key == "kind" else ""))
    paschen = None
    given = [k for k in _PASCHEN_KEYS if k in entry]
    if given:
        if len(given) != 3:
            raise MaterialError(f"{where}: Paschen constants need all of {', '.join(_PASCHEN_KEYS)}")
        a, b, gamma = (_plain_number(entry, k, where) for k in _PASCHEN_KEYS)
        if not all(v > 0 for v in (a, b, gamma)) or gamma >= 1:
            raise MaterialError(f"{where}: Paschen constants must be positive numbers (the secondary emission "
                                f"coefficient below 1), got A = {a!r}, B = {b!r}, gamma = {gamma!r}")
        paschen = (a / 1e3 / 1e-2, b / 1e3 / 1e-2, float(gamma))  # per kPa cm -> per Pa m
    conduction = _conduction(entry, where)
    return Material(
        name=name,
        relative_permittivity=float(er),
        dielectric_strength=strength,
        kind=str(entry.get("kind", "solid")),
        loss_tangent=tan_d,
        source=str(entry.get("source", "defined in the case file")),
        paschen=paschen,
        **conduction,
    )


def _plain_number(entry: Mapping[str, Any], key: str, where: str) -> float:
    """A finite number given without units (TOML integer or float)."""
    value = entry[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise MaterialError(f"{where}.{key} = {value!r}: must be a plain number without quotes")
    if not math.isfinite(value):
        raise MaterialError(f"{where}.{key} = {value!r}: must be a finite number")
    return float(value)


def _conduction(entry: Mapping[str, Any], where: str) -> dict[str, Any]:
    """The optional conduction keys of a material table, as :class:`Material` fields (SI)."""
    def number(key: str) -> float:
        return _plain_number(entry, key, where)

    out: dict[str, Any] = {}
    if "conductivity" in entry:
        out["conductivity"] = to_si(entry["conductivity"], "conductivity", f"{where}.conductivity")
    if "conductivity_alpha_per_K" in entry:
        out["conductivity_alpha"] = number("conductivity_alpha_per_K")
    if "conductivity_beta" in entry:  # "0.03 mm/kV", or a bare number in m/V
        out["conductivity_beta"] = to_si(entry["conductivity_beta"], "inverse field", f"{where}.conductivity_beta")
    if "conductivity_reference_temperature_degC" in entry:
        out["conductivity_reference_temperature"] = number("conductivity_reference_temperature_degC")
    if ("conductivity_alpha" in out or "conductivity_beta" in out) and "conductivity" not in out:
        raise MaterialError(f"{where}: conductivity_alpha_per_K / conductivity_beta need the conductivity itself "
                            "(e.g. conductivity = \"1e-15 S/m\")")
    if "dc_strength" in entry and "dc_strength_kV_per_mm" in entry:
        raise MaterialError(f"{where}: give either dc_strength or dc_strength_kV_per_mm, not both")
    if "dc_strength" in entry:
        out["dc_strength"] = to_si(entry["dc_strength"], "field", f"{where}.dc_strength")
    elif "dc_strength_kV_per_mm" in entry:
        out["dc_strength"] = number("dc_strength_kV_per_mm") * 1e6
    if "conductivity_source" in entry:
        if not isinstance(entry["conductivity_source"], str):
            raise MaterialError(f"{where}: conductivity_source must be a string, got {entry['conductivity_source']!r}")
        out["conductivity_source"] = entry["conductivity_source"]
    elif "conductivity" in out:
        out["conductivity_source"] = "defined in the case file"
    return out


@lru_cache(maxsize=1)
def _shipped_table() -> dict[str, Any]:
    text = resources.files("fieldsection").joinpath("data/materials.toml").read_text(encoding="utf-8")
    return tomllib.loads(text)


@lru_cache(maxsize=None)
def _shipped_material(name: str) -> Material:
    """One entry of the shipped table, read when first asked for (a few entries give units that only pint
    converts, and loading pint costs a fifth of a second)."""
    return material_from_mapping(name, _shipped_table()[name], f"shipped materials table [{name}]")


def shipped_materials() -> dict[str, Material]:
    """The materials table shipped with the package, by name."""
    return {name: _shipped_material(name) for name in _shipped_table()}


def _toml_key(name: str) -> str:
    """``name`` as a TOML table key: bare where TOML allows, else a quoted string (escapes, one line)."""
    return name if re.fullmatch(r"[A-Za-z0-9_-]+", name) else json.dumps(name)


def lookup_material(name: str, extra: Mapping[str, Material] | None = None) -> Material:
    """Find ``name`` among case-defined materials first, then the shipped table."""
    if extra and name in extra:
        return extra[name]
    table = _shipped_table()
    if name in table:
        return _shipped_material(name)
    known = sorted(set(table) | set(extra or {}))
    close = difflib.get_close_matches(name, known, n=3)
    hint = f"did you mean {', '.join(repr(c) for c in close)}? " if close else ""
    raise MaterialError(
        f"unknown material {name!r}: {hint}define it under [materials.{_toml_key(name)}] in the case file, "
        f"or use one of: {', '.join(known)}"
    )
