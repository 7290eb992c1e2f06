"""Figure of the charge-superposition check: the charges along the faces, and V rebuilt from them against
the FE potential along a line (``superposition.py``). Engineers' units: mm, uC/m^2, V or kV."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .charges import ChargeResult
from .figures import DPI, _save
from .problem import AssembledProblem
from .superposition import SuperpositionCheck

_MM = 1e3
_UC_PER_M2 = 1e6
#: faces named in the legend at most (the rest are drawn in grey)
MAX_NAMED_FACES = 10


def _position(points: np.ndarray) -> np.ndarray:
    """Where each point (n, 2) of a face lies along it, 0 to 1: the polar angle about the centroid for a face
    that wraps around it (a closed curve), else the distance along the face's main direction."""
    centre = points.mean(axis=0)
    angle = np.arctan2(points[:, 1] - centre[1], points[:, 0] - centre[0])
    gaps = np.diff(np.sort(angle), append=np.sort(angle)[:1] + 2 * np.pi) if len(angle) else np.zeros(0)
    if len(angle) > 2 and gaps.max() < np.pi / 2:
        return (angle + np.pi) / (2 * np.pi)
    _, _, axes = np.linalg.svd(points - centre, full_matrices=False)
    along = (points - centre) @ axes[0]
    return (along - along.min()) / (np.ptp(along) or 1.0)


def plot_superposition(problem: AssembledProblem, charges: ChargeResult, check: SuperpositionCheck,
                       path: str | os.PathLike) -> Path:
    """Left: free (electrode faces) and bound (material faces) surface charge density at each facet's midpoint,
    against the polar angle about the face's centroid. Right: V rebuilt from the charges and the FE potential
    along the check's line (and the gap between them)."""
    mesh = problem.section.mesh
    fig = Figure(figsize=(11, 4.2))
    FigureCanvasAgg(fig)
    # fixed margins (room for the right panel's second axis): a layout pass costs more than the drawing
    fig.subplots_adjust(left=0.08, right=0.925, bottom=0.13, top=0.88, wspace=0.32)
    left, right = fig.subplots(1, 2)
    for ax in (left, right):  # fewer ticks: each is a handful of artists and a text to lay out
        ax.locator_params(nbins=6)

    faces = [(f"free, {c.name}", c.sides.facets, c.sigma_f, "o") for c in charges.conductors if c.sides.facets.size]
    faces += [(f"bound, {i.region_a} | {i.region_b}", i.facets, i.sigma_b, ".") for i in charges.interfaces
              if i.facets.size]
    faces.sort(key=lambda f: -float(np.abs(f[2]).max()))
    for k, (label, facets, sigma, marker) in enumerate(faces):
        middle = mesh.p[:, mesh.facets[:, facets]].mean(axis=1).T
        named = k < MAX_NAMED_FACES
        left.plot(_position(middle), sigma.mean(axis=1) * _UC_PER_M2, marker, markersize=2.5, linestyle="none",
                  label=label if named else None, color=None if named else "0.6")
    left.axhline(0.0, color="0.3", linewidth=0.6)
    left.set_xlabel("position along the face, 0 to 1 (closed: angle / 360 deg)")
    left.set_ylabel("surface charge density (uC/m²)")
    left.set_title("Charges along the faces", fontsize=10, y=1.0, pad=16)  # a fixed y: no search for room above
    if faces:
        left.legend(fontsize=7, loc="upper right", markerscale=3)  # ("best" would test every point of every face)

    unit, scale = ("kV", 1e-3) if check.potential_span >= 1e4 else ("V", 1.0)
    if check.checked and len(check.line_points):
        direction = (check.line[1] - check.line[0]) / np.hypot(*(check.line[1] - check.line[0]))
        x = (check.line_points - check.line[0]) @ direction * _MM
        # break the lines where the line leaves the insulation or passes close to a face (no points there)
        step = np.diff(x)
        cut = np.flatnonzero(step > 1.5 * np.median(step)) + 1 if step.size else np.zeros(0, dtype=int)
        xs = np.insert(x, cut, np.nan)
        right.plot(xs, np.insert(check.line_fe * scale, cut, np.nan), "-", color="#1d4f91", linewidth=1.6,
                   label="FE potential")
        right.plot(x, check.line_rebuilt * scale, ".", color="#b5431f", markersize=3,
                   label="rebuilt from the charges")
        gap = right.twinx()
        gap.plot(xs, np.insert(np.abs(check.line_rebuilt - check.line_fe) / check.potential_span, cut, np.nan),
                 color="0.45", linewidth=0.8)
        gap.set_ylabel("|rebuilt - FE| / span of V", color="0.35")
        gap.ticklabel_format(axis="y", style="sci", scilimits=(-2, 2))
        start = ", ".join(f"{v:.4g}" for v in check.line[0] * _MM)
        end = ", ".join(f"{v:.4g}" for v in check.line[1] * _MM)
        right.set_xlabel(f"distance along the line ({start}) -> ({end}) mm (mm)")
        right.set_ylabel(f"potential ({unit})")
        right.legend(fontsize=8, loc="best")
        title = f"Largest relative difference {check.largest_relative_difference:.2e} (all probes)"
    else:
        right.set_axis_off()
        title = "Superposition check: " + (check.note if not check.checked else "no line point clear of the faces")
        right.text(0.5, 0.5, title, ha="center", va="center", wrap=True, fontsize=9, transform=right.transAxes)
    right.set_title(title, fontsize=10, y=1.0, pad=16)  # above the second axis's exponent
    fig.set_dpi(DPI)
    return _save(fig, path)
