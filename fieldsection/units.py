"""Quantities with units at the edges; SI floats inside.

Case files may write "12 kV", "0.2 mm" or "20 kV/mm"; a bare number is taken as SI.
Parsing is delegated to pint; its registry is built lazily, from pint's disk cache of its parsed definitions.
"""

from __future__ import annotations

import math
import re
import sys
from functools import lru_cache
from typing import Any

from .errors import UnitError

#: SI unit of each physical kind used in case files and material tables.
SI_UNITS = {
    "length": "m",
    "voltage": "V",
    "field": "V/m",
    "charge": "C/m",  # per unit length of a planar section
    "total charge": "C",  # of an axisymmetric body
    "pressure": "Pa",
    "conductivity": "S/m",
    "frequency": "Hz",
    "inverse field": "m/V",  # the field coefficient beta of sigma(T, E) = sigma0 exp(alpha T + beta E)
    "dimensionless": "",
}


@lru_cache(maxsize=1)
def _registry():
    pint = _import_pint()
    # pint parses its definitions file on every start (~0.4 s, a third of a small model's run) unless it may keep
    # the parsed result in the user's cache folder; where that folder cannot be used, the plain registry
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except Exception:  # noqa: BLE001 - an unwritable or damaged cache must never stop a run
        return pint.UnitRegistry()


def _import_pint():
    """pint, imported without its optional support for dask arrays of quantities, which no case uses: importing
    dask for it costs a sixth of a second on every start (a ``None`` in ``sys.modules`` makes an import fail, so
    pint's compatibility module finds no dask); dask itself stays importable afterwards (for design studies)."""
    if "pint" in sys.modules or "dask" in sys.modules:
        import pint

        return pint
    sys.modules["dask"] = None
    try:
        import pint
    finally:
        if sys.modules.get("dask", 0) is None:
            del sys.modules["dask"]
    return pint


def to_si(value: Any, kind: str, what: str) -> float:
    """Convert ``value`` (a number, or a string such as ``"12 kV"``) to an SI float of ``kind``.

    ``what`` names the value in error messages, e.g. ``"electrodes.plus.potential"``.
    """
    if kind not in SI_UNITS:
        raise ValueError(f"unknown quantity kind {kind!r}")
    if isinstance(value, bool):
        raise UnitError(f"{what}: expected a {kind}, got the boolean {value!r}")
    if isinstance(value, (int, float)):
        return _finite(float(value), what)
    if not isinstance(value, str):
        raise UnitError(f"{what}: expected a number or a string like '2 mm', got {value!r}")
    magnitude, unit_text = _split_quantity(value, kind, what)
    if not unit_text or unit_text == SI_UNITS[kind]:  # SI already ("1e-14 S/m"): no need to load pint for it
        return _finite(magnitude, what)
    pint = _import_pint()
    # "mil" is a thousandth of an inch on circuit boards and datasheets ("10 mil", "500 V/mil"); pint reads it
    # as the angular mil, which no case file means
    unit_text = _MIL.sub("thou", unit_text)
    target = SI_UNITS[kind]
    try:
        scale, offset = _conversion(unit_text, target)
    except pint.errors.DimensionalityError:
        raise UnitError(
            f"{what}: {value!r} is not a {kind}; give it in {target or 'no unit'} or a multiple of it"
        ) from None
    except (pint.errors.PintError, ValueError, TypeError, AttributeError, SyntaxError, KeyError) as exc:
        raise UnitError(f"{what}: unknown unit {unit_text!r} in {value!r} ({exc}); write e.g. '2 mm', '12 kV'") from None
    return _finite(magnitude * scale + offset, what)  # an overflow gives inf, refused there


@lru_cache(maxsize=256)
def _conversion(unit_text: str, target: str) -> tuple[float, float]:
    """(scale, offset) taking a magnitude in ``unit_text`` to ``target``; pint parses each unit once."""
    registry = _registry()
    units = registry.parse_units(unit_text)
    to = target or "dimensionless"
    zero = float(registry.Quantity(0.0, units).to(to).magnitude)  # non-zero only for offset units (degC)
    return float(registry.Quantity(1.0, units).to(to).magnitude) - zero, zero


#: a value with units is a number, then a unit: a product or quotient of unit names with small integer
#: powers. No arithmetic is evaluated, so "1/0 kV" or "10**10**10 V" are refused before pint sees them.
_NUMBER = r"[+-]?(?:\d+(?:_\d+)*(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_UNIT_NAME = r"[A-Za-z_\u00b5\u03bc\u03a9\u00b0][A-Za-z0-9_\u00b5\u03bc\u03a9\u00b0]*(?:\s*(?:\*\*|\^)\s*[+-]?\d{1,2})?"
_UNIT = rf"(?:1\s*/\s*)?{_UNIT_NAME}(?:\s*[*/\u00b7]\s*{_UNIT_NAME}|\s+{_UNIT_NAME})*"
_QUANTITY = re.compile(rf"\s*({_NUMBER})\s*({_UNIT})?\s*")
_LONGEST_TEXT = 100
_MIL = re.compile(r"\bmils?\b")


def _split_quantity(text: str, kind: str, what: str) -> tuple[float, str]:
    """(magnitude, unit text) of a string such as ``"12 kV"`` or ``"2.5e-3 kV/mm"``; refuse anything else."""
    hint = {"length": "'2 mm'", "voltage": "'12 kV'", "field": "'20 kV/mm'", "charge": "'1e-9 C/m'",
            "total charge": "'1e-12 C'", "pressure": "'1 atm'"}.get(kind, "'0.5'")
    found = _QUANTITY.fullmatch(text) if len(text) <= _LONGEST_TEXT else None
    if found is None:
        raise UnitError(f"{what}: cannot read {text[:_LONGEST_TEXT]!r} as a {kind}: write a number and a unit, "
                        f"e.g. {hint} (no arithmetic)")
    try:
        magnitude = float(found.group(1).replace("_", ""))
    except ValueError:  # pragma: no cover - the pattern admits only float syntax
        raise UnitError(f"{what}: cannot read the number in {text!r}") from None
    return _finite(magnitude, what), (found.group(2) or "").strip()


def _finite(number: float, what: str) -> float:
    if not math.isfinite(number):
        raise UnitError(f"{what}: {number!r} is not a finite number")
    return number
