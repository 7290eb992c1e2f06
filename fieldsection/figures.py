"""Figures: PNG plots of the regions, the potential, |E| with hotspots, and bound surface charge.

Drawn with matplotlib's object API (``matplotlib.figure.Figure`` on an Agg canvas; pyplot is never
imported), so no global state is touched and nothing needs a display. Quantities are SI inside; the
plots show engineers' units, always labelled: lengths in mm, potential in V or kV, |E| in kV/mm and
surface charge density in uC/m^2.

Every map (regions, potential, |E|) is one image whose pixels are the PNG's own, binned from the
mesh in numpy (``figures_grid``): the hottest pixel shows the hottest element whatever the mesh
size, and the potential is interpolated linearly from the corner vertices. Curved (second-order)
meshes are drawn by their corner vertices, i.e. with straight chords. Outlines, electrodes,
equipotentials and hotspot markers are drawn as lines and markers at their true positions, in
fixed margins (no layout engine). Every function writes a PNG at ``DPI`` and returns the path written;
the figure, never registered with pyplot, goes with its last reference.
"""

from __future__ import annotations

import os
from functools import lru_cache
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg
from matplotlib.cm import ScalarMappable
from matplotlib.collections import LineCollection
from matplotlib.colors import Normalize, hsv_to_rgb, to_rgb
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator
from matplotlib.tri import Triangulation

from .charges import ChargeResult
from .errors import ReportError
from .fields import ElementFields
from .figures_grid import (BAR_GAP, BAR_LABELS, BAR_WIDTH, TITLE_AT, VIEW_MARGIN, MapLayout, forget_grids, map_layout,
                           pixel_grid)
from .hotspots import HotspotResult
from .mesh import EXTERIOR
from .problem import AssembledProblem
from .solve import Solution

DPI = 120
#: zlib level of the PNG files (1: fastest; the figures are flat colours and lines, so they stay small)
PNG_COMPRESSION = 1
#: tick intervals on a map's axes and colour bar, at most
TICKS = 6
_TICK_STEPS = (1, 2, 2.5, 5, 10)
#: meshes with at least this many elements are drawn without their edges
MAX_ELEMENTS_WITH_EDGES = 20_000
#: hotspots beyond this rank are outlined but not numbered, to keep the plot legible
MAX_NUMBERED_HOTSPOTS = 20
#: a hotspot label closer than this share of the section's size to a higher-ranked one is omitted
LABEL_SPACING = 0.04
#: the bound-charge colour scale is clipped at the 99th percentile of |sigma_b| when the peak
#: exceeds it by this factor (a few facets at a sharp edge would otherwise wash out the rest)
CLIP_RATIO = 2.0
#: half-width of the detail view around the highest field, as a share of the model's extent
DETAIL_HALF_WIDTH = 0.05

_MM = 1e3  # m -> mm
_KV_PER_MM = 1e-6  # V/m -> kV/mm
_UC_PER_M2 = 1e6  # C/m^2 -> uC/m^2
_OUTLINE = "#3c3c3c"
_CONDUCTOR_FILL = "#8f8f8f"
_MESH_EDGE = "#4d4d4d"
_MESH_EDGE_ALPHA = 0.28  # a mesh edge darkens the pixels it passes through by this share
_HOTSPOT = "#1d4f91"
_ELECTRODE_COLOURS = ("#202020", "#7a2e12", "#1f5c4a", "#4a2f73", "#6b5a12", "#2a4f7a")
_BAR_ROOM = BAR_GAP + BAR_WIDTH + BAR_LABELS  # pixels right of a map for its colour bar


# --------------------------------------------------------------------------------------- helpers
def _vertices_mm(problem: AssembledProblem) -> np.ndarray:
    """Corner-vertex coordinates in mm, shape (2, nvertices) (``mesh.p`` of MeshTri2 has more)."""
    mesh = problem.section.mesh
    return mesh.p[:, : mesh.nvertices] * _MM


