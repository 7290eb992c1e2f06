"""Maps are drawn through a pixel grid (figures_grid): they must stay faithful to the solution.

The checks are against the solution itself (no outside formula is involved): the hottest pixel shows
the highest element |E|, and survives into the PNG unresampled; interpolated potentials stay within
the electrode potentials (maximum principle for Laplace's equation; e.g. Jackson, Classical
Electrodynamics, 3rd ed., section 1.9, from memory), also for P2; every figure is written; the
figures drawn beside the report (figures_worker) return their files or raise their error.
"""

from __future__ import annotations

import importlib
import os
import time
from functools import partial

import numpy as np
import pytest

import fieldsection.figures as figures
from conftest import run_fresh_python, solve_script
from fieldsection import Material
from fieldsection.errors import ReportError
from fieldsection.figures_grid import PixelGrid, map_layout
import fieldsection.figures_worker as figures_worker
from fieldsection.figures_worker import start_drawing
from fieldsection.report import write_report


@pytest.fixture(scope="module")
def coax():
    return solve_script("coaxial.geo", {"insulation": Material("test dielectric", 2.25, 20e6)},
                        {"inner": 1000.0, "outer": 0.0}, parameters={"lc": 0.1}, order=1, curved=False)


@pytest.fixture(scope="module")
def coax_p2():
    return solve_script("coaxial.geo", {"insulation": Material("test dielectric", 2.25, 20e6)},
                        {"inner": 1000.0, "outer": 0.0}, parameters={"lc": 0.3}, order=2)


def _grid(problem) -> PixelGrid:
    layout = map_layout(figures._shown_bounds(problem), 1, 100)
    return PixelGrid(problem, layout.view, layout.nx, layout.ny)


def test_hottest_pixel_is_the_hottest_element(coax):
    problem = coax.problem
    peak = coax.fields.element_peak_E
    image = _grid(problem).image(peak, only=problem.dielectric)
    assert np.nanmax(image) == peak[problem.dielectric].max()
    assert np.isfinite(image).mean() > 0.5  # the annulus covers most of its bounding square (pi (9-1)/36)


def test_a_pixel_centre_takes_its_element_and_small_elements_their_centroid_pixel(coax):
    """Each element shows: in the pixels whose centres it holds, or else (smaller than a pixel) in its centroid's."""
    problem = coax.problem
    grid = _grid(problem)
    n = problem.section.mesh.nelements
    seen = np.zeros(n, dtype=bool)
    seen[grid._element] = True
    seen[grid._tiny] = True
    assert seen.all()
    ids = grid.image(np.arange(n, dtype=float))
    assert np.isfinite(ids).sum() == np.unique(grid._pixel).size + np.setdiff1d(grid._tiny_pixel, grid._pixel).size


def test_interpolated_potential_obeys_the_maximum_principle(coax, coax_p2):
    for solution in (coax, coax_p2):
        problem = solution.problem
        image = _grid(problem).image(solution.solution.potential, "linear", only=problem.dielectric)
        assert np.nanmin(image) >= -1e-9 and np.nanmax(image) <= 1000.0 + 1e-9
        assert np.nanmax(image) > 900.0 and np.nanmin(image) < 100.0  # and spans the potentials


def test_the_png_shows_the_top_colour_unresampled(coax, tmp_path):
    """The field map's hottest pixel keeps the colour of the highest |E| in the written PNG."""
    from matplotlib import colormaps
    from matplotlib.image import imread

    path = figures.plot_field(coax.problem, coax.fields, coax.hotspots, tmp_path / "field.png")
    pixels = np.round(imread(path)[..., :3] * 255).astype(int)
    top = np.round(np.array(colormaps["YlOrRd"](1.0)[:3]) * 255).astype(int)
    assert (np.abs(pixels - top).max(axis=-1) == 0).sum() >= 1


def test_every_figure_is_written(coax, tmp_path):
    folder = write_report(coax, tmp_path)
    for name in ("regions.png", "potential.png", "field.png", "field_detail.png", "bound_charge.png"):
        assert (folder / name).stat().st_size > 10_000, name
    assert "data:image/png;base64," in (folder / "report.html").read_text(encoding="utf-8")


def test_an_unwritable_figure_is_a_report_error(coax, tmp_path):
    with pytest.raises(ReportError, match="cannot write the figure .*check that its folder exists"):
        figures.plot_regions(coax.problem, tmp_path / "missing" / "regions.png")


def _first():
    return [("a.png", f"drawn by {os.getpid()}")]


