"""Figure of a probe line (``probes.py``): V, |E| and the share of dielectric strength against the distance
along the line, one panel each, the regions crossed marked. Engineers' units: mm, V or kV, kV/mm, %."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .figures import _save
from .probes import ProbeSamples

_MM = 1e3
_KV_PER_MM = 1e-6


def _region_spans(samples: ProbeSamples) -> list[tuple[str, float, float]]:
    """(region, first distance, last distance) of each run of samples in one region, in mm."""
    region = np.asarray(samples.region, dtype=object)
    change = np.flatnonzero(region[1:] != region[:-1]) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [len(region)]]) - 1
    d = samples.distance * _MM
    # a run's edges halfway between its first (last) sample and the previous (next) run's
    left = np.where(starts > 0, 0.5 * (d[starts] + d[np.maximum(starts - 1, 0)]), d[starts])
    right = np.where(ends < len(d) - 1, 0.5 * (d[ends] + d[np.minimum(ends + 1, len(d) - 1)]), d[ends])
    return [(str(region[a]), float(l), float(r)) for a, l, r in zip(starts, left, right)]


def _top(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    return float(finite.max()) if finite.size and finite.max() > 0 else 1.0


def plot_probe(samples: ProbeSamples, path: str | os.PathLike, hotspot_fraction: float | None = None) -> Path:
    """Three panels sharing the distance axis: potential, |E| and |E| / strength (with the hotspot threshold)."""
    line = samples.line
    d = samples.distance * _MM
    span = np.nanmax(np.abs(samples.potential)) if np.isfinite(samples.potential).any() else 0.0
    unit, scale = ("kV", 1e-3) if span >= 1e4 else ("V", 1.0)
    fig = Figure(figsize=(8.0, 6.4))
    FigureCanvasAgg(fig)
    fig.subplots_adjust(left=0.1, right=0.97, bottom=0.08, top=0.92, hspace=0.12)  # fixed: no layout pass
    top, middle, bottom = fig.subplots(3, 1, sharex=True)
    top.plot(d, samples.potential * scale, color="#1d4f91", linewidth=1.4)
    top.set_ylabel(f"V ({unit})")
    middle.plot(d, samples.field * _KV_PER_MM, color="#b5431f", linewidth=1.4)
    middle.set_ylabel("|E| (kV/mm)")
    middle.set_ylim(0.0, 1.1 * _top(samples.field * _KV_PER_MM))
    bottom.plot(d, samples.share * 100.0, color="#2f7d32", linewidth=1.4)
    if hotspot_fraction is not None:
        bottom.axhline(100.0 * hotspot_fraction, color="#a00", linestyle="--", linewidth=0.9,
                       label=f"hotspot threshold {100 * hotspot_fraction:.0f} %")
        bottom.legend(fontsize=8, loc="best")
    bottom.set_ylabel("share of strength (%)")
    bottom.set_ylim(0.0, 1.1 * max(_top(samples.share * 100.0), 100.0 * (hotspot_fraction or 0.0)))
    bottom.set_xlim(0.0, float(d[-1]))
    start = ", ".join(f"{v:.4g}" for v in samples.xy[0] * _MM)
    end = ", ".join(f"{v:.4g}" for v in samples.xy[-1] * _MM)
    if line.curve is None:
        bottom.set_xlabel(f"distance from ({start}) mm towards ({end}) mm (mm)")
    else:
        bottom.set_xlabel(f"distance along the curve {line.curve} from ({start}) mm (mm)")
    spans = _region_spans(samples)
    for k, (name, a, b) in enumerate(spans):
        for ax in (top, middle, bottom):
            if k:
                ax.axvline(a, color="0.6", linewidth=0.6, linestyle=":")
        if name and (b - a) > 0.06 * (d[-1] - d[0]):
            top.annotate(name, ((a + b) / 2, 1.0), xycoords=("data", "axes fraction"), ha="center", va="bottom",
                         fontsize=7, color="0.3")
    for ax in (top, middle, bottom):
        ax.grid(True, linewidth=0.4, color="0.85")
    fig.suptitle(f"Probe line {line.name}", fontsize=10)
    return _save(fig, path)