def _triangulation(problem: AssembledProblem, mask: np.ndarray | None = None) -> Triangulation:
    """The corner triangulation; the mapped exterior of an open-space circle is always masked out."""
    xy = _vertices_mm(problem)
    hidden = problem.section.exterior if mask is None else (mask | problem.section.exterior)
    return Triangulation(xy[0], xy[1], problem.section.mesh.t.T, mask=hidden if hidden.any() else None)


def _segments_mm(problem: AssembledProblem, facets: np.ndarray) -> np.ndarray:
    """The straight segments of ``facets``, shape (n, 2 ends, 2 coordinates), mm."""
    xy = _vertices_mm(problem)
    return xy[:, problem.section.mesh.facets[:, facets]].transpose(2, 1, 0)  # (coord, end, n) -> (n, end, coord)


def _outline_facets(problem: AssembledProblem) -> np.ndarray:
    """Facets on the mesh boundary or between two regions."""
    f2t = problem.section.mesh.f2t
    region = problem.section.region_of_element
    other = region[np.maximum(f2t[1], 0)]
    return np.flatnonzero((f2t[1] < 0) | (region[f2t[0]] != other))


def _region_colours(problem: AssembledProblem) -> np.ndarray:
    """One light RGB colour per region (golden-ratio hue steps); conductor regions grey."""
    names = problem.section.region_names
    hue = (0.58 + 0.618034 * np.arange(len(names))) % 1.0
    hsv = np.column_stack([hue, np.full(hue.shape, 0.30), np.full(hue.shape, 0.92)])
    rgb = hsv_to_rgb(hsv)
    is_conductor = np.array([name not in problem.material_of_region for name in names], dtype=bool)
    rgb[is_conductor] = to_rgb(_CONDUCTOR_FILL)
    return rgb


def _shown_bounds(problem: AssembledProblem) -> tuple[float, float, float, float]:
    """(x0, x1, y0, y1) in mm of the drawn section (the mapped exterior left out)."""
    mesh, shown = problem.section.mesh, ~problem.section.exterior
    xy = _vertices_mm(problem)
    used = np.zeros(mesh.nvertices, dtype=bool)
    used[mesh.t[:, shown]] = True
    used = xy[:, used] if shown.any() else xy
    return (float(used[0].min()), float(used[0].max()), float(used[1].min()), float(used[1].max()))


def _line(ax: Axes, segments: np.ndarray, **style) -> Line2D:
    """``segments`` (n, 2, 2; mm) as one line with breaks between them (one path: drawn in one call)."""
    xy = np.full((len(segments), 3, 2), np.nan)
    xy[:, :2] = segments
    # not snapped to pixel centres, butt ends: a thin line stays thin and two touching segments do not overlap
    style = {"snap": False, "solid_capstyle": "butt", **style}
    line = Line2D(xy[:, :, 0].ravel(), xy[:, :, 1].ravel(), **style)
    ax.add_line(line)
    return line


def _draw_outline(ax: Axes, problem: AssembledProblem, width: float = 0.6) -> None:
    """Thin lines along the section's boundary and between regions."""
    _line(ax, _segments_mm(problem, _outline_facets(problem)), color=_OUTLINE, linewidth=width, zorder=3)


def format_voltage(volts: float) -> str:
    """A potential for a label: kV from 1 kV up, else V."""
    if abs(volts) >= 1e3:
        return f"{volts / 1e3:.4g} kV"
    return f"{volts:.4g} V"


