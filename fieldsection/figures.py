"""Figures: PNG plots of the regions, the potential, |E| with hotspots, and bound surface charge.

Drawn with matplotlib's object API (``matplotlib.figure.Figure`` on an Agg canvas), so no pyplot
state is touched and nothing needs a display. Quantities are SI inside; the plots show
engineers' units, always labelled: lengths in mm, potential in V or kV, |E| in kV/mm and surface
charge density in uC/m^2.

Curved (second-order) meshes are drawn by their corner vertices, i.e. with straight chords.
Every function writes a PNG at ``DPI``, releases the figure and returns the path written.

Big meshes (above ``RASTERISE_ABOVE`` elements) are drawn at the resolution a screen shows: as an
image ``PIXELS`` wide whose pixels take the value of the element under their centre (the potential
interpolated linearly); elements too small to hold a pixel centre add their value to their
centroid's pixel, the highest |E| winning, so no peak is averaged away. Outlines, electrodes and
hotspot markers are drawn as lines and markers at their true positions.
"""

from __future__ import annotations

import weakref

import os
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.colors import ListedColormap, Normalize, hsv_to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator
from matplotlib.tri import Triangulation

from .charges import ChargeResult
from .errors import ReportError
from .fields import ElementFields
from .hotspots import HotspotResult
from .mesh import EXTERIOR
from .problem import AssembledProblem
from .solve import Solution

DPI = 120
#: meshes with at least this many elements are drawn without their edges
MAX_ELEMENTS_WITH_EDGES = 20_000
#: meshes with more elements than this are drawn through a pixel grid (see the module docstring)
RASTERISE_ABOVE = 50_000
#: pixels across the wider side of the view for that grid (a bit finer than the PNG shows)
PIXELS = 1000
#: hotspots beyond this rank are outlined but not numbered, to keep the plot legible
MAX_NUMBERED_HOTSPOTS = 20
#: a hotspot label closer than this share of the section's size to a higher-ranked one is omitted
LABEL_SPACING = 0.04
#: the bound-charge colour scale is clipped at the 99th percentile of |sigma_b| when the peak
#: exceeds it by this factor (a few facets at a sharp edge would otherwise wash out the rest)
CLIP_RATIO = 2.0

_MM = 1e3  # m -> mm
_KV_PER_MM = 1e-6  # V/m -> kV/mm
_UC_PER_M2 = 1e6  # C/m^2 -> uC/m^2
_OUTLINE = "#3c3c3c"
_CONDUCTOR_FILL = "#8f8f8f"
_HOTSPOT = "#1d4f91"
_ELECTRODE_COLOURS = ("#202020", "#7a2e12", "#1f5c4a", "#4a2f73", "#6b5a12", "#2a4f7a")


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
    rgb[is_conductor] = np.array([int(_CONDUCTOR_FILL[i:i + 2], 16) for i in (1, 3, 5)]) / 255.0
    return rgb


