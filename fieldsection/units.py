"""Quantities with units at the edges; SI floats inside.

Case files may write "12 kV", "0.2 mm" or "20 kV/mm"; a bare number is taken as SI.
Parsing is delegated to pint; its registry is built lazily because it costs ~1 s.
"""

from __future__ import annotations

import math
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
    import pint

    return pint.UnitRegistry()


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
    text = value.strip()
    try:
        return _finite(float(text), what)
    except ValueError:
        pass
    import pint

    registry = _registry()
    try:
        quantity = registry.Quantity(text)
    except (pint.errors.PintError, ValueError, TypeError, AttributeError, SyntaxError) as exc:
        raise UnitError(f"{what}: cannot read {value!r} as a {kind} ({exc}); write e.g. '2 mm', '12 kV'") from None
    target = SI_UNITS[kind]
    try:
        converted = quantity.to(target) if target else quantity.to("dimensionless")
    except pint.errors.DimensionalityError:
        raise UnitError(
            f"{what}: {value!r} is not a {kind}; give it in {target or 'no unit'} or a multiple of it"
        ) from None
    return _finite(float(converted.magnitude), what)


def _finite(number: float, what: str) -> float:
    if not math.isfinite(number):
        raise UnitError(f"{what}: {number!r} is not a finite number")
    return number