def _map_figure(problem: AssembledProblem, title: str, window: tuple[float, ...] | None = None,
                right: int = _BAR_ROOM) -> tuple[Figure, Axes, MapLayout]:
    """A figure with one map axes in mm, laid out in fixed pixels (``figures_grid.map_layout``): the whole
    section with a margin, or ``window`` (x0, x1, y0, y1; mm); ``title`` centred above, ``right`` pixels beside."""
    bounds = _shown_bounds(problem) if window is None else window
    layout = map_layout(bounds, title.count("\n") + 1, right, margin=VIEW_MARGIN if window is None else 0.0)
    fig = Figure(figsize=(layout.width / DPI, layout.height / DPI), dpi=DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes(layout.axes_rect)
    x0, x1, y0, y1 = layout.view
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    # few ticks: each is a handful of artists to make and a label to lay out and draw
    ax.xaxis.set_major_locator(MaxNLocator(TICKS, steps=_TICK_STEPS))
    ax.yaxis.set_major_locator(MaxNLocator(TICKS, steps=_TICK_STEPS))
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    fig.text(0.5, 1 - TITLE_AT / layout.height, title, ha="center", va="top", fontsize=10)
    return fig, ax, layout


class _Pixels(Artist):
    """An RGBA image (row 0 at the bottom) put on the canvas at a pixel offset as it is: never resampled."""

    def __init__(self, rgba: np.ndarray, left: int, bottom: int):
        super().__init__()
        self._rgba = np.ascontiguousarray(rgba)
        self._left, self._bottom = left, bottom

    def draw(self, renderer) -> None:
        gc = renderer.new_gc()
        renderer.draw_image(gc, self._left, self._bottom, self._rgba)
        gc.restore()


def _show(ax: Axes, layout: MapLayout, rgba: np.ndarray) -> None:
    """An (ny, nx, 4) image exactly under the map's axes, one image pixel per PNG pixel, behind the axes (whose
    own background is left out)."""
    ax.patch.set_visible(False)
    ax.figure.add_artist(_Pixels(rgba, layout.left, layout.bottom)).set_zorder(-1)


def _rgba(values: np.ndarray, cmap, norm: Normalize) -> np.ndarray:
    """A value image through a colour map: RGBA bytes, transparent where NaN."""
    rgba = cmap(norm(np.ma.masked_invalid(values)), bytes=True)
    rgba[np.isnan(values)] = 0
    return rgba


def _colour_bar(fig: Figure, layout: MapLayout, cmap, norm: Normalize, label: str, extend: str = "neither"):
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=fig.add_axes(layout.bar_rect), extend=extend)
    if type(norm) is Normalize:  # (a logarithmic scale keeps its own ticks)
        bar.locator = MaxNLocator(TICKS, steps=_TICK_STEPS)
    bar.set_label(label)
    return bar


def _dielectric_map(problem: AssembledProblem, layout: MapLayout, values: np.ndarray, cmap,
                    norm: Normalize) -> np.ndarray:
    """Per element ``values`` on the dielectric through ``cmap``, meshed conductors flat grey: RGBA bytes."""
    grid = pixel_grid(problem, layout)
    dielectric = problem.dielectric
    rgba = _rgba(grid.image(values, only=dielectric), cmap, norm)
    if (~dielectric).any():
        conductor = ~np.isnan(grid.image(np.zeros(problem.section.mesh.nelements), only=~dielectric))
        rgba[conductor & (rgba[..., 3] == 0)] = (*(int(round(255 * c)) for c in to_rgb(_CONDUCTOR_FILL)), 255)
    return rgba


def _region_map(problem: AssembledProblem, layout: MapLayout, strength: float = 1.0) -> np.ndarray:
    """Each region in its colour, mixed with white by ``1 - strength``: RGBA bytes, transparent outside."""
    colours = np.round(255 * (1.0 - strength * (1.0 - _region_colours(problem)))).astype(np.uint8)
    region = pixel_grid(problem, layout).image(problem.section.region_of_element.astype(float))
    have = ~np.isnan(region)
    rgba = np.zeros(region.shape + (4,), dtype=np.uint8)
    rgba[have, :3] = colours[region[have].astype(np.int64)]
    rgba[have, 3] = 255
    return rgba


