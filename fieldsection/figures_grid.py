"""Pixel-exact maps for the figures: a fixed layout whose map axes cover whole PNG pixels, and the mesh
binned onto exactly those pixels.

A map (regions, potential, |E|, loss density) is drawn as one RGBA image with as many pixels as its axes
cover in the PNG, so matplotlib shows it without resampling. Each pixel centre takes the value of the
element it lies in; an element too small to hold a pixel centre adds its value to its centroid's pixel,
and where several values meet in one pixel the largest wins ("max"): the hottest pixel is the hottest
element, whatever the mesh size. Vertex values are interpolated linearly in each element's corner
triangle ("linear"; for P2 the corner values, so the picture stays within the range of the vertex
values and shows no peak of its own). Lengths in mm.

The layout is fixed in pixels (no layout engine): margins for the tick and axis labels, the title
lines above the axes, and room on the right for a colour bar or a legend.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np

#: the largest map axes, in PNG pixels (width, height); the view's scale is set to fit inside
MAX_AXES_PIXELS = (720, 560)
#: a view is never flatter (or narrower) than this height-to-width ratio: very flat sections get room above and below
MIN_VIEW_ASPECT = 0.45
#: the empty margin around the drawn section, as a share of its extent on each side
VIEW_MARGIN = 0.06
#: margins of a map figure in pixels: left (tick and axis labels), bottom, above the axes besides the title, per
#: title line; the title's first line starts TITLE_AT below the figure's top
LEFT, BOTTOM, TOP, TITLE_LINE, TITLE_AT = 92, 58, 18, 20, 8
#: the narrowest map figure in pixels (room for its title lines)
MIN_WIDTH = 820
#: the colour bar beside a map: gap, bar width, and the room for its tick labels and label, in pixels
BAR_GAP, BAR_WIDTH, BAR_LABELS = 22, 20, 100


@dataclass(frozen=True)
class MapLayout:
    """Where a map goes in its figure, all in PNG pixels: ``view`` (x0, x1, y0, y1) in mm is shown in an axes of
    ``nx`` by ``ny`` pixels whose lower-left corner is at (``left``, ``bottom``) of a ``width`` x ``height`` figure."""

    view: tuple[float, float, float, float]
    nx: int
    ny: int
    left: int
    bottom: int
    width: int
    height: int

    def fraction(self, left: float, bottom: float, width: float, height: float) -> list[float]:
        """A rectangle in pixels as figure fractions (for ``Figure.add_axes``)."""
        return [left / self.width, bottom / self.height, width / self.width, height / self.height]

    @property
    def axes_rect(self) -> list[float]:
        return self.fraction(self.left, self.bottom, self.nx, self.ny)

    @property
    def bar_rect(self) -> list[float]:
        """The colour bar: right of the axes, 85 % of its height, centred."""
        return self.fraction(self.left + self.nx + BAR_GAP, self.bottom + 0.075 * self.ny, BAR_WIDTH, 0.85 * self.ny)


def map_layout(bounds: tuple[float, float, float, float], title_lines: int, right: int,
               margin: float = VIEW_MARGIN) -> MapLayout:
    """The layout of a map of ``bounds`` (x0, x1, y0, y1, mm) with ``margin`` around it, ``title_lines`` of title
    above and ``right`` pixels beside it (colour bar or legend)."""
    x0, x1, y0, y1 = bounds
    cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    w, h = (x1 - x0) * (1 + 2 * margin), (y1 - y0) * (1 + 2 * margin)
    if not (w > 0 or h > 0):
        w = h = 1.0
    w, h = max(w, MIN_VIEW_ASPECT * h), max(h, MIN_VIEW_ASPECT * w)
    scale = max(w / MAX_AXES_PIXELS[0], h / MAX_AXES_PIXELS[1])  # mm per pixel
    nx, ny = max(int(round(w / scale)), 1), max(int(round(h / scale)), 1)
    view = (cx - 0.5 * nx * scale, cx + 0.5 * nx * scale, cy - 0.5 * ny * scale, cy + 0.5 * ny * scale)
    width = LEFT + nx + right
    left = LEFT + max(MIN_WIDTH - width, 0) // 2  # a narrow map is centred in the narrowest figure
    height = BOTTOM + ny + TOP + TITLE_LINE * title_lines
    return MapLayout(view, nx, ny, left, BOTTOM, max(width, MIN_WIDTH), height)


class PixelGrid:
    """The mesh binned onto the pixels of a map (see the module docstring); ``image`` gives a map of values.

    Every shown element (the mapped exterior of an open-space circle is never shown) is binned once per
    view and size; the maps of one report share the binning (``pixel_grid``).
    """

    def __init__(self, problem, view: tuple[float, float, float, float], nx: int, ny: int):
        mesh = problem.section.mesh
        shown = ~problem.section.exterior
        self.problem, self.view, self.nx, self.ny = weakref.ref(problem), tuple(view), nx, ny
        x0, x1, y0, y1 = view
        pixel = (x1 - x0) / nx
        self.pixel = pixel
        xy = mesh.p[:, : mesh.nvertices] * 1e3
        corners = xy[:, mesh.t]  # (2, 3, nelements)
        low, high = corners.min(axis=1), corners.max(axis=1)
        elements = np.flatnonzero(shown & (high[0] >= x0) & (low[0] <= x1) & (high[1] >= y0) & (low[1] <= y1))
        # scan lines: each pixel row through an element's bounding box meets the triangle in one span of x
        j_lo = np.clip(np.ceil((low[1, elements] - y0) / pixel - 0.5), 0, ny).astype(np.int64)
        j_hi = np.clip(np.floor((high[1, elements] - y0) / pixel - 0.5), -1, ny - 1).astype(np.int64)
        rows = np.maximum(j_hi - j_lo + 1, 0)
        row_owner = np.repeat(elements, rows)
        j = j_lo.repeat(rows) + np.arange(row_owner.size) - np.repeat(np.cumsum(rows) - rows, rows)
        y = y0 + (j + 0.5) * pixel
        cx, cy = corners[0][:, row_owner], corners[1][:, row_owner]  # (3, rows)
        left, right = np.full(y.shape, np.inf), np.full(y.shape, -np.inf)
        for a, b in ((0, 1), (1, 2), (2, 0)):
            ya, yb = cy[a], cy[b]
            rise = yb - ya
            crosses = (np.minimum(ya, yb) <= y) & (y <= np.maximum(ya, yb)) & (rise != 0)
            x = cx[a] + (y - ya) / np.where(rise != 0, rise, 1.0) * (cx[b] - cx[a])
            left = np.where(crosses, np.minimum(left, x), left)
            right = np.where(crosses, np.maximum(right, x), right)
        i_lo = np.clip(np.ceil((left - x0) / pixel - 0.5 - 1e-9), 0, nx).astype(np.int64)
        i_hi = np.clip(np.floor((right - x0) / pixel - 0.5 + 1e-9), -1, nx - 1).astype(np.int64)
        span = np.maximum(i_hi - i_lo + 1, 0)
        self._element = row_owner.repeat(span)
        i = i_lo.repeat(span) + np.arange(self._element.size) - np.repeat(np.cumsum(span) - span, span)
        self._i, self._j = i, j.repeat(span)
        self._pixel = self._j * nx + i
        # a pixel centre on a side shared by two elements is held by both: the larger value is taken there
        self._shared = np.bincount(self._pixel, minlength=nx * ny)[self._pixel] > 1
        held = np.zeros(mesh.nelements, dtype=bool)
        held[self._element] = True
        tiny = elements[~held[elements]]  # elements holding no pixel centre: their centroid's pixel
        centre = corners[:, :, tiny].mean(axis=1)
        inside_view = (centre[0] >= x0) & (centre[0] < x1) & (centre[1] >= y0) & (centre[1] < y1)
        tiny, centre = tiny[inside_view], centre[:, inside_view]
        ci = np.clip(((centre[0] - x0) / pixel).astype(np.int64), 0, nx - 1)
        cj = np.clip(((centre[1] - y0) / pixel).astype(np.int64), 0, ny - 1)
        self._tiny, self._tiny_pixel = tiny, cj * nx + ci
        self._t = mesh.t
        self._corners = corners

    def image(self, values: np.ndarray, how: str = "max", only: np.ndarray | None = None) -> np.ndarray:
        """Per element ``values`` ("max"), or per vertex values interpolated linearly ("linear"), over the
        elements where ``only`` (per element) is true (all shown ones by default): an (ny, nx) array, row 0 at
        the bottom, NaN where no such element is."""
        flat = np.full(self.nx * self.ny, np.nan)
        element, pixel, shared = self._element, self._pixel, self._shared
        tiny, tiny_pixel = self._tiny, self._tiny_pixel
        keep = None if only is None else only[element]
        if only is not None:
            element, pixel, shared = element[keep], pixel[keep], shared[keep]
            tiny, tiny_pixel = tiny[only[tiny]], tiny_pixel[only[tiny]]
        if how == "linear":  # each element's plane through its corner values, at the pixel centres it holds
            x, y = self._corners
            v = values[self._t]  # (3, nelements)
            dx1, dy1, dv1 = x[1] - x[0], y[1] - y[0], v[1] - v[0]
            dx2, dy2, dv2 = x[2] - x[0], y[2] - y[0], v[2] - v[0]
            det = dx1 * dy2 - dx2 * dy1
            with np.errstate(divide="ignore", invalid="ignore"):  # (degenerate elements hold no pixel centre)
                slope_x, slope_y = (dv1 * dy2 - dv2 * dy1) / det, (dx1 * dv2 - dx2 * dv1) / det
            x0, _, y0, _ = self.view
            i, j = (self._i, self._j) if keep is None else (self._i[keep], self._j[keep])
            px, py = x0 + (i + 0.5) * self.pixel, y0 + (j + 0.5) * self.pixel
            flat[pixel] = (v[0, element] + slope_x[element] * (px - x[0, element])
                           + slope_y[element] * (py - y[0, element]))
            np.fmax.at(flat, tiny_pixel, v[:, tiny].max(axis=0))  # an element too small for a pixel: its top
        else:  # the largest value wins in each pixel (fmax: NaN, no value yet, loses to any number)
            v = values[element]
            flat[pixel[~shared]] = v[~shared]
            np.fmax.at(flat, pixel[shared], v[shared])
            np.fmax.at(flat, tiny_pixel, values[tiny])
        return flat.reshape(self.ny, self.nx)

    def segment_pixels(self, segments: np.ndarray) -> np.ndarray:
        """Flat indices of the pixels that ``segments`` (n, 2 ends, 2 coordinates; mm) pass through, sampled at
        half a pixel along each."""
        x0, _, y0, _ = self.view
        ends = (segments - np.array([x0, y0])) / self.pixel  # in pixels
        length = np.hypot(*(ends[:, 1] - ends[:, 0]).T)
        count = np.ceil(2 * length).astype(np.int64) + 1
        owner = np.repeat(np.arange(len(segments)), count)
        step = np.arange(owner.size) - np.repeat(np.cumsum(count) - count, count)
        t = step / np.maximum(count[owner] - 1, 1)
        points = ends[owner, 0] + t[:, None] * (ends[owner, 1] - ends[owner, 0])
        i, j = np.floor(points[:, 0]).astype(np.int64), np.floor(points[:, 1]).astype(np.int64)
        keep = (i >= 0) & (i < self.nx) & (j >= 0) & (j < self.ny)
        passed = np.zeros(self.nx * self.ny, dtype=bool)
        passed[j[keep] * self.nx + i[keep]] = True
        return np.flatnonzero(passed)


_GRIDS: list[PixelGrid] = []  # of the last model drawn: the maps of a report share them


def pixel_grid(problem, layout: MapLayout) -> PixelGrid:
    """The binning of ``problem`` onto ``layout``'s pixels, made once per model, view and size."""
    if any(g.problem() is not problem for g in _GRIDS):
        _GRIDS.clear()  # another model: the old binnings are of no further use
    key = (layout.view, layout.nx, layout.ny)
    found = next((g for g in _GRIDS if (g.view, g.nx, g.ny) == key), None)
    if found is None:
        found = PixelGrid(problem, layout.view, layout.nx, layout.ny)
        _GRIDS.append(found)
    return found


def forget_grids() -> None:
    """Drop the binnings kept for the maps of the last model (tens of MB for a big mesh)."""
    _GRIDS.clear()