class _Binned:
    """A view of a big mesh as a pixel grid: each pixel centre takes the value of the element it lies in.

    Elements too small to hold a pixel centre are added by their centroid's pixel, and the largest
    value wins where several meet ("max": |E|, so no peak is lost at screen resolution); vertex
    values ("linear") are interpolated at the pixel centres. ``window`` (x0, x1, y0, y1) in mm.
    Every drawn element is binned once (the figures of a report share it, see ``_binned``); ``only``
    picks the elements an image shows.
    """

    def __init__(self, problem: AssembledProblem, window: tuple[float, ...] | None = None):
        mesh = problem.section.mesh
        shown = ~problem.section.exterior
        self.problem, self.window = weakref.ref(problem), window
        xy = _vertices_mm(problem)
        corners = xy[:, mesh.t]  # (2, 3, nelements)
        low, high = corners.min(axis=1), corners.max(axis=1)
        if window is None:
            x0, y0 = low[:, shown].min(axis=1) if shown.any() else xy.min(axis=1)
            x1, y1 = high[:, shown].max(axis=1) if shown.any() else xy.max(axis=1)
        else:
            x0, x1, y0, y1 = window
        pixel = max(x1 - x0, y1 - y0) / PIXELS
        nx, ny = max(int(np.ceil((x1 - x0) / pixel)), 1), max(int(np.ceil((y1 - y0) / pixel)), 1)
        self.extent = (x0, x0 + nx * pixel, y0, y0 + ny * pixel)
        self.nx, self.ny = nx, ny
        elements = np.flatnonzero(shown & (high[0] >= x0) & (low[0] <= x1) & (high[1] >= y0) & (low[1] <= y1))
        # pixel centres inside each element's bounding box, then a barycentric inside test
        i_lo = np.clip(np.ceil((low[0, elements] - x0) / pixel - 0.5), 0, nx).astype(np.int64)
        i_hi = np.clip(np.floor((high[0, elements] - x0) / pixel - 0.5), -1, nx - 1).astype(np.int64)
        j_lo = np.clip(np.ceil((low[1, elements] - y0) / pixel - 0.5), 0, ny).astype(np.int64)
        j_hi = np.clip(np.floor((high[1, elements] - y0) / pixel - 0.5), -1, ny - 1).astype(np.int64)
        width, height = np.maximum(i_hi - i_lo + 1, 0), np.maximum(j_hi - j_lo + 1, 0)
        count = width * height
        owner = np.repeat(np.arange(elements.size), count)
        local = np.arange(owner.size) - np.repeat(np.cumsum(count) - count, count)
        i = i_lo[owner] + local % width[owner]
        j = j_lo[owner] + local // width[owner]
        px, py = x0 + (i + 0.5) * pixel, y0 + (j + 0.5) * pixel
        c = corners[:, :, elements[owner]]
        det = (c[0, 1] - c[0, 0]) * (c[1, 2] - c[1, 0]) - (c[0, 2] - c[0, 0]) * (c[1, 1] - c[1, 0])
        l1 = ((px - c[0, 0]) * (c[1, 2] - c[1, 0]) - (c[0, 2] - c[0, 0]) * (py - c[1, 0])) / det
        l2 = ((c[0, 1] - c[0, 0]) * (py - c[1, 0]) - (px - c[0, 0]) * (c[1, 1] - c[1, 0])) / det
        tolerance = -1e-9
        inside = (l1 >= tolerance) & (l2 >= tolerance) & (1 - l1 - l2 >= tolerance)
        self._element = elements[owner[inside]]
        self._pixel = (j * nx + i)[inside]
        self._weights = np.column_stack([1 - l1 - l2, l1, l2])[inside]
        held = np.zeros(mesh.nelements, dtype=bool)
        held[self._element] = True
        tiny = elements[~held[elements]]  # elements holding no pixel centre: their centroid's pixel
        centre = corners[:, :, tiny].mean(axis=1)
        ci = np.clip(((centre[0] - x0) / pixel).astype(np.int64), 0, nx - 1)
        cj = np.clip(((centre[1] - y0) / pixel).astype(np.int64), 0, ny - 1)
        self._tiny, self._tiny_pixel = tiny, cj * nx + ci
        self._t = mesh.t
        self._whole_view = window is None

    def image(self, values: np.ndarray, how: str = "max", only: np.ndarray | None = None) -> np.ma.MaskedArray:
        """Per element ``values`` ("max"), or per vertex values interpolated linearly ("linear"), over the
        elements where ``only`` (per element) is true (all drawn ones by default)."""
        flat = np.full(self.nx * self.ny, np.nan)
        element, pixel, tiny, tiny_pixel, weights = self._element, self._pixel, self._tiny, self._tiny_pixel, self._weights
        if only is not None:
            keep, keep_tiny = only[element], only[tiny]
            element, pixel, weights = element[keep], pixel[keep], weights[keep]
            tiny, tiny_pixel = tiny[keep_tiny], tiny_pixel[keep_tiny]
        if how == "linear":
            flat[pixel] = (values[self._t[:, element]].T * weights).sum(axis=1)
        else:
            pixels = np.concatenate([pixel, tiny_pixel])
            v = np.concatenate([values[element], values[tiny]])
            order = np.argsort(v, kind="stable")
            flat[pixels[order]] = v[order]  # increasing order: the largest value lands last
        return np.ma.masked_invalid(flat.reshape(self.ny, self.nx))

    def draw(self, ax: Axes, values: np.ndarray, how: str = "max", only: np.ndarray | None = None, **style):
        picture = ax.imshow(self.image(values, how, only), extent=self.extent, origin="lower", interpolation="nearest",
                            aspect="equal", **style)
        if self._whole_view:  # the same margins as the drawn meshes of smaller models
            x0, x1, y0, y1 = self.extent
            dx, dy = 0.06 * (x1 - x0), 0.06 * (y1 - y0)
            ax.set_xlim(x0 - dx, x1 + dx)
            ax.set_ylim(y0 - dy, y1 + dy)
        return picture