def _save(fig: Figure, path: str | os.PathLike) -> Path:
    path = Path(path)
    try:
        fig.savefig(path, dpi=DPI, format="png", pil_kwargs={"compress_level": PNG_COMPRESSION})
    except OSError as exc:
        raise ReportError(f"cannot write the figure {str(path)!r}: {exc.strerror or exc}; "
                          "check that its folder exists and is writable") from None
    # (no fig.clear(): it would rebuild every axis's ticks only to drop them; the figure was never
    # registered with pyplot, so it goes with its last reference)
    return path


@lru_cache(maxsize=1)
def _text_renderer() -> RendererAgg:
    return RendererAgg(1, 1, DPI)


def _text_width(text: str, size: float) -> float:
    """The width of ``text`` in pixels at font ``size`` (points)."""
    width, _, _ = _text_renderer().get_text_width_height_descent(text, FontProperties(size=size), ismath=False)
    return width


def forget_binnings() -> None:
    """Drop the pixel binnings kept for the figures of the last model (tens of MB for a big mesh)."""
    forget_grids()


# --------------------------------------------------------------------------------------- figures
def plot_regions(problem: AssembledProblem, path: str | os.PathLike) -> Path:
    """Regions filled by colour (legend: region and material), mesh edges, labelled electrodes."""
    section, mesh = problem.section, problem.section.mesh
    colours = _region_colours(problem)
    handles: list = []
    for index, name in enumerate(section.region_names):
        if name == EXTERIOR:
            continue
        material = problem.material_of_region.get(name)
        what = (f"{material.name} (εr = {material.relative_permittivity:.3g})" if material is not None
                else "conductor")
        handles.append(Patch(facecolor=colours[index], edgecolor=_OUTLINE, linewidth=0.5,
                             label=f"{name}: {what}"))
    electrodes = []
    for k, conductor in enumerate(problem.conductors):
        if conductor.facets.size == 0:
            continue
        colour = _ELECTRODE_COLOURS[k % len(_ELECTRODE_COLOURS)]
        label = f"{conductor.name}: " + ("floating" if conductor.floating else format_voltage(conductor.potential))
        handles.append(Line2D([], [], color=colour, linewidth=2.4, label=f"electrode {label}"))
        electrodes.append((conductor, colour, label))

    n = mesh.nelements
    with_edges = n < MAX_ELEMENTS_WITH_EDGES
    edges_note = (f"{n} elements, P{problem.element_order}" if with_edges else
                  f"{n} elements, P{problem.element_order}; "
                  f"mesh edges not drawn (≥ {MAX_ELEMENTS_WITH_EDGES:,} elements)".replace(",", " "))
    legend_width = max((_text_width(h.get_label(), 8) for h in handles), default=0.0) + 60
    fig, ax, layout = _map_figure(problem, f"Regions, materials and electrodes\n{edges_note}",
                                  right=int(np.ceil(legend_width)) + 20)
    rgba = _region_map(problem, layout)
    if with_edges:
        f2t, outside = mesh.f2t, section.exterior
        drawn = ~outside[f2t[0]] | ((f2t[1] >= 0) & ~outside[np.maximum(f2t[1], 0)])
        flat = rgba.reshape(-1, 4)
        pixels = pixel_grid(problem, layout).segment_pixels(_segments_mm(problem, np.flatnonzero(drawn)))
        pixels = pixels[flat[pixels, 3] > 0]
        edge = np.array([int(_MESH_EDGE[i:i + 2], 16) for i in (1, 3, 5)], dtype=float)
        flat[pixels, :3] = np.round((1 - _MESH_EDGE_ALPHA) * flat[pixels, :3] + _MESH_EDGE_ALPHA * edge)
    _show(ax, layout, rgba)
    _draw_outline(ax, problem)

    for conductor, colour, label in electrodes:
        segments = _segments_mm(problem, conductor.facets)
        # a collection (each segment stroked alone): round ends overlapping within one path would darken its rim
        ax.add_collection(LineCollection(segments, colors=colour, linewidths=2.4, zorder=4, capstyle="round"),
                          autolim=False)
        midpoints = segments.mean(axis=1)
        top = midpoints[np.argmax(midpoints[:, 1])]  # label at the electrode's highest point
        ax.annotate(label, top, xytext=(0, 5), textcoords="offset points", ha="center", va="bottom",
                    fontsize=8, color=colour, zorder=5,
                    bbox=dict(boxstyle="round,pad=0.2", facecolor="white", edgecolor=colour, alpha=0.85))
    fig.legend(handles=handles, loc="upper left", fontsize=8, frameon=False, borderaxespad=0.0,
               bbox_to_anchor=((layout.left + layout.nx + 16) / layout.width,
                               (layout.bottom + layout.ny) / layout.height))
    return _save(fig, path)


