"""Values with units at the case file's edge: pint parses them (its own definitions: the SI prefixes and units
as defined by the BIPM SI brochure, 9th edition, 2019; from memory)."""

import pytest

from conftest import run_fresh_python
from fieldsection import units
from fieldsection.errors import UnitError


def test_engineering_units_to_si():
    assert units.to_si("12 kV", "voltage", "x") == pytest.approx(12e3, rel=1e-15)
    assert units.to_si("20 kV/mm", "field", "x") == pytest.approx(20e6, rel=1e-15)
    assert units.to_si("0.2 mm", "length", "x") == pytest.approx(2e-4, rel=1e-15)
    # 1 inch = 25.4 mm exactly (international yard and pound agreement, 1959); a mil is a thousandth of it
    assert units.to_si("10 mil", "length", "x") == pytest.approx(254e-6, rel=1e-12)
    assert units.to_si("500 V/mil", "field", "x") == pytest.approx(500 / 25.4e-6, rel=1e-12)
    with pytest.raises(UnitError, match="is not a voltage"):
        units.to_si("3 mm", "voltage", "x.y")


def test_an_unusable_cache_folder_falls_back_to_the_plain_registry(monkeypatch):
    import pint

    real = pint.UnitRegistry

    def refusing(*args, **kwargs):
        if kwargs.get("cache_folder") is not None:
            raise PermissionError("the cache folder is read-only")
        return real(*args, **kwargs)

    monkeypatch.setattr(pint, "UnitRegistry", refusing)
    units._registry.cache_clear()
    units._conversion.cache_clear()
    try:
        assert units.to_si("1.5 kV", "voltage", "x") == pytest.approx(1500.0, rel=1e-15)
    finally:
        units._registry.cache_clear()
        units._conversion.cache_clear()


def test_pint_comes_without_dask_and_dask_stays_importable():
    # in a fresh interpreter: reading a value with a unit imports pint, not dask; dask imports afterwards
    out = run_fresh_python("import sys", "from fieldsection.units import to_si",
                           "assert to_si('1 kV', 'voltage', 'x') == 1000.0", "print('dask' in sys.modules)",
                           "import dask", "print(dask.__name__)")
    assert out.split() == ["False", "dask"]


def test_values_in_si_units_and_shipped_materials_need_no_pint():
    # a value written in the SI unit of its kind is that number; a shipped material is read when asked for, so
    # looking up air (whose conductivity is given in S/m) loads no pint; a unit to convert still does
    out = run_fresh_python("import sys", "from fieldsection.units import to_si",
                           "from fieldsection import lookup_material",
                           "assert to_si('1e-14 S/m', 'conductivity', 'x') == 1e-14",
                           "assert to_si('2.5 V/m', 'field', 'x') == 2.5",
                           "air = lookup_material('air')",
                           "print('pint' in sys.modules, air.conductivity, air.relative_permittivity)",
                           "assert to_si('3 kV/mm', 'field', 'x') == 3e6",
                           "print('pint' in sys.modules)")
    # air: relative permittivity 1.000536 and conductivity 1e-14 S/m as the shipped table gives them
    assert out.split() == ["False", "1e-14", "1.000536", "True"]