_BINNINGS: list[_Binned] = []  # of the last model drawn: a report draws five figures of one model


def _binned(problem: AssembledProblem, window: tuple[float, ...] | None = None) -> _Binned:
    """The pixel binning of ``problem`` for ``window``, made once per model and window."""
    if any(b.problem() is not problem for b in _BINNINGS):
        _BINNINGS.clear()  # another model: the old binnings are of no further use
    found = next((b for b in _BINNINGS if b.window == window), None)
    if found is None:
        found = _Binned(problem, window)
        _BINNINGS.append(found)
    return found


def forget_binnings() -> None:
    """Drop the pixel binnings kept for the figures of the last model (tens of MB for a big mesh)."""
    _BINNINGS.clear()


def _big(problem: AssembledProblem) -> bool:
    return problem.section.mesh.nelements > RASTERISE_ABOVE


def _fill_regions(ax: Axes, problem: AssembledProblem, strength: float = 1.0) -> None:
    """Fill each region with its colour, mixed with white by ``1 - strength`` (opaque, no seams)."""
    colours = 1.0 - strength * (1.0 - _region_colours(problem))
    style = dict(cmap=ListedColormap(colours), vmin=-0.5, vmax=len(colours) - 0.5)
    regions = problem.section.region_of_element.astype(float)
    if _big(problem):
        _binned(problem).draw(ax, regions, **style)
        return
    ax.tripcolor(_triangulation(problem), facecolors=regions, **style)


def _draw_outline(ax: Axes, problem: AssembledProblem, width: float = 0.6) -> None:
    """Thin lines along the section's boundary and between regions."""
    ax.add_collection(LineCollection(_segments_mm(problem, _outline_facets(problem)),
                                     colors=_OUTLINE, linewidths=width, zorder=3))


def format_voltage(volts: float) -> str:
    """A potential for a label: kV from 1 kV up, else V."""
    if abs(volts) >= 1e3:
        return f"{volts / 1e3:.4g} kV"
    return f"{volts:.4g} V"


def _new_figure(problem: AssembledProblem, fixed: bool = False) -> tuple[Figure, Axes]:
    """A figure sized to the section's aspect ratio, with one equal-aspect axes in mm.

    ``fixed``: fixed margins instead of matplotlib's constrained layout, for figures whose only addition
    is a colour bar beside the axes (it takes its room from the axes): the layout engine's passes over
    every tick label cost about 0.4 s a figure, more than drawing the field itself.
    """
    xy = _vertices_mm(problem)
    width, height = np.ptp(xy, axis=1)
    aspect = float(np.clip(height / width if width > 0 else 1.0, 0.45, 1.6))
    size = (8.0, 1.2 + 5.6 * aspect)
    fig = Figure(figsize=size, layout=None if fixed else "constrained")
    if fixed:  # margins in inches: room for tick labels, axis labels and a two-line title
        fig.subplots_adjust(left=0.85 / size[0], right=1 - 0.15 / size[0], bottom=0.6 / size[1],
                            top=1 - 0.8 / size[1])
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_aspect("equal")
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    ax.set_facecolor("white")
    ax.margins(0.06)
    return fig, ax