def plot_potential(solution: Solution, path: str | os.PathLike) -> Path:
    """The potential at the corner vertices, interpolated linearly, with 15 equipotential lines."""
    problem = solution.problem
    mesh = problem.section.mesh
    volts = solution.potential[: mesh.nvertices]  # vertex DOFs come first in P1 and P2 bases
    scale, unit = (1e-3, "kV") if np.abs(volts).max() >= 1e3 else (1.0, "V")
    values = volts * scale
    low, high = float(values.min()), float(values.max())
    cmap = colormaps["cividis"]
    flat = high - low <= 1e-9 * max(abs(high), abs(low), 1e-3)  # one potential everywhere (round-off aside)
    if flat:
        level = 0.5 * (low + high)
        norm = Normalize(level - 1.0, level + 1.0)
        title = f"Potential ({unit}): {format_voltage(level / scale)} everywhere, no equipotential lines"
    else:
        norm = Normalize(low, high)
        title = f"Potential ({unit}), 15 equipotential lines"
    fig, ax, layout = _map_figure(problem, title)
    _show(ax, layout, _rgba(pixel_grid(problem, layout).image(values, "linear"), cmap, norm))
    lines = None
    if not flat:
        dielectric = problem.dielectric
        tri = _triangulation(problem, mask=~dielectric if (~dielectric).any() else None)
        lines = ax.tricontour(tri, values, levels=np.linspace(low, high, 17)[1:-1], colors="black",
                              linewidths=0.5, alpha=0.7, negative_linestyles="solid", zorder=2)
    _draw_outline(ax, problem)
    bar = _colour_bar(fig, layout, cmap, norm, f"V ({unit})")
    if lines is not None:
        bar.add_lines(lines)
    return _save(fig, path)


def _hotspot_owner(nelements: int, hotspots: HotspotResult) -> np.ndarray:
    """Rank (0-based) of the hotspot each element belongs to, -1 for none."""
    owner = np.full(nelements, -1, dtype=np.int64)
    if hotspots.hotspots:
        members = np.concatenate([h.elements for h in hotspots.hotspots])
        sizes = [h.elements.size for h in hotspots.hotspots]
        owner[members] = np.repeat(np.arange(len(sizes)), sizes)
    return owner


def hotspot_boundary_facets(problem: AssembledProblem, hotspots: HotspotResult) -> np.ndarray:
    """Facets with exactly one neighbour in a hotspot's element set (the sets' outlines)."""
    f2t = problem.section.mesh.f2t
    owner = _hotspot_owner(problem.section.mesh.nelements, hotspots)
    first = owner[f2t[0]]
    second = np.where(f2t[1] >= 0, owner[np.maximum(f2t[1], 0)], -1)
    return np.flatnonzero((first != second) & ((first >= 0) | (second >= 0)))