def _slow(k):
    time.sleep(0.2)
    return [(f"{k}.png", f"drawn by {os.getpid()}")]


def _failing_first():
    raise ReportError("cannot write the figure 'a.png': no room; check that its folder exists and is writable")


def _then(word):
    if word == "fail":
        raise ReportError("cannot write the figure 'b.png': no room; check that its folder exists and is writable")
    return [("b.png", word)]


@pytest.mark.parametrize("platform", ["linux", "other"])
def test_drawing_beside_the_report_returns_its_files_or_raises_its_error(platform, monkeypatch):
    monkeypatch.setattr("sys.platform", platform)  # "other": in a thread, as where the platform cannot fork
    drawing = start_drawing([_first], _then)
    drawing.give("then")
    drawn = drawing.finish()
    assert [name for name, _ in drawn] == ["a.png", "b.png"]
    # several slow jobs: on Linux the child takes them from the front while this process, its own work done and
    # the figure modules loaded (as ``warm_up`` does), takes them from the back; without those modules it leaves
    # them all to the child; in a thread (elsewhere) all of them in this process; report order every way
    for name in figures_worker._FIGURE_MODULES:
        importlib.import_module(name)
    for loaded in (True, False):
        monkeypatch.setattr(figures_worker, "_can_help", lambda: loaded)
        shared = start_drawing([partial(_slow, k) for k in range(6)], _then)
        shared.give("then")
        drawn = shared.finish()
        assert [name for name, _ in drawn] == [f"{k}.png" for k in range(6)] + ["b.png"]
        here = {caption == f"drawn by {os.getpid()}" for _, caption in drawn[:6]}
        assert here == ({True} if platform != "linux" else {True, False} if loaded else {False})
    failing = start_drawing([_first], _then)
    failing.give("fail")
    with pytest.raises(ReportError, match="no room"):
        failing.finish()
    failing_first = start_drawing([_failing_first], _then)
    failing_first.give("then")
    with pytest.raises(ReportError, match="'a.png': no room"):
        failing_first.finish()
    unpicklable = start_drawing([_first], lambda word: [("c.png", word())])
    unpicklable.give(lambda: "made here")  # (a lambda cannot go to a child process: ``then`` runs in this one)
    assert unpicklable.finish()[-1] == ("c.png", "made here")
    stopped = start_drawing([_first], _then)
    stopped.stop()  # (the report failed first): nothing is left running


def test_a_map_image_lands_on_its_axes_right_way_up(tmp_path):
    """Row 0 of a map is its bottom row in the PNG, and the image fills the axes box exactly."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.image import imread

    layout = map_layout((0.0, 1.0, 0.0, 1.0), 1, 100)
    fig = Figure(figsize=(layout.width / figures.DPI, layout.height / figures.DPI), dpi=figures.DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes(layout.axes_rect)
    ax.set_axis_off()
    rgba = np.zeros((layout.ny, layout.nx, 4), dtype=np.uint8)
    rgba[..., 3] = 255
    rgba[: layout.ny // 2, :, 0] = 255  # bottom half red
    rgba[layout.ny // 2:, :, 2] = 255  # top half blue
    figures._show(ax, layout, rgba)
    pixels = np.round(imread(figures._save(fig, tmp_path / "map.png"))[..., :3] * 255).astype(int)
    assert pixels.shape[:2] == (layout.height, layout.width)
    top = layout.height - layout.bottom - layout.ny  # PNG rows count from the top
    assert (pixels[top + layout.ny - 1, layout.left] == [255, 0, 0]).all()  # bottom-left pixel of the map
    assert (pixels[top, layout.left + layout.nx - 1] == [0, 0, 255]).all()  # top-right pixel
    assert (pixels[top - 1, layout.left] == [255, 255, 255]).all()  # just above: the figure's white
    assert (pixels[top + layout.ny, layout.left] == [255, 255, 255]).all()  # just below


def test_figure_modules_imported_beside_the_analysis_before_the_drawing_forks():
    # in a fresh interpreter (matplotlib not yet imported): warm_up imports in a thread, and start_drawing waits
    # for it before forking, so the child never inherits a held import lock and finds matplotlib loaded
    out = run_fresh_python("import sys", "from fieldsection.figures_worker import start_drawing, warm_up",
                           "assert 'matplotlib' not in sys.modules", "warm_up()",
                           "drawing = start_drawing([lambda: [('first', sys.modules.get('fieldsection.figures') is not None)]],"
                           " lambda: [])", "drawing.give()", "print(drawing.finish())")
    assert out.strip() == "[('first', True)]"
