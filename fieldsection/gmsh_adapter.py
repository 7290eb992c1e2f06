"""The only module that talks to gmsh (and to pygmsh, which drives gmsh).

It loads a geometry (a screened ``.geo`` script or a pygmsh builder), applies mesh sizes,
meshes in 2D and returns plain numpy arrays with the named physical groups. No files are
written: the arrays are read straight from gmsh's API.

gmsh keeps process-wide state, and after one script with a syntax error its parser rejects
every later script in the same process. So where the platform can fork, each meshing runs in a
short-lived child process and only the arrays (or the error) come back.
"""

from __future__ import annotations

import math
import multiprocessing
import signal
import os
import sys
import time
from contextlib import contextmanager
from functools import partial
from dataclasses import dataclass, field
from typing import Iterator, Mapping

import numpy as np

from .case import MAX_REFINEMENTS, BuilderGeometry, MeshSettings, ScriptGeometry
from .errors import GeometryError, MeshError
from .forked import fork_child, reap
from .geometry import screen_script
from .mesh_budget import CurveSizing, NodeEstimate, SurfaceSizing, default_node_limit, estimate_nodes, refuse_if_too_big
from .limits import anonymous_memory, current_gmsh_limits, machine_memory
from .local_refinement import CurveShape
from .splitting import Snap, split_into_four, with_mid_edge_nodes

try:  # gmsh's module (its library: ~0.15 s to load) loaded once here, so that every meshing child inherits it
    import gmsh as _gmsh_loaded  # noqa: F401  (gmsh's state stays in the children: nothing is initialised here)
except Exception:  # noqa: BLE001 - the meshing child imports it again and reports what fails
    pass

#: seconds gmsh may take to read a script and mesh it before it is stopped (a mistyped size can ask for
#: billions of elements, a script can loop for ever); ``limits.gmsh_limits`` and ``--time-limit`` override it
MESHING_TIME_LIMIT = 3600.0
#: two curves that share no point must stay at least this share of the geometry's extent apart
NARROWEST_RELATIVE_GAP = 1e-6
#: share of the machine's memory gmsh may take for itself before it is stopped; ``limits.gmsh_limits`` overrides it
MESHING_MEMORY_SHARE = 0.75
_WATCH_SECONDS = 0.2  # how often the parent checks the child's time and memory
#: smallest mesh size accepted, as a share of the geometry's extent
SMALLEST_RELATIVE_SIZE = 1e-7
#: with ``refinements`` left to the tool: a mesh predicted above this many nodes is meshed coarser and split
#: (gmsh meshes ~15 000 nodes per second; splitting a million nodes takes under a second)
AUTO_SPLIT_ABOVE = 100_000
#: ... so that gmsh meshes about this many nodes
AUTO_COARSE_NODES = 25_000
_PROBE_SPLITS = 3  # the automatic choice first meshes 2**3 times coarser, to predict the node count
#: a mesh predicted above this many nodes is refused (a wrong unit or size, not a model to solve here)
AUTO_LARGEST_PREDICTED = 20_000_000

# gmsh element type codes (see gmsh's documentation, "MSH file format")
_LINE2, _TRI3 = 1, 2