def _area_quantile(values: np.ndarray, areas: np.ndarray, share: float) -> float:
    """The value that ``share`` of the total area lies at or below."""
    if values.size == 0:
        return 0.0
    order = np.argsort(values)
    covered = np.cumsum(areas[order]) / areas.sum()
    return float(values[order][min(np.searchsorted(covered, share), values.size - 1)])


def plot_field(problem: AssembledProblem, fields: ElementFields, hotspots: HotspotResult,
               path: str | os.PathLike, *, detail: bool = False, magnitude: np.ndarray | None = None) -> Path:
    """Peak |E| per dielectric element in kV/mm; hotspot regions outlined and numbered by rank.

    ``magnitude`` (nelements, 3), |E| at element vertices, replaces the element's own field (the
    report passes the recovered one). Where the largest value is more than twice the level that all
    but 1e-5 of the dielectric area stays below, the colour scale stops at 1.25 x that level, so that
    a few tiny elements at a singular corner do not wash out the rest; those are drawn in the top
    colour and counted in the title.
    With ``detail`` the view is a close-up around the top-ranked hotspot (or, without hotspots,
    the element of highest |E|), where thin films, corners and gas gaps become visible.
    """
    peak = (fields.element_peak_E if magnitude is None else magnitude.max(axis=1)) * _KV_PER_MM
    dielectric = problem.dielectric
    top = float(peak[dielectric].max())
    scale_top = 1.25 * _area_quantile(peak[dielectric], problem.section.element_areas[dielectric], 1 - 1e-5)
    above = int((peak[dielectric] > scale_top).sum()) if scale_top < 0.5 * top else 0
    norm = Normalize(0.0, (scale_top if above else top) if top > 0 else 1.0)
    window = _detail_window(problem, fields, hotspots) if detail else None

    found = hotspots.hotspots
    labels: list[tuple[int, np.ndarray]] = []  # (rank, where in mm) of the numbered hotspots
    if found:
        spacing = LABEL_SPACING * float(np.ptp(_vertices_mm(problem), axis=1).max())
        for rank, spot in enumerate(found[:MAX_NUMBERED_HOTSPOTS], start=1):
            where = np.asarray(spot.location) * _MM
            if any(np.hypot(*(where - other)) < spacing for _, other in labels):
                continue  # a higher-ranked label sits right here already
            labels.append((rank, where))
        note = f"{len(found)} hotspot(s) outlined where |E| ≥ {hotspots.fraction:.0%} of strength, numbered by rank"
        if len(labels) < len(found):
            note += f"\n{len(labels)} labels shown; crowded or lower-ranked ones omitted"
    else:
        note = f"no element reaches {hotspots.fraction:.0%} of its material's strength"
    title = f"Peak |E| per element, max {top:.3g} kV/mm"
    if above:
        title += f"\ncolour scale to {scale_top:.3g} kV/mm; {above} element(s) above it, at sharp corners"
    if detail:
        x0, x1, y0, y1 = window
        title = f"Detail around ({(x0 + x1) / 2:.3g}, {(y0 + y1) / 2:.3g}) mm; " + title[0].lower() + title[1:]

    cmap = colormaps["YlOrRd"]
    fig, ax, layout = _map_figure(problem, f"{title}\n{note}", window)
    _show(ax, layout, _dielectric_map(problem, layout, peak, cmap, norm))
    _draw_outline(ax, problem, width=0.5)
    if found:
        _line(ax, _segments_mm(problem, hotspot_boundary_facets(problem, hotspots)), color=_HOTSPOT, linewidth=1.3,
              zorder=4)
        where = np.array([w for _, w in labels])
        ax.plot(where[:, 0], where[:, 1], linestyle="none", marker="+", color=_HOTSPOT, markersize=7, zorder=5)
        for rank, w in labels:
            ax.annotate(str(rank), w, xytext=(4, 4), textcoords="offset points", fontsize=8,
                        color=_HOTSPOT, fontweight="bold", zorder=6,
                        bbox=dict(boxstyle="circle,pad=0.15", facecolor="white", edgecolor=_HOTSPOT, alpha=0.9))
    _colour_bar(fig, layout, cmap, norm, "|E| (kV/mm)", extend="max" if above else "neither")
    return _save(fig, path)