def _save(fig: Figure, path: str | os.PathLike) -> Path:
    path = Path(path)
    try:
        fig.savefig(path, dpi=DPI, format="png")
    except OSError as exc:
        raise ReportError(f"cannot write the figure {str(path)!r}: {exc.strerror or exc}; "
                          "check that its folder exists and is writable") from None
    finally:
        fig.clear()  # the figure was never registered with pyplot; this frees its artists now
    return path


# --------------------------------------------------------------------------------------- figures
def plot_regions(problem: AssembledProblem, path: str | os.PathLike) -> Path:
    """Regions filled by colour (legend: region and material), mesh edges, labelled electrodes."""
    section, mesh = problem.section, problem.section.mesh
    fig, ax = _new_figure(problem)
    _fill_regions(ax, problem)
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

    n = mesh.nelements
    if n < MAX_ELEMENTS_WITH_EDGES:
        f2t, outside = mesh.f2t, section.exterior
        drawn = ~outside[f2t[0]] | ((f2t[1] >= 0) & ~outside[np.maximum(f2t[1], 0)])
        ax.add_collection(LineCollection(_segments_mm(problem, np.flatnonzero(drawn)),
                                         colors="#4d4d4d", linewidths=0.2, alpha=0.7, zorder=2))
        edges_note = f"{n} elements, P{problem.element_order}"
    else:
        edges_note = (f"{n} elements, P{problem.element_order}; "
                      f"mesh edges not drawn (≥ {MAX_ELEMENTS_WITH_EDGES:,} elements)".replace(",", " "))
    _draw_outline(ax, problem)

    for k, conductor in enumerate(problem.conductors):
        if conductor.facets.size == 0:
            continue
        colour = _ELECTRODE_COLOURS[k % len(_ELECTRODE_COLOURS)]
        segments = _segments_mm(problem, conductor.facets)
        ax.add_collection(LineCollection(segments, colors=colour, linewidths=2.4, zorder=4))
        label = f"{conductor.name}: " + ("floating" if conductor.floating else format_voltage(conductor.potential))
        handles.append(Line2D([], [], color=colour, linewidth=2.4, label=f"electrode {label}"))
        midpoints = segments.mean(axis=1)
        top = midpoints[np.argmax(midpoints[:, 1])]  # label at the electrode's highest point
        ax.annotate(label, top, xytext=(0, 5), textcoords="offset points", ha="center", va="bottom",
                    fontsize=8, color=colour, zorder=5,
                    bbox=dict(boxstyle="round,pad=0.2", facecolor="white", edgecolor=colour, alpha=0.85))

    ax.autoscale_view()
    ax.set_title(f"Regions, materials and electrodes\n{edges_note}", fontsize=10)
    fig.legend(handles=handles, loc="outside right upper", fontsize=8, frameon=False)
    return _save(fig, path)