@dataclass(frozen=True)
class RawMesh:
    """Arrays as gmsh produced them, converted to SI metres and 0-based node indices.

    ``triangles`` has 3 corner columns, then (for curved meshes) 3 mid-edge columns ordered
    as edges (0,1), (1,2), (2,0). ``surface_groups`` maps a physical surface name to triangle
    rows; ``curve_groups`` maps a physical curve name to its segments' corner node pairs.
    """

    points: np.ndarray
    triangles: np.ndarray
    surface_groups: Mapping[str, np.ndarray]
    curve_groups: Mapping[str, np.ndarray]
    warnings: tuple[str, ...] = field(default=())
    #: nodes at the geometry's corners: ends of open curves and points where two or more curves meet
    corner_nodes: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    splits: int = 0  # how many times every triangle of gmsh's mesh was split into four
    #: the shape of every curved (not straight) geometry curve, by gmsh entity, and its segments (corner node
    #: pairs): what ``local_refinement`` needs to put new nodes on the curves without gmsh
    curve_shapes: Mapping[int, CurveShape] = field(default_factory=dict)
    shaped_segments: Mapping[int, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.points.ndim != 2 or self.points.shape[1] != 2:
            raise MeshError(f"points must have shape (n, 2), got {self.points.shape}")
        if self.triangles.ndim != 2 or self.triangles.shape[1] not in (3, 6):
            raise MeshError(f"triangles must have 3 or 6 columns, got shape {self.triangles.shape}")


@dataclass(frozen=True)
class SizeField:
    """Wanted element size (m) at the vertices of a previous mesh: ``points`` (n, 2) m, ``triangles``
    (k, 3), ``sizes`` (n,) m. gmsh interpolates it linearly inside each triangle."""

    points: np.ndarray
    triangles: np.ndarray
    sizes: np.ndarray


@contextmanager
def _gmsh_session() -> Iterator[object]:
    import gmsh

    if gmsh.isInitialized():  # a builder (pygmsh) already opened the session
        yield gmsh
        return
    gmsh.initialize(interruptible=False)
    try:
        yield gmsh
    finally:
        gmsh.finalize()


def _quiet(gmsh) -> None:
    gmsh.option.setNumber("General.Terminal", 0)
    gmsh.logger.start()


def _forget_messages(gmsh) -> None:
    """Empty gmsh's message log (stopping the logger clears it), and keep logging."""
    gmsh.logger.stop()
    gmsh.logger.start()


def _generate_afresh(gmsh) -> None:
    """Mesh the surfaces from nothing: generate() would keep an existing mesh (a script's own "Mesh 2;", an
    earlier probe's curves)."""
    gmsh.model.mesh.clear()
    gmsh.model.mesh.generate(2)


def _meshing_failed(exc: Exception) -> MeshError:
    return MeshError(f"gmsh could not mesh the geometry: {exc}; check for overlapping or open curves")


def _gmsh_messages(gmsh, level: str, earlier: list[str] | tuple[str, ...] = ()) -> list[str]:
    return [m.split(":", 1)[1].strip() for m in [*earlier, *gmsh.logger.get()] if m.startswith(level + ":")]


def mesh_geometry(
    geometry: ScriptGeometry | BuilderGeometry,
    settings: MeshSettings,
    electrode_names: frozenset[str] = frozenset(),
    size_field: SizeField | None = None,
) -> RawMesh:
    """Load ``geometry`` into gmsh, mesh it in 2D and return the arrays.

    ``size_field`` (from adaptive refinement) adds wanted sizes; the smallest size asked for wins.
    """
    return _isolated(_mesh_here, geometry, settings, electrode_names, size_field)


def mesh_disc(boundary: np.ndarray, centre: np.ndarray, closed: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Triangulate the disc (or sector) bounded by the ordered arc ``boundary`` (n, 2) about ``centre``.

    ``closed``: the arc is a full circle and ``centre`` an interior node; otherwise the sector is closed
    by two straight spokes from the arc's last point to the centre and from the centre to its first.
    Returns ``points`` (m, 2), whose first n rows are exactly ``boundary`` and row n is ``centre``,
    and ``triangles`` (k, 3). No node is added on the arc; sizes grow from the arc towards the centre.
    """
    return _isolated(_disc_here, np.asarray(boundary, dtype=float), np.asarray(centre, dtype=float), closed)


def _isolated(work, *args):
    """Run ``work(*args)`` in a forked child (see the module docstring); return its value or raise its error.

    The child is stopped when it runs longer than the time limit or takes more memory than the memory
    limit (``limits.gmsh_limits``, else ``MESHING_TIME_LIMIT`` and ``MESHING_MEMORY_SHARE``).
    """
    if sys.platform != "linux":  # no safe fork: run in this process, unbounded
        return work(*args)
    limits = current_gmsh_limits()
    seconds = limits.seconds or MESHING_TIME_LIMIT
    memory = limits.memory_bytes or int(MESHING_MEMORY_SHARE * machine_memory())
    share = "" if limits.memory_bytes else f" ({MESHING_MEMORY_SHARE:.0%} of this machine's)"
    receiver, sender = multiprocessing.Pipe(duplex=False)
    inherited = anonymous_memory(os.getpid())  # the child's memory at the fork, not its own doing
    deadline = time.monotonic() + seconds
    child = fork_child(partial(_child, sender, work, args), receiver)
    sender.close()
    try:
        while not receiver.poll(max(0.0, min(_WATCH_SECONDS, deadline - time.monotonic()))):
            if time.monotonic() >= deadline:
                raise MeshError(
                    f"gmsh (reading the geometry script and meshing) ran longer than the time limit of "
                    f"{seconds:g} s and was stopped; look for an endless loop in the script or coarsen the mesh "
                    "sizes, or raise the limit with --time-limit SECONDS")
            used = anonymous_memory(child) - inherited
            if used > memory:
                raise MeshError(
                    f"gmsh (reading the geometry script and meshing) took {used / 2**30:.2f} GiB of memory, over "
                    f"the limit of {memory / 2**30:.2f} GiB{share}, and was stopped; coarsen the mesh sizes or "
                    "look for huge lists in the script")
        status, payload = receiver.recv()
    except EOFError:
        code = reap(child)
        cause = f"killed by signal {-code}" if code is not None and code < 0 else f"exit code {code}"
        if code == -9:
            cause += ", probably for lack of memory"
        raise MeshError(
            f"gmsh stopped unexpectedly ({cause}) while reading the geometry script or meshing; coarsen the mesh "
            "sizes, simplify the geometry, or check the script in gmsh's own window") from None
    except BaseException:  # a limit passed, or the user interrupted: stop the child first
        os.kill(child, signal.SIGKILL)
        reap(child)
        raise
    finally:
        receiver.close()
    reap(child)
    if status == "error":
        raise payload
    return payload


def _child(sender, work, args) -> None:
    """In the forked child (``forked.fork_child``: no Ctrl-C, dies with its parent): sends ``work(*args)``'s outcome."""
    try:
        sender.send(("ok", work(*args)))
    except (GeometryError, MeshError) as exc:
        sender.send(("error", exc))
    except MemoryError:
        sender.send(("error", MeshError("gmsh ran out of memory while reading the geometry script or meshing; "
                                        "coarsen the mesh sizes or look for huge lists in the script")))
    except BaseException as exc:  # anything else from gmsh or a builder, as a readable error
        sender.send(("error", MeshError(f"meshing failed: {type(exc).__name__}: {exc}")))
    finally:
        sender.close()


def _mesh_here(
    geometry: ScriptGeometry | BuilderGeometry,
    settings: MeshSettings,
    electrode_names: frozenset[str],
    size_field: SizeField | None = None,
) -> RawMesh:
    if isinstance(geometry, ScriptGeometry):
        declared = screen_script(geometry.path, geometry.trusted)
        undeclared = sorted(set(geometry.parameters) - declared)
        if undeclared:
            raise GeometryError(
                f"geometry parameter {undeclared[0]!r} is not declared in {geometry.path.name}; declare it "
                f"there as DefineConstant[ {undeclared[0]} = <default> ]; so the case can set it"
            )
        with _gmsh_session() as gmsh:
            _quiet(gmsh)
            gmsh.model.add("section")
            for name, value in geometry.parameters.items():
                gmsh.parser.setNumber(name, [float(value)])
            try:
                gmsh.merge(str(geometry.path))
            except Exception as exc:  # gmsh raises a bare Exception carrying its own message
                raise GeometryError(f"gmsh could not read the geometry script: {exc}; fix the script") from None
            errors = _gmsh_messages(gmsh, "Error")
            if errors:
                raise GeometryError(f"gmsh reported an error in the geometry script: {errors[0]}; fix the script")
            return _mesh_current_model(gmsh, settings, geometry.length_unit_m, electrode_names, size_field)
    if isinstance(geometry, BuilderGeometry):
        import pygmsh

        with pygmsh.geo.Geometry() as geom:
            import gmsh

            _quiet(gmsh)
            try:
                geometry.build(geom)
            except Exception as exc:
                raise GeometryError(f"the geometry builder failed: {type(exc).__name__}: {exc}") from exc
            _commit_pygmsh_queues(gmsh, geom)
            return _mesh_current_model(gmsh, settings, geometry.length_unit_m, electrode_names, size_field)
    raise TypeError(f"unsupported geometry source {type(geometry).__name__}")


def _disc_here(boundary: np.ndarray, centre: np.ndarray, closed: bool) -> tuple[np.ndarray, np.ndarray]:
    n = len(boundary)
    spacing = np.hypot(*np.diff(boundary, axis=0, append=boundary[:1]).T)
    if not closed:
        spacing[-1] = spacing[-2]  # the last point has no arc neighbour after it
    local = 0.5 * (spacing + np.roll(spacing, 1))
    radius = float(np.hypot(*(boundary - centre).T).mean())
    with _gmsh_session() as gmsh:
        _quiet(gmsh)
        gmsh.model.add("exterior")
        geo = gmsh.model.geo
        # gmsh's API adds points and curves one at a time: these loops run over the rim only
        tags = [geo.addPoint(x, y, 0.0, float(h)) for (x, y), h in zip(boundary, local)]
        middle = geo.addPoint(float(centre[0]), float(centre[1]), 0.0, float(local.mean()))
        arc = [geo.addLine(tags[k], tags[k + 1]) for k in range(n - 1)]
        lines = arc + ([geo.addLine(tags[-1], tags[0])] if closed else [geo.addLine(tags[-1], middle),
                                                                       geo.addLine(middle, tags[0])])
        surface = geo.addPlaneSurface([geo.addCurveLoop(lines)])
        geo.synchronize()
        for line in lines[: n if closed else n - 1]:  # keep the arc's nodes exactly those given
            gmsh.model.mesh.setTransfiniteCurve(line, 2)
        if closed:
            gmsh.model.mesh.embed(0, [middle], 2, surface)
        try:
            gmsh.model.mesh.generate(2)
        except Exception as exc:
            raise MeshError(f"gmsh could not mesh the open-space disc: {exc}") from None
        node_tags, coords, _ = gmsh.model.mesh.getNodes()
        node_tags = node_tags.astype(np.int64)
        coords = coords.reshape(-1, 3)[:, :2]
        index_of = np.full(node_tags.max() + 1, -1, dtype=np.int64)
        # boundary points first, then the centre, then the interior nodes in gmsh's order
        from scipy.spatial import cKDTree

        gap, nearest = cKDTree(coords).query(np.vstack([boundary, centre]))
        if gap.max() > 1e-9 * radius:
            raise MeshError("gmsh moved a node of the open-space circle; report this as a bug")
        fixed = node_tags[nearest]
        rest = np.setdiff1d(node_tags, fixed)
        index_of[fixed] = np.arange(fixed.size)
        index_of[rest] = fixed.size + np.arange(rest.size)
        points = np.zeros((node_tags.size, 2))
        points[index_of[node_tags]] = coords
        points[:n] = boundary  # exact, not gmsh's rounding
        _, element_nodes = gmsh.model.mesh.getElementsByType(_TRI3, surface)
        triangles = index_of[element_nodes.astype(np.int64)].reshape(-1, 3)
    return points, triangles


def _commit_pygmsh_queues(gmsh, geom) -> None:
    """Do what pygmsh does before meshing: synchronise and create the queued groups and sizes."""
    geom.synchronize()
    for item in geom._AFTER_SYNC_QUEUE:
        item.exec()
    for item, host in geom._EMBED_QUEUE:
        gmsh.model.mesh.embed(item.dim, [item._id], host.dim, host._id)
    for item, size in geom._SIZE_QUEUE:
        gmsh.model.mesh.setSize(gmsh.model.getBoundary(item.dim_tags, False, False, True), size)
    for entities, label in geom._PHYSICAL_QUEUE:
        if label is None:
            raise GeometryError("the geometry builder added a physical group without a label; name every group")
        tag = gmsh.model.addPhysicalGroup(entities[0].dim, [e._id for e in entities])
        gmsh.model.setPhysicalName(entities[0].dim, tag, label)


def _physical_groups(gmsh, dim: int) -> dict[str, list[int]]:
    groups: dict[str, list[int]] = {}
    for _, tag in gmsh.model.getPhysicalGroups(dim):
        name = gmsh.model.getPhysicalName(dim, tag)
        if not name:
            kind = "Surface" if dim == 2 else "Curve" if dim == 1 else "Point"
            raise GeometryError(
                f"physical {kind.lower()} group {tag} has no name; name it, e.g. Physical {kind}(\"my_name\") = {{...}};"
            )
        if name in groups:
            raise GeometryError(f"physical group name {name!r} is used twice for dimension {dim}; rename one")
        groups[name] = [int(e) for e in gmsh.model.getEntitiesForPhysicalGroup(dim, tag)]
    return groups


def _apply_sizes(gmsh, settings: MeshSettings, scale: float, surfaces: dict, curves: dict, electrodes,
                 size_field: SizeField | None = None) -> None:
    """Translate the case's mesh sizes (metres) into gmsh options and size fields."""
    xmin, ymin, _, xmax, ymax, _ = gmsh.model.getBoundingBox(-1, -1)
    extent = max(xmax - xmin, ymax - ymin) * scale
    sizes = {"mesh.size": settings.size, "mesh.near_electrodes": settings.near_electrodes,
             **{f"mesh.region_sizes.{k}": v for k, v in settings.region_sizes.items()}}
    for label, size in sizes.items():
        if size is not None and size < SMALLEST_RELATIVE_SIZE * extent:
            raise MeshError(f"{label} = {size * 1e3:.3g} mm is below {SMALLEST_RELATIVE_SIZE:g} of the geometry's "
                            f"extent ({extent * 1e3:.4g} mm); check the unit")
    if settings.size is not None:
        gmsh.option.setNumber("Mesh.MeshSizeMax", settings.size / scale)
    fields: list[int] = []
    for region, size in settings.region_sizes.items():
        if region not in surfaces:
            hint = " (it is a curve: use mesh.near_electrodes for electrode surfaces)" if region in curves else ""
            raise GeometryError(
                f"mesh.region_sizes names {region!r}, which is not a physical surface of the geometry{hint}; "
                f"known surfaces: {', '.join(sorted(surfaces)) or 'none'}"
            )
        fid = gmsh.model.mesh.field.add("Constant")
        gmsh.model.mesh.field.setNumbers(fid, "SurfacesList", surfaces[region])
        gmsh.model.mesh.field.setNumber(fid, "VIn", size / scale)
        gmsh.model.mesh.field.setNumber(fid, "IncludeBoundary", 1)
        fields.append(fid)
    if settings.near_electrodes is not None and electrodes:
        electrode_curves: set[int] = set()
        for name in electrodes:
            if name in curves:
                electrode_curves.update(curves[name])
            elif name in surfaces:
                for _, tag in gmsh.model.getBoundary([(2, s) for s in surfaces[name]], False, False, False):
                    electrode_curves.add(abs(tag))
        near = settings.near_electrodes / scale
        far = (settings.size / scale) if settings.size is not None else 10 * near
        distance = gmsh.model.mesh.field.add("Distance")
        gmsh.model.mesh.field.setNumbers(distance, "CurvesList", sorted(electrode_curves))
        gmsh.model.mesh.field.setNumber(distance, "Sampling", 200)
        threshold = gmsh.model.mesh.field.add("Threshold")
        gmsh.model.mesh.field.setNumber(threshold, "InField", distance)
        gmsh.model.mesh.field.setNumber(threshold, "SizeMin", near)
        gmsh.model.mesh.field.setNumber(threshold, "SizeMax", max(far, near))
        gmsh.model.mesh.field.setNumber(threshold, "DistMin", near)
        gmsh.model.mesh.field.setNumber(threshold, "DistMax", max(far, near) * 4)
        fields.append(threshold)
    if size_field is not None:
        corners = size_field.points[size_field.triangles] / scale  # (k, 3, 2), script units
        data = np.concatenate([corners[..., 0], corners[..., 1], np.zeros((len(corners), 3)),
                               size_field.sizes[size_field.triangles] / scale], axis=1)
        view = gmsh.view.add("wanted sizes")
        gmsh.view.addListData(view, "ST", len(corners), data.ravel())
        fid = gmsh.model.mesh.field.add("PostView")
        gmsh.model.mesh.field.setNumber(fid, "ViewTag", view)
        fields.append(fid)
    if fields:
        combined = gmsh.model.mesh.field.add("Min")
        gmsh.model.mesh.field.setNumbers(combined, "FieldsList", fields)
        gmsh.model.mesh.field.setAsBackgroundMesh(combined)


def _node_estimate(gmsh, settings: MeshSettings, scale: float, surfaces: dict, curves: dict,
                   electrode_names) -> NodeEstimate:
    """Areas, lengths and the largest element size each may have, read from the loaded model (before meshing).

    Loops run over the geometry's surfaces and curves (tens to hundreds), never over mesh entities.
    """
    factor = gmsh.option.getNumber("Mesh.MeshSizeFactor")
    smallest = gmsh.option.getNumber("Mesh.MeshSizeMin")
    largest = gmsh.option.getNumber("Mesh.MeshSizeMax")  # includes the case's mesh.size
    from_points = gmsh.option.getNumber("Mesh.MeshSizeFromPoints") == 1
    extend = gmsh.option.getNumber("Mesh.MeshSizeExtendFromBoundary") == 1

    def in_metres(size: float) -> float:
        size = max(size, smallest)  # gmsh's smallest size overrides every other
        return math.inf if size >= 1e21 else size * factor * scale

    point_size: dict[int, float] = {}
    points = [tag for _, tag in gmsh.model.getEntities(0)]
    if points and from_points:
        point_size = dict(zip(points, gmsh.model.mesh.getSizes([(0, t) for t in points])))
    samples = np.linspace(0.0, 1.0, 33)
    shape: dict[int, tuple[float, float, float]] = {}  # curve -> (length, integral of x dy, largest size)
    shape_samples: dict[int, np.ndarray] = {}
    for _, curve in gmsh.model.getEntities(1):
        low, high = gmsh.model.getParametrizationBounds(1, curve)
        xyz = np.asarray(gmsh.model.getValue(1, curve, low[0] + samples * (high[0] - low[0]))).reshape(-1, 3)
        steps = np.diff(xyz[:, :2], axis=0)
        ends = [point_size.get(abs(t), 0.0) for _, t in gmsh.model.getBoundary([(1, curve)], False, False)]
        bound = max(ends) if ends and min(ends) > 0 else math.inf
        x_dy = float(np.sum(0.5 * (xyz[1:, 0] + xyz[:-1, 0]) * steps[:, 1]))
        shape[curve] = (float(np.hypot(*steps.T).sum()), x_dy, min(bound, largest))
        shape_samples[curve] = xyz[:, :2]

    _refuse_near_misses(gmsh, shape_samples, curves, scale)

    surface_sizings = []
    for name, tags in surfaces.items():
        for tag in tags:
            boundary = gmsh.model.getBoundary([(2, tag)], combined=False, oriented=True)
            area = abs(sum(math.copysign(shape[abs(c)][1], c) for _, c in boundary if abs(c) in shape))
            bounds = [shape[abs(c)][2] for _, c in boundary if abs(c) in shape]
            size = min(largest, max(bounds) if bounds and extend else math.inf)
            if name in settings.region_sizes:
                size = min(size, settings.region_sizes[name] / scale)
            surface_sizings.append(SurfaceSizing(name, area * scale**2, in_metres(size)))
    near = settings.near_electrodes
    electrode_curves: dict[int, str] = {}
    for name in electrode_names:
        for tag in curves.get(name, ()):
            electrode_curves[tag] = name
    curve_sizings = []
    for curve, (length, _, size) in shape.items():
        label = f"{curve}" + (f" (electrode {electrode_curves[curve]!r})" if curve in electrode_curves else "")
        if near is not None and curve in electrode_curves:
            size = min(size, near / scale)
        curve_sizings.append(CurveSizing(label, length * scale, in_metres(size)))
    return estimate_nodes(surface_sizings, curve_sizings)


def _refuse_near_misses(gmsh, samples: dict[int, np.ndarray], curves: dict, scale: float) -> None:
    """Refuse two curves that share no point yet come closer than ``NARROWEST_RELATIVE_GAP`` of the extent.

    Electrodes a nanometre apart on a centimetre model, or a sliver of that thickness, cannot be meshed
    with sane elements (gmsh may not even finish). The distance is measured from every sample point of a
    curve to the nearest segments of the other curves' sampled polylines.
    """
    from scipy import sparse
    from scipy.spatial import cKDTree

    tags = np.array(sorted(samples))
    if tags.size < 2:
        return
    counts = np.array([len(samples[t]) for t in tags])
    points = np.concatenate([samples[t] for t in tags])
    owner = np.repeat(tags, counts)
    extent = float(np.ptp(points, axis=0).max())
    if extent <= 0:
        return
    # curve x point incidence; two curves are adjacent when they share an end point
    ends = [[abs(p) for _, p in gmsh.model.getBoundary([(1, int(t))], False, False)] for t in tags]
    rows = np.repeat(np.arange(tags.size), [len(e) for e in ends])
    columns = np.array([p for e in ends for p in e], dtype=np.int64)
    incidence = sparse.csr_matrix((np.ones(rows.size), (rows, columns)), shape=(tags.size, columns.max(initial=0) + 1))
    adjacent = (incidence @ incidence.T).tocsr()
    curve_index = np.searchsorted(tags, owner)  # sample -> row of its curve
    k = min(12, len(points))
    _, near = cKDTree(points).query(points, k=k)
    near = near.reshape(len(points), -1)
    # the segments on either side of each neighbour sample, kept within the neighbour's own curve
    start = np.concatenate([[0], np.cumsum(counts)[:-1]])
    first = np.repeat(start, counts)[near]
    last = np.repeat(start + counts - 1, counts)[near]
    gaps = np.full(near.shape, np.inf)
    for a_index, b_index in ((np.maximum(near - 1, first), near), (near, np.minimum(near + 1, last))):
        a, b = points[a_index], points[b_index]
        d = b - a
        length2 = np.maximum((d**2).sum(-1), 1e-300)
        t = np.clip(((points[:, None, :] - a) * d).sum(-1) / length2, 0.0, 1.0)
        gaps = np.minimum(gaps, np.hypot(*(points[:, None, :] - (a + t[..., None] * d)).transpose(2, 0, 1)))
    other = owner[near] != owner[:, None]
    pairs = np.broadcast_arrays(curve_index[:, None], curve_index[near])
    shared = np.asarray(adjacent[pairs[0].ravel(), pairs[1].ravel()]).reshape(near.shape) > 0
    # curves that touch or overlap without a shared point are the mesh check's to name (unfragmented surfaces)
    gaps = np.where(other & ~shared & (gaps > 1e-9 * extent), gaps, np.inf)
    worst = np.unravel_index(np.argmin(gaps), gaps.shape)
    gap = float(gaps[worst])
    if gap >= NARROWEST_RELATIVE_GAP * extent:
        return
    names = {tag: name for name, members in curves.items() for tag in members}
    pair = [int(owner[worst[0]]), int(owner[near][worst])]
    label = " and ".join(f"curve {t}" + (f" ({names[t]!r})" if t in names else "") for t in pair)
    x, y = points[worst[0]] * scale * 1e3
    raise GeometryError(
        f"{label} come within {gap * scale * 1e3:.3g} mm of each other near ({x:.4g}, {y:.4g}) mm, "
        f"{gap / extent:.1e} of the model's extent, without meeting: no mesh can resolve that gap; check the "
        "coordinates and units, draw the parts apart, or join them at a shared point"
    )


def curve_segments(gmsh, index_of: np.ndarray) -> dict[int, np.ndarray]:
    """The line segments (s, 2) of every curve entity of gmsh's current mesh, as node indices through
    ``index_of`` (gmsh node tag -> index)."""
    out = {}
    for _, entity in gmsh.model.getEntities(1):
        segments = [index_of[enodes.astype(np.int64)].reshape(-1, 2)
                    for etype, enodes in zip(*gmsh.model.mesh.getElements(1, entity)[::2]) if etype == _LINE2]
        out[entity] = np.concatenate(segments) if segments else np.zeros((0, 2), dtype=np.int64)
    return out


def curve_projection(gmsh) -> Snap:
    """Moves edge midpoints onto the curves of gmsh's current model (the ``Snap`` of ``splitting``)."""

    def snap(entity: int, midpoints: np.ndarray, chords: np.ndarray) -> np.ndarray:
        if gmsh.model.getType(1, entity) == "Line":  # the chord's midpoint is exact; gmsh's projection is iterative
            return midpoints
        projected = gmsh.model.getClosestPoint(1, entity, midpoints.ravel())[0].reshape(-1, 3)
        # on a tight bend the nearest point can lie on another stretch of the curve: keep the chord's midpoint
        jumped = np.hypot(*(projected - midpoints)[:, :2].T) > 0.5 * chords
        return np.where(jumped[:, None], midpoints, projected)

    return snap


#: points per curved geometry curve kept for local refinement: a cubic spline through them is within
#: ~1e-12 of the radius of a circular arc (error ~ R (angle step)^4 / 384)
SHAPE_SAMPLES = 1025


def curve_shapes(gmsh, entities, scale: float) -> dict[int, CurveShape]:
    """Each of the curve ``entities`` of gmsh's current model as ``SHAPE_SAMPLES`` points evenly spaced in
    its parameter, in metres (straight lines are left out: their midpoints need no projection)."""
    out = {}
    for entity in entities:
        if gmsh.model.getType(1, entity) == "Line":
            continue
        low, high = gmsh.model.getParametrizationBounds(1, entity)
        xyz = np.asarray(gmsh.model.getValue(1, entity, np.linspace(low[0], high[0], SHAPE_SAMPLES))).reshape(-1, 3)
        out[int(entity)] = CurveShape(np.ascontiguousarray(xyz[:, :2] * scale))
    return out


def _automatic_splits(gmsh) -> tuple[int, list[str], bool]:
    """Choose k for a mesh whose refinements are left to the tool; leaves gmsh's mesh in place if it is the
    coarse mesh for that k, else none. Returns k, gmsh's messages from before the probes (the logger then
    holds only the kept probe's, if any) and whether the last probe's mesh is kept.

    A mesh 2**3 times coarser costs about 1/64 of the final one and predicts its node count (nodes ~ 1/h^2).
    A second probe 2**4 times coarser checks that the mesh follows the size factor at all: transfinite
    curves and surfaces keep their node counts, and splitting those would multiply the mesh by 4**k.
    Above ``AUTO_SPLIT_ABOVE`` predicted nodes, k is chosen so gmsh meshes about ``AUTO_COARSE_NODES``.
    A geometry that gmsh cannot mesh that coarsely is meshed at its final size.
    """
    earlier = gmsh.logger.get()
    own_factor = gmsh.option.getNumber("Mesh.MeshSizeFactor")  # a script's own factor scales everything
    counts = {}
    for probe_splits in (_PROBE_SPLITS + 1, _PROBE_SPLITS):
        _forget_messages(gmsh)  # each probe's messages apart: only the kept probe's may stay
        gmsh.option.setNumber("Mesh.MeshSizeFactor", own_factor * 2.0**probe_splits)
        try:
            _generate_afresh(gmsh)
            failed = bool(_gmsh_messages(gmsh, "Error"))
            counts[probe_splits] = 0 if failed else gmsh.model.mesh.getNodes()[0].size
        except Exception:
            counts[probe_splits] = 0
    probe, coarser = counts[_PROBE_SPLITS], counts[_PROBE_SPLITS + 1]
    predicted = probe * 4**_PROBE_SPLITS
    # ~4x the nodes per halving of the sizes; a transfinite mesh keeps its count (1x)
    follows = probe > 0 and coarser > 0 and probe >= 2.5 * coarser
    splits = 0
    if follows and predicted > AUTO_LARGEST_PREDICTED:
        raise MeshError(f"the mesh would have about {predicted:.2g} nodes; check the length unit and the mesh sizes "
                        "(case [mesh] or the script's own), or set [mesh] refinements to mesh it anyway")
    if follows and predicted > AUTO_SPLIT_ABOVE:
        splits = min(MAX_REFINEMENTS, max(1, round(math.log(predicted / AUTO_COARSE_NODES, 4))))
    if splits == _PROBE_SPLITS:
        return splits, earlier, True  # the last probe is the coarse mesh: it and its messages stay
    gmsh.model.mesh.clear()
    gmsh.option.setNumber("Mesh.MeshSizeFactor", own_factor * 2.0**splits)
    _forget_messages(gmsh)  # the probes' messages (an error, if one failed) are not the model's
    return splits, earlier, False


def _mesh_current_model(gmsh, settings: MeshSettings, scale: float, electrode_names,
                        size_field: SizeField | None = None) -> RawMesh:
    surfaces = _physical_groups(gmsh, 2)
    curves = _physical_groups(gmsh, 1)
    if not gmsh.model.getEntities(2):
        raise GeometryError("the geometry has no surfaces; a cross-section needs at least one Plane Surface")
    grouped = {e for tags in surfaces.values() for e in tags}
    loose = sorted({tag for _, tag in gmsh.model.getEntities(2)} - grouped)
    if loose:
        raise GeometryError(
            f"surface {loose[0]} of the geometry belongs to no physical surface; add it to one, e.g. "
            f"Physical Surface(\"my_region\") = {{{loose[0]}}}; and map it in [regions] (or make it a hole)"
        )
    _apply_sizes(gmsh, settings, scale, surfaces, curves, electrode_names & (set(surfaces) | set(curves)), size_field)
    if size_field is None:  # adaptive passes size their meshes from the DOF budget
        limit = settings.max_nodes or default_node_limit(settings.element_order)
        refuse_if_too_big(_node_estimate(gmsh, settings, scale, surfaces, curves, electrode_names), limit,
                          explicit=settings.max_nodes is not None)
    # linear triangles from gmsh whatever the script asks (Mesh.ElementOrder): curved elements get their
    # mid-edge nodes here, after the splitting, from [mesh] curved
    gmsh.option.setNumber("Mesh.ElementOrder", 1)
    splits, earlier, meshed = settings.refinements, [], False
    if splits is None:
        splits, earlier, meshed = _automatic_splits(gmsh)
    else:  # mesh coarser by 2**k here (on top of a script's own factor), then split into four, k times
        gmsh.option.setNumber("Mesh.MeshSizeFactor", gmsh.option.getNumber("Mesh.MeshSizeFactor") * 2.0**splits)
    if not meshed:
        try:
            _generate_afresh(gmsh)
        except Exception as exc:
            if settings.refinements is not None or splits == 0:
                raise _meshing_failed(exc) from None
    if settings.refinements is None and splits and (_gmsh_messages(gmsh, "Error") or not gmsh.model.mesh.getNodes()[0].size):
        # the tool's own choice to mesh coarser failed: mesh at the final size instead
        gmsh.option.setNumber("Mesh.MeshSizeFactor", gmsh.option.getNumber("Mesh.MeshSizeFactor") / 2.0**splits)
        _forget_messages(gmsh)
        splits = 0
        try:
            _generate_afresh(gmsh)
        except Exception as exc:
            raise _meshing_failed(exc) from None
    errors = _gmsh_messages(gmsh, "Error", earlier)
    if errors:
        raise MeshError(f"gmsh reported a meshing error: {errors[0]}; check the geometry")
    warnings = tuple(_gmsh_messages(gmsh, "Warning", earlier))

    node_tags, coords, _ = gmsh.model.mesh.getNodes()
    node_tags = node_tags.astype(np.int64)
    coords = coords.reshape(-1, 3)
    if coords.size == 0:
        raise MeshError("gmsh produced no nodes; check the mesh sizes")
    extent = np.ptp(coords[:, :2], axis=0).max()
    off_plane = np.abs(coords[:, 2])
    if off_plane.max() > 1e-9 * max(extent, 1.0):
        x, y, z = coords[np.argmax(off_plane)]
        raise GeometryError(f"the geometry is not in the z = 0 plane (a node at ({x:.4g}, {y:.4g}, {z:.4g}) in script "
                            "units); draw the cross-section in x-y")
    index_of = np.full(node_tags.max() + 1, -1, dtype=np.int64)
    index_of[node_tags] = np.arange(node_tags.size)

    tri_blocks: list[np.ndarray] = []
    entity_rows: dict[int, tuple[int, int]] = {}
    start = 0
    for _, entity in gmsh.model.getEntities(2):
        types, _, nodes = gmsh.model.mesh.getElements(2, entity)
        block = np.zeros((0, 3), dtype=np.int64)
        for etype, enodes in zip(types, nodes):
            if etype != _TRI3:
                raise MeshError(
                    f"surface {entity} was meshed with gmsh element type {etype}; only triangles are supported "
                    "(remove Recombine / quadrangle settings from the script)"
                )
            block = index_of[enodes.astype(np.int64)].reshape(-1, 3)
        tri_blocks.append(block)
        entity_rows[entity] = (start, start + len(block))
        start += len(block)
    triangles = np.concatenate(tri_blocks) if tri_blocks else np.zeros((0, 3), dtype=np.int64)
    if len(triangles) == 0:
        raise MeshError("gmsh produced no triangles; check the mesh sizes and the surfaces")
    entity_segments = curve_segments(gmsh, index_of)

    snap_segments = curve_projection(gmsh)
    # splitting in numpy (with gmsh's projection onto the curves) is much cheaper than gmsh's refine
    for _ in range(splits):
        coords, triangles, entity_segments = split_into_four(coords, triangles, entity_segments, snap_segments)
    entity_rows = {e: (a * 4**splits, b * 4**splits) for e, (a, b) in entity_rows.items()}
    shapes = curve_shapes(gmsh, [e for e, segs in entity_segments.items() if len(segs)], scale)
    shaped_segments = {e: entity_segments[e] for e in shapes}
    if settings.curved:
        coords, triangles = with_mid_edge_nodes(coords, triangles, entity_segments, snap_segments)

    surface_groups = {
        name: np.concatenate([np.arange(*entity_rows[e]) for e in tags]) if tags else np.zeros(0, dtype=np.int64)
        for name, tags in surfaces.items()
    }
    curve_groups = {name: np.concatenate([entity_segments[e] for e in tags]) if tags else np.zeros((0, 2), dtype=np.int64)
                    for name, tags in curves.items()}
    corner_tags = []
    for _, point in gmsh.model.getEntities(0):  # the geometry's points: few
        curves, _ = gmsh.model.getAdjacencies(0, point)
        if len(set(curves)) == 1:  # one curve: a corner only where an open curve ends (not a circle's seam)
            ends = {tag for _, tag in gmsh.model.getBoundary([(1, int(curves[0]))], False, False, False)}
            if len(ends) < 2:
                continue
        elif len(set(curves)) == 0:
            continue
        tags, _, _ = gmsh.model.mesh.getNodes(0, point)
        corner_tags.extend(int(t) for t in tags)
    corner_nodes = index_of[np.asarray(corner_tags, dtype=np.int64)] if corner_tags else np.zeros(0, dtype=np.int64)
    for name, rows in {**surface_groups, **curve_groups}.items():
        if len(rows) == 0:
            raise MeshError(f"physical group {name!r} has no mesh elements; check which entities it lists")

    # compact node numbering: drop nodes that belong to no triangle (e.g. unused geometry points)
    used = np.flatnonzero(np.bincount(triangles.ravel(), minlength=len(coords)))  # sorted, like np.unique
    if used.size != len(coords):
        remap = np.full(len(coords), -1, dtype=np.int64)
        remap[used] = np.arange(used.size)
        coords = coords[used]
        triangles = remap[triangles]
        curve_groups = {k: remap[v] for k, v in curve_groups.items()}
        shaped_segments = {e: remap[v] for e, v in shaped_segments.items()}
        corner_nodes = remap[corner_nodes]
        for name, segs in curve_groups.items():
            if (segs < 0).any():
                raise MeshError(f"physical curve {name!r} has nodes that lie on no triangle; it must bound a surface")
    points = np.ascontiguousarray(coords[:, :2] * scale, dtype=np.float64)
    if not math.isfinite(float(points.sum())):
        raise MeshError("gmsh returned non-finite node coordinates")
    # a curve whose nodes lie on no triangle (a stray construction line) is no boundary to refine
    shaped_segments = {e: v for e, v in shaped_segments.items() if (v >= 0).all()}
    return RawMesh(points, triangles, surface_groups, curve_groups, warnings, corner_nodes[corner_nodes >= 0], splits,
                   {e: shapes[e] for e in shaped_segments}, shaped_segments)