def plot_element_map(problem: AssembledProblem, values: np.ndarray, norm: Normalize, path: str | os.PathLike,
                     label: str, title: str, cmap: str = "YlOrRd") -> Path:
    """One value per dielectric element through ``norm`` (colour bar ``label``), meshed conductors grey."""
    colours = colormaps[cmap]
    fig, ax, layout = _map_figure(problem, title)
    _show(ax, layout, _dielectric_map(problem, layout, values, colours, norm))
    _draw_outline(ax, problem, width=0.5)
    _colour_bar(fig, layout, colours, norm, label)
    return _save(fig, path)


def _detail_window(problem: AssembledProblem, fields: ElementFields, hotspots: HotspotResult) -> tuple[float, ...]:
    """(x0, x1, y0, y1) in mm around the top-ranked hotspot, or the element of highest |E|."""
    mesh = problem.section.mesh
    if hotspots.hotspots:
        centre = np.asarray(hotspots.hotspots[0].location) * _MM
    else:
        hottest = int(np.argmax(np.where(problem.dielectric, fields.element_peak_E, -np.inf)))
        centre = mesh.p[:, mesh.t[:, hottest]].mean(axis=1) * _MM
    half = DETAIL_HALF_WIDTH * float(np.ptp(_vertices_mm(problem), axis=1).max())
    return (centre[0] - half, centre[0] + half, centre[1] - half, centre[1] + half)


def plot_bound_charge(problem: AssembledProblem, charges: ChargeResult, path: str | os.PathLike) -> Path:
    """Bound surface charge density on every material face, uC/m^2 on a scale symmetric about 0.

    Each facet is coloured by the mean of its two end values. When a few facets (typically at a
    sharp edge, where the field is singular) exceed twice the 99th percentile of |sigma_b|, the
    scale is clipped there so the other faces stay readable; the title then says so.
    """
    interfaces = charges.interfaces
    facets = np.concatenate([i.facets for i in interfaces]) if interfaces else np.zeros(0, dtype=np.int64)
    sigma = (np.concatenate([i.sigma_b.mean(axis=1) for i in interfaces]) * _UC_PER_M2
             if interfaces else np.zeros(0))
    peak = float(np.abs(sigma).max()) if sigma.size else 0.0
    extent, extend, clip_note = (peak if peak > 0 else 1.0), "neither", ""
    if sigma.size:
        typical = float(np.percentile(np.abs(sigma), 99))
        if typical > 0 and peak > CLIP_RATIO * typical:
            extent = typical
            extend = {(True, True): "both", (True, False): "max", (False, True): "min"}[
                (bool(sigma.max() > typical), bool(sigma.min() < -typical))]
            clip_note = f"\ncolour scale clipped at the 99th percentile; peak |sigma_b| = {peak:.3g} µC/m²"
    fig, ax, layout = _map_figure(problem, f"Bound surface charge density\nsigma_b = P·n (n out of each dielectric)"
                                           f"{clip_note}")
    _show(ax, layout, _region_map(problem, layout, strength=0.3))
    segments = _segments_mm(problem, facets)
    _draw_outline(ax, problem, width=0.4)
    _line(ax, segments, color=_OUTLINE, linewidth=4.2, zorder=3, solid_capstyle="round")  # casing
    cmap, norm = colormaps["RdBu_r"], Normalize(-extent, extent)
    ax.add_collection(LineCollection(segments, array=sigma, cmap=cmap, norm=norm, linewidths=3.0, zorder=4,
                                     capstyle="round"), autolim=False)
    _colour_bar(fig, layout, cmap, norm, "σ_b (µC/m²)", extend=extend)
    return _save(fig, path)
