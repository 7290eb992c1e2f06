"""How big a mesh may be: an estimate of the node count before meshing, and the machine's limit.

A mistyped size ("1 nm" on a centimetre model) asks gmsh for about 1e14 nodes: it would run until
killed or until memory is gone. Before meshing, the node count is estimated from the geometry's
surface areas and curve lengths and the sizes asked for, and a mesh above the limit is refused.

The estimate is a lower bound wherever it can be, so that a model that fits is never refused:
an equilateral triangulation of area A with edge h has about 2 A / (sqrt(3) h^2) nodes, and every
size the case or the script asks for is an upper bound on the local element size (gmsh takes the
smallest size that applies), so each gives a lower bound on the nodes of its surface or curve.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import MeshError
from .limits import machine_memory

#: nodes per unit area of an equilateral triangulation with unit edge: 2 / sqrt(3)
NODES_PER_AREA = 2.0 / math.sqrt(3.0)
#: memory per mesh vertex and per (element order)^2 that a run needs at its peak (meshing, assembly,
#: factorisation): about 1.3 kB per vertex at P1 and 8.4 GiB for P2 on a million vertices, measured on
#: this project's benchmark models (benchmarks/README.md), rounded up
BYTES_PER_NODE_AND_ORDER2 = 2_000
#: share of the machine's memory that one run may plan to use
MEMORY_SHARE = 0.6


@dataclass(frozen=True)
class SurfaceSizing:
    """One surface: its area (m^2) and the largest element size any setting allows in it (m; inf if none)."""

    name: str
    area: float
    largest_size: float


@dataclass(frozen=True)
class CurveSizing:
    """One curve: its length (m) and the largest element size allowed along it (m; inf if none)."""

    name: str
    length: float
    largest_size: float


@dataclass(frozen=True)
class NodeEstimate:
    nodes: float
    culprit: str  # the surface or curve that contributes most, with its size

    def __str__(self) -> str:
        return f"about {self.nodes:.2g} nodes ({self.culprit})"


def estimate_nodes(surfaces: list[SurfaceSizing], curves: list[CurveSizing]) -> NodeEstimate:
    """A lower-bound estimate of the mesh's node count: the larger of the surfaces' and the curves' sums."""
    surface_nodes = [(NODES_PER_AREA * s.area / s.largest_size**2 if math.isfinite(s.largest_size) else 0.0, s)
                     for s in surfaces]
    curve_nodes = [(c.length / c.largest_size if math.isfinite(c.largest_size) else 0.0, c) for c in curves]
    in_surfaces = sum(n for n, _ in surface_nodes)
    on_curves = sum(n for n, _ in curve_nodes)
    if in_surfaces >= on_curves:
        count, worst = max(surface_nodes, key=lambda item: item[0], default=(0.0, None))
        if worst is None:
            return NodeEstimate(0.0, "no surface")
        culprit = (f"most in surface {worst.name!r}: {worst.area * 1e6:.3g} mm^2 at element size "
                   f"{worst.largest_size * 1e3:.3g} mm")
        return NodeEstimate(in_surfaces, culprit)
    count, worst = max(curve_nodes, key=lambda item: item[0])
    culprit = (f"most on curve {worst.name}: {worst.length * 1e3:.3g} mm long at element size "
               f"{worst.largest_size * 1e3:.3g} mm")
    return NodeEstimate(on_curves, culprit)


def default_node_limit(element_order: int) -> int:
    """The largest mesh (vertices) a run plans for on this machine at ``element_order``."""
    return int(MEMORY_SHARE * machine_memory() / (BYTES_PER_NODE_AND_ORDER2 * element_order**2))


def refuse_if_too_big(estimate: NodeEstimate, limit: int, explicit: bool) -> None:
    """Raise MeshError when ``estimate`` exceeds ``limit``; ``explicit``: the limit was set by the user."""
    if estimate.nodes <= limit:
        return
    origin = "the limit set" if explicit else "this machine's limit, from its memory,"
    raise MeshError(
        f"the mesh would have {estimate}, above {origin} of {limit:.3g} nodes; check the length unit and "
        "coarsen the mesh sizes (case [mesh] or the script's own), or raise the limit with --max-nodes"
    )