def plot_potential(solution: Solution, path: str | os.PathLike) -> Path:
    """Filled contours of the potential at the corner vertices, with 15 contour lines."""
    problem = solution.problem
    mesh = problem.section.mesh
    volts = solution.potential[: mesh.nvertices]  # vertex DOFs come first in P1 and P2 bases
    scale, unit = (1e-3, "kV") if np.abs(volts).max() >= 1e3 else (1.0, "V")
    values = volts * scale
    low, high = float(values.min()), float(values.max())
    fig, ax = _new_figure(problem, fixed=True)
    big = mesh.nelements > RASTERISE_ABOVE
    if high - low <= 1e-9 * max(abs(high), abs(low), 1e-3):  # one potential everywhere (round-off aside)
        level = 0.5 * (low + high)
        shading = ax.tripcolor(_triangulation(problem), facecolors=np.full(mesh.nelements, level),
                               cmap="cividis", norm=Normalize(level - 1.0, level + 1.0), rasterized=big)
        _draw_outline(ax, problem)
        fig.colorbar(shading, ax=ax, shrink=0.85).set_label(f"V ({unit})")
        ax.set_title(f"Potential ({unit}): {format_voltage(level / scale)} everywhere, no equipotential lines",
                     fontsize=10)
        return _save(fig, path)

    dielectric = problem.dielectric
    if big:
        return _plot_potential_binned(problem, values, low, high, unit, fig, ax, path)
    tri = _triangulation(problem, mask=~dielectric if (~dielectric).any() else None)
    levels = np.linspace(low, high, 31)
    pad = 1e-9 * (high - low)
    levels[0], levels[-1] = low - pad, high + pad  # keep flat areas at the extremes inside a band
    filled = ax.tricontourf(tri, values, levels=levels, cmap="cividis")
    lines = ax.tricontour(tri, values, levels=np.linspace(low, high, 17)[1:-1], colors="black",
                          linewidths=0.5, alpha=0.7, negative_linestyles="solid")
    if (~dielectric).any():  # meshed conductors: flat, in the colour of their potential
        ax.tripcolor(_triangulation(problem, mask=dielectric), facecolors=values[mesh.t].mean(axis=0),
                     cmap=filled.cmap, norm=filled.norm)
    _draw_outline(ax, problem)
    bar = fig.colorbar(filled, ax=ax, shrink=0.85)
    ticks = MaxNLocator(8).tick_values(low, high)
    bar.set_ticks(ticks[(ticks >= low - pad) & (ticks <= high + pad)])  # not the padded band ends
    bar.set_label(f"V ({unit})")
    bar.add_lines(lines)
    ax.set_title(f"Potential ({unit}), {len(lines.levels)} equipotential lines", fontsize=10)
    return _save(fig, path)


def _plot_potential_binned(problem: AssembledProblem, values: np.ndarray, low: float, high: float, unit: str,
                           fig: Figure, ax: Axes, path) -> Path:
    """The potential of a big mesh: element means binned into pixels, equipotentials from that image."""
    binned = _binned(problem)
    image = binned.image(values, "linear")
    picture = binned.draw(ax, values, "linear", cmap="cividis", norm=Normalize(low, high))
    x0, x1, y0, y1 = binned.extent
    gx = x0 + (np.arange(binned.nx) + 0.5) * (x1 - x0) / binned.nx
    gy = y0 + (np.arange(binned.ny) + 0.5) * (y1 - y0) / binned.ny
    lines = ax.contour(gx, gy, image, levels=np.linspace(low, high, 17)[1:-1], colors="black", linewidths=0.5,
                       alpha=0.7, negative_linestyles="solid")
    _draw_outline(ax, problem)
    bar = fig.colorbar(picture, ax=ax, shrink=0.85)
    bar.set_label(f"V ({unit})")
    bar.add_lines(lines)
    ax.set_title(f"Potential ({unit}), {len(lines.levels)} equipotential lines (drawn at screen resolution)",
                 fontsize=10)
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


