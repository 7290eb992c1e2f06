"""Figures of big meshes are drawn through a pixel grid; they must stay faithful to the solution.

The check is against the solution itself (no outside formula is involved): the hottest pixel shows
the highest element |E|, interpolated potentials stay within the electrode potentials (maximum
principle for Laplace's equation; e.g. Jackson, Classical Electrodynamics, 3rd ed., section 1.9,
from memory), and every figure is written.
"""

from __future__ import annotations

import pytest

import fieldsection.figures as figures
from conftest import solve_script
from fieldsection import Material
from fieldsection.report import write_report


@pytest.fixture(scope="module")
def coax():
    return solve_script("coaxial.geo", {"insulation": Material("test dielectric", 2.25, 20e6)},
                        {"inner": 1000.0, "outer": 0.0}, parameters={"lc": 0.1}, order=1, curved=False)


def test_hottest_pixel_is_the_hottest_element(coax):
    problem = coax.problem
    peak = coax.fields.element_peak_E
    image = figures._Binned(problem).image(peak, only=problem.dielectric)
    assert image.max() == peak[problem.dielectric].max()
    assert image.count() > 0.5 * image.size  # the annulus covers most of its bounding square (pi (9-1)/36)


def test_interpolated_potential_obeys_the_maximum_principle(coax):
    problem = coax.problem
    image = figures._Binned(problem).image(coax.solution.potential, "linear", only=problem.dielectric)
    assert image.min() >= -1e-9 and image.max() <= 1000.0 + 1e-9


def test_every_figure_is_written_through_the_pixel_grid(coax, tmp_path, monkeypatch):
    monkeypatch.setattr(figures, "RASTERISE_ABOVE", 0)
    folder = write_report(coax, tmp_path)
    for name in ("regions.png", "potential.png", "field.png", "field_detail.png", "bound_charge.png"):
        assert (folder / name).stat().st_size > 10_000, name