#: half-width of the detail view around the highest field, as a share of the model's extent
DETAIL_HALF_WIDTH = 0.05


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
    mesh = problem.section.mesh
    peak = (fields.element_peak_E if magnitude is None else magnitude.max(axis=1)) * _KV_PER_MM
    dielectric = problem.dielectric
    fig, ax = _new_figure(problem, fixed=True)
    top = float(peak[dielectric].max())
    scale_top = 1.25 * _area_quantile(peak[dielectric], problem.section.element_areas[dielectric], 1 - 1e-5)
    above = int((peak[dielectric] > scale_top).sum()) if scale_top < 0.5 * top else 0
    norm = Normalize(0.0, (scale_top if above else top) if top > 0 else 1.0)
    window = _detail_window(problem, fields, hotspots) if detail else None
    if _big(problem):
        binned = _binned(problem, window)
        shading = binned.draw(ax, peak, only=dielectric, cmap="YlOrRd", norm=norm)
        if (~dielectric).any():
            binned.draw(ax, np.zeros(mesh.nelements), only=~dielectric, cmap=ListedColormap([_CONDUCTOR_FILL]))
    else:
        shading = ax.tripcolor(_triangulation(problem, mask=~dielectric), facecolors=peak, cmap="YlOrRd", norm=norm)
        if (~dielectric).any():  # meshed conductors: flat grey, no field drawn
            ax.tripcolor(_triangulation(problem, mask=dielectric), facecolors=np.zeros(mesh.nelements),
                         cmap=ListedColormap([_CONDUCTOR_FILL]))
    _draw_outline(ax, problem, width=0.5)

    found = hotspots.hotspots
    if found:
        ax.add_collection(LineCollection(_segments_mm(problem, hotspot_boundary_facets(problem, hotspots)),
                                         colors=_HOTSPOT, linewidths=1.3, zorder=4))
        xy = _vertices_mm(problem)
        spacing = LABEL_SPACING * float(np.ptp(xy, axis=1).max())
        placed: list[np.ndarray] = []
        for rank, spot in enumerate(found[:MAX_NUMBERED_HOTSPOTS], start=1):
            where = np.asarray(spot.location) * _MM
            if any(np.hypot(*(where - other)) < spacing for other in placed):
                continue  # a higher-ranked label sits right here already
            placed.append(where)
            ax.plot(*where, marker="+", color=_HOTSPOT, markersize=7, zorder=5)
            ax.annotate(str(rank), where, xytext=(4, 4), textcoords="offset points", fontsize=8,
                        color=_HOTSPOT, fontweight="bold", zorder=6,
                        bbox=dict(boxstyle="circle,pad=0.15", facecolor="white", edgecolor=_HOTSPOT, alpha=0.9))
        shown = len(placed)
        note = f"{len(found)} hotspot(s) outlined where |E| ≥ {hotspots.fraction:.0%} of strength, numbered by rank"
        if shown < len(found):
            note += f"\n{shown} labels shown; crowded or lower-ranked ones omitted"
    else:
        note = f"no element reaches {hotspots.fraction:.0%} of its material's strength"
    bar = fig.colorbar(shading, ax=ax, shrink=0.85, extend="max" if above else "neither")
    bar.set_label("|E| (kV/mm)")
    title = f"Peak |E| per element, max {top:.3g} kV/mm"
    if above:
        title += f"\ncolour scale to {scale_top:.3g} kV/mm; {above} element(s) above it, at sharp corners"
    if detail:
        x0, x1, y0, y1 = window
        centre = np.array([x0 + x1, y0 + y1]) / 2
        ax.set_xlim(x0, x1)
        ax.set_ylim(y0, y1)
        title = f"Detail around ({centre[0]:.3g}, {centre[1]:.3g}) mm; " + title[0].lower() + title[1:]
    ax.set_title(f"{title}\n{note}", fontsize=10)
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
    fig, ax = _new_figure(problem, fixed=True)
    _fill_regions(ax, problem, strength=0.3)
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
    segments = _segments_mm(problem, facets)
    _draw_outline(ax, problem, width=0.4)
    ax.add_collection(LineCollection(segments, colors=_OUTLINE, linewidths=4.2, zorder=3,
                                     capstyle="round"))  # casing
    lines = LineCollection(segments, array=sigma, cmap="RdBu_r", norm=Normalize(-extent, extent),
                           linewidths=3.0, zorder=4, capstyle="round")
    ax.add_collection(lines)
    ax.autoscale_view()
    bar = fig.colorbar(lines, ax=ax, shrink=0.85, extend=extend)
    bar.set_label("σ_b (µC/m²)")
    ax.set_title(f"Bound surface charge density\nsigma_b = P·n (n out of each dielectric){clip_note}",
                 fontsize=10)
    return _save(fig, path)
