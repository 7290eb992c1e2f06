"""The superposition check: the potential rebuilt from the solution's charges alone.

The potential of polarised insulation is the potential of its free and bound charges in empty space
(2D Green's function G = -ln|r - r'| / (2 pi eps0) per unit line charge). This stage rebuilds V at
probe points inside the insulation from

- the free charge on every electrode face, the grounded enclosure included (its induced charge): the
  reaction charges K u at the electrode's DOFs, i.e. sigma_f = D.n (n into the dielectric) weighted by each
  shape function, placed at the DOFs. They are what the capacitance matrix counts and add up exactly; the
  pointwise D.n of the element gradients does not conserve charge at a singular edge (about 2 % at a
  stripline's edges, shrinking like the square root of the edge element's size), which this check would
  otherwise measure instead of the superposition. The D.n integral is reported beside them;
- the bound charge of the discrete polarisation, -div P as a distribution: P.n_out on every side of every
  dielectric element (on a material face the two sides add to (P_a - P_b).n; inside a uniform material
  the sides of neighbouring elements nearly cancel, and what is left is part of the discretisation error
  this check measures; in a graded material it is the grading's bound charge) and rho_b = -div P inside
  each element (identically zero for linear elements on straight triangles, where P is constant; not zero
  for P2 or curved elements: the divergence of the interpolated gradient of V);
- on insulated boundaries (symmetry lines, insulated walls, uncharged cavities) their equivalent double
  layer of moment eps0 V per unit length (Green's representation formula): for a straight symmetry line it
  is exactly the field of the mirrored copies' charges, and a box of insulated walls needs no endless row
  of images. The same layer on electrode faces adds nothing on a closed rim (V constant) and is kept for
  electrodes that are part of an open boundary loop.

Open space (planar, a full circle): the medium beyond the circle is uniform and carries no charge, and the FE solution is
bounded at infinity, so the drawn section's charges are all there is; the mapped exterior's elements and
the circle itself (not a material face) are left out. An open half-disc (an arc ending on a straight ground
plane or symmetry line, which continue beyond it) is completed by mirror images: of opposite sign across a
ground plane (whose own charges and their images then cancel), of the same sign across a symmetry line
(the symmetry copy's charges). Other open sectors are not checked. Axisymmetric models are not checked (the kernel of a
ring of charge is not the 2D logarithm): the result says so.

The additive constant is fixed by least squares over the probes; the number reported is the largest
difference from the FE potential relative to the span of the FE potential. Sums over sources x probes go
through a quadtree (``multipole.LogPotentialSum``): direct sums from the probe's own and neighbouring finest cells, multipole
expansions (order ``MULTIPOLE_ORDER``) from the rest, sources fed in chunks of elements, so time and memory
stay linear in the mesh size.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
from scipy.constants import epsilon_0
from scipy.spatial import cKDTree
from skfem import Basis
from skfem.quadrature import get_quadrature

from .fields import _EDGES, EDGE_DIRECTIONS, _is_linear, _linear_gradient, edge_points, gradient_at_points
from .forked import helper_call
from .mesh import EXTERIOR, linear_gradients_and_areas
from .multipole import LogPotentialSum
from .solve import Solution

#: Gauss points per element edge
EDGE_POINTS = 3
#: probes per dielectric region, and along the line
PROBES_PER_REGION = 200
LINE_PROBES = 300
#: a probe sits at least this many local element sizes from any face (Gauss quadrature stays accurate)
FACE_CLEARANCE = 3.0
#: elements per chunk of the source loop (bounds the memory of the quadrature arrays)
CHUNK = 100_000
#: source elements from which a helper process sums half of the sources (below, the fork costs more than it saves)
HELPER_ABOVE = 20_000
HELPER_BLOCK = 256

_GS, _GW = np.polynomial.legendre.leggauss(EDGE_POINTS)
_GS, _GW = 0.5 * (_GS + 1.0), 0.5 * _GW  # on [0, 1]


@dataclass(frozen=True)
class SuperpositionCheck:
    """The potential rebuilt from the charges, against the FE potential, at probe points (SI units)."""

    checked: bool
    note: str
    largest_relative_difference: float | None = None  # max |rebuilt - FE - constant| / span of V
    potential_span: float = 0.0  # V
    constant: float = 0.0  # V, the additive constant (least squares)
    probes: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))  # (n, 2), m
    probe_region: tuple[str, ...] = ()
    fe_potential: np.ndarray = field(default_factory=lambda: np.zeros(0))  # V
    rebuilt_potential: np.ndarray = field(default_factory=lambda: np.zeros(0))  # V, constant removed
    line: np.ndarray = field(default_factory=lambda: np.zeros((2, 2)))  # start and end, m
    line_points: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    line_fe: np.ndarray = field(default_factory=lambda: np.zeros(0))
    line_rebuilt: np.ndarray = field(default_factory=lambda: np.zeros(0))
    region_differences: dict = field(default_factory=dict)  # region -> largest relative difference
    free_charge: dict = field(default_factory=dict)  # conductor -> C/m of the model: reaction charges (the sources)
    free_charge_from_flux: dict = field(default_factory=dict)  # conductor -> C/m: integral of D.n (not used)
    sources: int = 0
    seconds: float = 0.0


# ------------------------------------------------------------------------------------------ sources
def _linear_edge_quadrature(solution: Solution, elements: np.ndarray, linear_E: np.ndarray) -> list[tuple]:
    """On each local edge of linear ``elements`` on straight triangles: Gauss points w (n, q) complex, weights
    ds (n, q), the outward normal component of E (n, 1), the outward unit normal as a complex number (n, 1) and
    V (n, q); ``linear_E`` (n, 2): the elements' constant E. Each corner is gathered once for the three edges."""
    mesh = solution.problem.section.mesh
    t = mesh.t[:, elements]
    x, y, u = mesh.p[0], mesh.p[1], solution.potential  # one row at a time: 2D fancy indexing is several times slower
    corners = [x[t[k]] + 1j * y[t[k]] for k in range(3)]
    values = [u[t[k]] for k in range(3)]
    E = linear_E[:, 0] + 1j * linear_E[:, 1]
    out = []
    for a, b in _EDGES:
        start, tangent = corners[a], corners[b] - corners[a]
        length = np.abs(tangent)
        normal = -1j * tangent / length  # the tangent turned clockwise, then pointed away from the third corner
        normal[(np.conj(normal) * (start + 0.5 * tangent - corners[3 - a - b])).real < 0] *= -1
        points = start[:, None] + tangent[:, None] * _GS[None, :]
        V = values[a][:, None] + (values[b] - values[a])[:, None] * _GS[None, :]
        out.append((points, length[:, None] * _GW[None, :], (E * np.conj(normal)).real[:, None], normal[:, None], V))
    return out


def _curved_edge_quadrature(solution: Solution, elements: np.ndarray) -> list[tuple]:
    """``_linear_edge_quadrature``'s values on all three local edges of higher-order or curved elements (E.n and the
    normal per Gauss point, (n, q)): one basis at the Gauss points of every edge together (a basis costs about as
    much for nine points as for three)."""
    problem = solution.problem
    mesh = problem.section.mesh
    ref = edge_points(_GS)
    basis = Basis(mesh, problem.basis.elem, quadrature=(ref, np.tile(_GW, 3)), elements=elements)
    grad = gradient_at_points(basis, solution.potential)  # (2, n, 3q)
    dofs = basis.element_dofs  # V at the points: the sum ``basis.interpolate`` does, without its derivatives
    V = sum(solution.potential[dofs[i]][:, None] * np.asarray(basis.basis[i][0]) for i in range(basis.Nbfun))  # (n, 3q)
    x = basis.mapping.F(ref, tind=elements)  # (2, n, 3q)
    jacobian = basis.mapping.DF(ref, tind=elements)
    centroid = basis.mapping.F(np.array([[1 / 3], [1 / 3]]), tind=elements)[:, :, 0]
    out = []
    for edge, direction in enumerate(EDGE_DIRECTIONS):
        part = slice(edge * EDGE_POINTS, (edge + 1) * EDGE_POINTS)
        tangent = np.einsum("ijnq,j->inq", jacobian[:, :, :, part], direction)
        length = np.hypot(tangent[0], tangent[1])
        normal = np.stack([tangent[1], -tangent[0]]) / length
        xe = x[:, :, part]
        sign = np.sign(np.einsum("inq,in->nq", normal, xe.mean(axis=2) - centroid))[:, :1]
        normal = normal * sign[None]
        e_n = -np.einsum("inq,inq->nq", grad[:, :, part], normal)
        out.append((xe[0] + 1j * xe[1], length * _GW[None, :], e_n, normal[0] + 1j * normal[1], V[:, part]))
    return out


def _interior_quadrature(solution: Solution, elements: np.ndarray):
    """rho_b = -div P = (eps - eps0) laplacian(V) at each element's quadrature points: (points, charges).

    grad V (linear for P2, quadratic for P3) is interpolated from its values at the vertices and edge
    midpoints by second-order shape functions of the corner triangle and differentiated: exact on straight
    elements; on curved boundary elements an approximation (they are a thin rim of the mesh)."""
    problem = solution.problem
    mesh = problem.section.mesh
    nodes = np.array([[0.0, 1.0, 0.0, 0.5, 0.5, 0.0], [0.0, 0.0, 1.0, 0.0, 0.5, 0.5]])
    X, W = get_quadrature(mesh.refdom, 2 * problem.element_order)
    # one basis at the six nodes and the quadrature points together (its set-up costs most, not its points)
    basis = Basis(mesh, problem.basis.elem, quadrature=(np.hstack([nodes, X]), np.hstack([np.full(6, 1 / 12), W])),
                  elements=elements)
    g = gradient_at_points(basis, solution.potential)[:, :, :6]  # (2, n, 6)
    dx = basis.dx[:, 6:]
    lam = np.vstack([1 - X.sum(axis=0), X])  # barycentric coordinates of the quadrature points (3, q)
    dlam = linear_gradients_and_areas(mesh, elements)[0]  # (3, 2, n)
    divergence = np.zeros((len(elements), X.shape[1]))
    for k in range(3):  # vertex shape functions lam_k (2 lam_k - 1)
        divergence += np.einsum("in,in->n", g[:, :, k], dlam[k])[:, None] * (4 * lam[k] - 1)[None, :]
    for node, (i, j) in zip((3, 4, 5), ((0, 1), (1, 2), (0, 2))):  # edge shape functions 4 lam_i lam_j
        gi = np.einsum("in,in->n", g[:, :, node], dlam[j])[:, None] * lam[i][None, :]
        gj = np.einsum("in,in->n", g[:, :, node], dlam[i])[:, None] * lam[j][None, :]
        divergence += 4 * (gi + gj)
    eps = epsilon_0 * problem.relative_permittivity[elements]
    x = basis.mapping.F(X, tind=elements)
    return x[0] + 1j * x[1], (eps - epsilon_0)[:, None] * divergence * dx


def _conductor_sides(problem) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per conductor, its faces' dielectric sides: (local edge, element) of each."""
    t2f = problem.section.mesh.t2f  # (3, ne), local edges in the order of fields._EDGES
    out = []
    for c in problem.conductors:
        element = np.asarray(c.facet_dielectric_element, dtype=np.int64)
        out.append((np.argmax(t2f[:, element] == np.asarray(c.facets)[None, :], axis=0), element))
    return out


def _sides(problem, conductor_sides, mirror: "_Mirror | None", elements: np.ndarray):
    """Per local edge of ``elements`` (ascending), each (3, n): the conductor index on that side (-1 none), whether
    it is on the boundary of the drawn dielectric (and not on the mirror line, which is no boundary of the
    mirrored whole), whether it faces the mapped exterior (the open-space circle). Made per chunk of elements,
    so that a helper process makes those of its own half."""
    section = problem.section
    mesh = section.mesh
    t2f = mesh.t2f[:, elements]
    conductor = np.full(t2f.shape, -1, dtype=np.int64)
    for index, (local, element) in enumerate(conductor_sides):
        where = np.minimum(np.searchsorted(elements, element), elements.size - 1)
        mine = elements[where] == element
        conductor[local[mine], where[mine]] = index
    first, second = mesh.f2t[0, t2f], mesh.f2t[1, t2f]
    other = np.where(first == elements[None, :], second, first)
    exterior = section.exterior
    inside = problem.dielectric & ~exterior
    has_other = other >= 0
    boundary = ~has_other | ~inside[np.maximum(other, 0)]
    faces_exterior = has_other & exterior[np.maximum(other, 0)]
    boundary = boundary & ~faces_exterior
    if mirror is not None:
        ends = mesh.facets[:, t2f]  # (2 ends, 3, n)
        x, y = mesh.p[0], mesh.p[1]
        on_line = mirror.on_line(x[ends[0]] + 1j * y[ends[0]]) & mirror.on_line(x[ends[1]] + 1j * y[ends[1]])
        boundary &= ~on_line
        conductor = np.where(on_line, -1, conductor)  # (its charges cancel against their images, or are images)
    return conductor, boundary, faces_exterior


def _sources(solution: Solution, fields_P_sign: float, elements: np.ndarray, conductor_sides, mirror,
             free_totals: np.ndarray):
    """The sources of one chunk of elements: (positions, line charges q in C/m) and (positions, double-layer
    moments m). The two sides of a facet inside the chunk share their Gauss points (every local edge runs from
    the lower global vertex to the higher, as scikit-fem sorts each element's vertices), so their bound charges
    are added into one source there."""
    problem = solution.problem
    mesh = problem.section.mesh
    conductor, boundary, faces_exterior = _sides(problem, conductor_sides, mirror, elements)
    eps = epsilon_0 * problem.relative_permittivity[elements]
    facets, ws, qs, layer_w, layer_m = [], [], [], [], []
    if _is_linear(problem):
        edges = _linear_edge_quadrature(solution, elements, -_linear_gradient(mesh, solution.potential, elements))
    else:
        edges = _curved_edge_quadrature(solution, elements)
    for edge in range(3):
        w, ds, e_n, normal, V = edges[edge]  # e_n and normal (n, q), or (n, 1) where constant along the edge
        bound = fields_P_sign * (eps - epsilon_0)[:, None] * e_n * ds  # P . n_out
        c = conductor[edge]
        on_conductor = c >= 0
        if on_conductor.any():  # the integral of D . n into the dielectric, reported beside the reaction charges
            free = -eps[on_conductor, None] * e_n[on_conductor] * ds[on_conductor]
            free_totals += np.bincount(c[on_conductor], free.sum(axis=1), len(free_totals))
        keep = ~faces_exterior[edge]
        facets.append(mesh.t2f[edge, elements][keep])
        ws.append(w[keep])
        qs.append(bound[keep])
        layer = keep & (boundary[edge] | on_conductor)
        layer_w.append(w[layer].ravel())
        layer_m.append((epsilon_0 * V[layer] * ds[layer] * normal[layer]).ravel())
    facets = np.concatenate(facets)
    # the first side of each facet in the chunk collects the bound charge of both (a scatter into a per-facet
    # table: no sort)
    owner = np.empty(mesh.nfacets, dtype=np.int64)
    owner[facets[::-1]] = np.arange(facets.size)[::-1]
    target = owner[facets]
    first = np.flatnonzero(target == np.arange(facets.size))
    q_all = np.concatenate(qs)
    merged = np.stack([np.bincount(target, q_all[:, k], facets.size)[first] for k in range(q_all.shape[1])], axis=1)
    charge_w, charge_q = [np.concatenate(ws)[first].ravel()], [merged.ravel()]
    if not _is_linear(problem):  # P constant in a linear element on a straight triangle: div P = 0
        w, q = _interior_quadrature(solution, elements)
        charge_w.append(w.ravel())
        charge_q.append(fields_P_sign * q.ravel())
    return (np.concatenate(charge_w), np.concatenate(charge_q)), (np.concatenate(layer_w), np.concatenate(layer_m))


class _NotChecked(Exception):
    """The check does not apply to this model (the message says why)."""


def _as_xy(z: np.ndarray) -> np.ndarray:
    return np.vstack([z.real, z.imag])


@dataclass(frozen=True)
class _Mirror:
    """The straight line through an open half-disc's centre that the model is half of: an insulated symmetry
    line (images of the same sign) or a ground plane (images of opposite sign)."""

    centre: complex
    direction: complex  # unit
    sign: float
    tolerance: float

    def reflect(self, z: np.ndarray) -> np.ndarray:
        return self.centre + self.direction**2 * np.conj(z - self.centre)

    def images(self, w, q, m):
        """Line charges q at w and dipoles m: their mirror images (a dipole's moment reflected, and negated with
        the charges for a ground plane)."""
        return (self.reflect(w), None if q is None else self.sign * q,
                None if m is None else self.sign * self.direction**2 * np.conj(m))

    def on_line(self, z: np.ndarray) -> np.ndarray:
        return np.abs((np.conj(self.direction) * (z - self.centre)).imag) <= self.tolerance


def _mirror(problem) -> _Mirror | None:
    """The mirror of an open half-disc model; None for models that need none; _NotChecked where the check does
    not apply."""
    section = problem.section
    if problem.axisymmetric:
        raise _NotChecked("not checked: an axisymmetric model's charges are rings, whose kernel is not the 2D "
                          "logarithm this check integrates")
    circle = section.open_circle
    if circle is None or circle.closed:
        return None
    mesh = section.mesh
    first, last = (mesh.p[:, v] - circle.centre for v in circle.loop[[0, -1]])
    opposite = np.dot(first, last) <= -(1 - 1e-6) * np.dot(first, first)
    conductors = {c.name for c in problem.conductors}
    kinds = {name in conductors for name in circle.end_curves}
    if not opposite or len(kinds) != 1:
        raise _NotChecked("not checked: the open-space sector is not a half-disc cut by one symmetry line or one ground "
                          "plane, so the charges beyond its straight edges have no simple images")
    direction = complex(*first) / np.hypot(*first)
    return _Mirror(complex(*circle.centre), direction, -1.0 if kinds.pop() else 1.0, 1e-9 * circle.radius)


# ------------------------------------------------------------------------------------------- probes
def _face_tree(problem) -> cKDTree:
    """KD-tree of points along every face (a facet between regions, on a conductor or on the boundary)."""
    section = problem.section
    mesh = section.mesh
    region = section.region_of_element
    a, b = mesh.f2t
    face = (b < 0) | (region[a] != region[np.maximum(b, 0)])
    for c in problem.conductors:
        face[c.facets] = True
    ends = mesh.p[:, mesh.facets[:, face]]
    points = np.concatenate([ends[:, 0].T, ends[:, 1].T, *(ends[:, 0].T + s * (ends[:, 1] - ends[:, 0]).T
                                                           for s in (0.25, 0.5, 0.75))])
    return cKDTree(points)


def _size(mesh, elements: np.ndarray) -> np.ndarray:
    """The size of each of ``elements``: its longest corner edge."""
    t, x, y = mesh.t[:, elements], mesh.p[0], mesh.p[1]
    return np.max([np.hypot(x[t[i]] - x[t[j]], y[t[i]] - y[t[j]]) for i, j in _EDGES], axis=0)


def _vertex_box(mesh, elements: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The lower and upper corners of the box around the nodes of ``elements`` (a mask): their vertices and, on a
    curved mesh, their mid-edge nodes (numbered after the vertices), which may bulge beyond them. The nodes are
    marked in a mask, not sorted out by np.unique (a second at a million elements)."""
    if elements.all():
        return mesh.p.min(axis=1), mesh.p.max(axis=1)
    used = np.zeros(mesh.p.shape[1], dtype=bool)
    used[mesh.t[:, elements]] = True
    if mesh.p.shape[1] > mesh.nvertices:
        used[mesh.nvertices + mesh.t2f[:, elements]] = True
    xy = mesh.p[:, used]
    return xy.min(axis=1), xy.max(axis=1)


def _probe_elements(problem, tree) -> tuple[np.ndarray, list[str]]:
    """Up to ``PROBES_PER_REGION`` elements of each dielectric region, drawn at random with chances in proportion
    to their areas (so the probes spread over the region rather than crowd where the mesh is fine), at least
    ``FACE_CLEARANCE`` element sizes from any face; in a layer too thin for that, its most central elements."""
    section = problem.section
    mesh = section.mesh
    areas = section.element_areas
    rng = np.random.default_rng(14)  # a fixed seed: the same probes on every run of the same mesh
    chosen, names = [], []
    for index, name in enumerate(section.region_names):
        if name == EXTERIOR or name not in problem.material_of_region:
            continue
        mine = np.flatnonzero(section.region_of_element == index)
        if not problem.dielectric[mine].any():
            continue
        if mine.size > 50 * PROBES_PER_REGION:  # a random subset is enough to choose from
            mine = np.unique(rng.choice(mine, size=50 * PROBES_PER_REGION, p=areas[mine] / areas[mine].sum()))
        distance, _ = tree.query(mesh.p[:, mesh.t[:, mine]].mean(axis=1).T)
        ratio = distance / _size(mesh, mine)
        clear = mine[ratio >= FACE_CLEARANCE]
        if clear.size == 0:  # a thin layer: the most central elements
            clear = mine[np.argsort(ratio)[-min(20, mine.size):]]
        pick = rng.choice(clear, size=min(PROBES_PER_REGION, clear.size), replace=False,
                          p=areas[clear] / areas[clear].sum())
        chosen.append(np.sort(pick))
        names += [name] * pick.size
    return np.concatenate(chosen), names


def _potential_at(solution: Solution, ref: np.ndarray, cells: np.ndarray) -> np.ndarray:
    """The FE potential at reference coordinates ``ref`` (2, n) of elements ``cells``."""
    problem = solution.problem
    mesh = problem.section.mesh
    u = solution.potential
    if _is_linear(problem):
        t = mesh.t[:, cells]
        return (1 - ref[0] - ref[1]) * u[t[0]] + ref[0] * u[t[1]] + ref[1] * u[t[2]]
    basis = problem.basis
    return sum(u[basis.element_dofs[k, cells]] * basis.elem.lbasis(ref, k)[0] for k in range(basis.Nbfun))


def _affine(mesh, elements: np.ndarray) -> np.ndarray:
    """Whether the mapping of each of ``elements`` is affine (every mid-edge geometry node at its chord's midpoint)."""
    if mesh.doflocs.shape[1] == mesh.nvertices:
        return np.ones(elements.size, dtype=bool)
    t = mesh.t[:, elements]
    middle = mesh.doflocs[:, mesh.nvertices + mesh.t2f[:, elements]]  # (2, 3, n)
    chord = np.stack([0.5 * (mesh.p[:, t[a]] + mesh.p[:, t[b]]) for a, b in _EDGES], axis=1)
    size = np.abs(mesh.p[:, t[1]] - mesh.p[:, t[0]]).max(axis=0)
    return (np.abs(middle - chord).max(axis=(0, 1)) <= 1e-9 * size)


def _containing_elements(mesh, points: np.ndarray, candidates: int = 12,
                         allowed: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The corner triangle holding each point (n, 2) of a straight line, -1 where none of the nearest elements
    by centroid does, and the point's reference coordinates in it (2, n). Only the elements whose bounding
    boxes the line's box touches are searched (a thin strip of the mesh, not all of it), and of those only
    the ``allowed`` ones (a bool per element) when given."""
    low, high = points.min(axis=0), points.max(axis=0)
    x, y, t = mesh.p[0], mesh.p[1], mesh.t
    # an element's box meets the line's box where, for each of that box's four sides, some corner lies on its
    # inner side (flags per vertex, then gathered: cheaper than each element's coordinates and their extremes)
    crossing = np.flatnonzero((x >= low[0])[t].any(axis=0) & (x <= high[0])[t].any(axis=0)
                              & (y >= low[1])[t].any(axis=0) & (y <= high[1])[t].any(axis=0)
                              & (True if allowed is None else allowed))
    if crossing.size == 0:
        return np.full(len(points), -1), np.zeros((2, len(points)))
    corners = mesh.t[:, crossing]
    centroid = np.stack([mesh.p[0][corners].mean(axis=0), mesh.p[1][corners].mean(axis=0)], axis=1)
    _, near = cKDTree(centroid).query(points, k=min(candidates, crossing.size))
    near = crossing[near.reshape(len(points), -1)]
    t = mesh.t[:, near]  # (3, n, k)
    p0, p1, p2 = (mesh.p[:, t[k]] for k in range(3))  # (2, n, k)
    d1, d2, r = p1 - p0, p2 - p0, points.T[:, :, None] - p0
    det = d1[0] * d2[1] - d1[1] * d2[0]
    l1 = (r[0] * d2[1] - r[1] * d2[0]) / det
    l2 = (d1[0] * r[1] - d1[1] * r[0]) / det
    inside = (l1 >= -1e-12) & (l2 >= -1e-12) & (l1 + l2 <= 1 + 1e-12)
    first = np.argmax(inside, axis=1)
    rows = np.arange(len(points))
    cells = np.where(inside.any(axis=1), near[rows, first], -1)
    return cells, np.stack([l1[rows, first], l2[rows, first]])


def _line(solution: Solution, tree) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Points in the insulation, clear of the faces, along the horizontal or the vertical line through the middle
    of the drawn section, whichever sees the larger change of the FE potential: (start and end, points, their
    elements, reference coordinates)."""
    problem = solution.problem
    section = problem.section
    mesh = section.mesh
    drawn = problem.dielectric & ~section.exterior
    low, high = _vertex_box(mesh, ~section.exterior)
    middle = 0.5 * (low + high)
    s = np.linspace(0.0, 1.0, LINE_PROBES + 2)[1:-1]
    best = None
    for ends in (np.array([[low[0], middle[1]], [high[0], middle[1]]]), np.array([[middle[0], low[1]], [middle[0], high[1]]])):
        points = ends[0] + s[:, None] * (ends[1] - ends[0])
        cells, ref = _containing_elements(mesh, points)
        ok = cells >= 0
        ok[ok] &= drawn[cells[ok]] & _affine(mesh, cells[ok])  # (in an affine element the corner triangle's
        if ok.any():                                             # barycentric coordinates are the reference ones)
            distance, _ = tree.query(points[ok])
            ok[np.flatnonzero(ok)] &= distance >= FACE_CLEARANCE * _size(mesh, cells[ok])
        change = float(np.ptp(_potential_at(solution, ref[:, ok], cells[ok]))) if ok.sum() > 1 else -1.0
        if best is None or change > best[0]:
            best = (change, ends, points[ok], cells[ok], ref[:, ok])
    return best[1:]


# ---------------------------------------------------------------------------------------- the check
def check_superposition(solution: Solution, *, bound_sign: float = 1.0, helper: bool = True) -> SuperpositionCheck:
    """Rebuild V at probe points from the charges of ``solution`` and compare with the FE potential.

    ``bound_sign`` multiplies every bound charge (1 for the check; -1 only to show a test that a sign
    error in the bound-charge bookkeeping is caught). ``helper``: whether a helper process may sum half of
    the sources on a large mesh (not while another process, drawing the figures, has the second core)."""
    start = time.perf_counter()
    problem = solution.problem
    section = problem.section
    try:
        mirror = _mirror(problem)
    except _NotChecked as refusal:
        return SuperpositionCheck(False, str(refusal))
    mesh = section.mesh
    tree = _face_tree(problem)
    probe_cells, probe_names = _probe_elements(problem, tree)
    centre = np.array([[1 / 3], [1 / 3]])
    if _is_linear(problem):
        probe_points = mesh.p[:, mesh.t[:, probe_cells]].mean(axis=1).T
    else:
        probe_points = problem.basis.mapping.F(centre, tind=probe_cells)[:, :, 0].T
    line, line_points, line_cells, line_ref = _line(solution, tree)
    points = np.concatenate([probe_points, line_points])
    cells = np.concatenate([probe_cells, line_cells])
    ref = np.concatenate([np.repeat(centre, probe_cells.size, axis=1), line_ref], axis=1)
    fe = _potential_at(solution, ref, cells)

    drawn_dielectric = problem.dielectric & ~section.exterior
    sources = np.flatnonzero(drawn_dielectric)
    (x0, y0), (x1, y1) = _vertex_box(mesh, drawn_dielectric)
    drawn = np.array([[x0, x0, x1, x1], [y0, y1, y0, y1]])  # the corners of the sources' bounding box
    if mirror is not None:  # the images lie in the mirrored half
        drawn = np.hstack([drawn, _as_xy(mirror.reflect(drawn[0] + 1j * drawn[1]))])
    per_element = 1.5 * EDGE_POINTS + (0 if _is_linear(problem) else 6)  # sources per element (a facet per side pair)
    corners = mesh.t[:, sources]
    centroids = np.stack([mesh.p[0][corners].mean(axis=0), mesh.p[1][corners].mean(axis=0)])
    if mirror is not None:
        centroids = np.hstack([centroids, _as_xy(mirror.reflect(centroids[0] + 1j * centroids[1]))])
    total = LogPotentialSum(points, drawn.min(axis=1), drawn.max(axis=1), centroids, per_element)
    conductor_sides = _conductor_sides(problem)

    def add(summation: LogPotentialSum, w, q, m=None):
        summation.add(w, q, m)
        if mirror is not None:
            summation.add(*mirror.images(w, q, m))

    def add_elements(summation: LogPotentialSum, elements: np.ndarray) -> np.ndarray:
        """The sources of ``elements`` added into ``summation``; the D.n flux per conductor."""
        flux = np.zeros(len(problem.conductors))
        for first in range(0, elements.size, CHUNK):  # chunks of elements, not a loop over them
            (charge_w, charge_q), (layer_w, layer_m) = _sources(solution, bound_sign, elements[first:first + CHUNK],
                                                                conductor_sides, mirror, flux)
            add(summation, charge_w, charge_q)
            add(summation, layer_w, None, layer_m)
        return flux

    def share(elements: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
        """A helper's share: the sources of ``elements`` summed apart; (D.n flux, V at the probes, sources)."""
        own = total.empty()
        flux = add_elements(own, elements)
        return flux, own.potential(), own.count

    # on a large mesh a helper process sums the first half of the elements' sources meanwhile and sends back its
    # potential at the probes (which adds to ours); without one, or if it fails, this process sums them too
    if helper and sources.size >= HELPER_ABOVE:  # alternate blocks of elements: each half spread over the section
        block = (np.arange(sources.size) // HELPER_BLOCK) % 2 == 0
        halves = [sources[block], sources[~block]]
    else:
        halves = [sources[:0], sources]
    helping = helper_call(share, halves[0]) if halves[0].size else None
    flux = add_elements(total, halves[1])
    reaction = problem.stiffness @ solution.potential
    free = np.zeros(len(problem.conductors))
    for k, conductor in enumerate(problem.conductors):  # the electrodes' free charge at their DOFs
        where = problem.basis.doflocs[:, conductor.dofs]
        add(total, where[0] + 1j * where[1], reaction[conductor.dofs])
        free[k] = reaction[conductor.dofs].sum()
    rebuilt = total.potential()  # ours, while the helper finishes its own
    sources_summed = total.count
    shared = helping.result() if helping is not None else None
    if shared is None and halves[0].size:  # the helper failed: its share here
        shared = share(halves[0])
    if shared is not None:
        flux += shared[0]
        rebuilt += shared[1]
        sources_summed += shared[2]

    difference = rebuilt - fe
    n_probe = len(probe_points)
    constant = float(difference[:n_probe].mean())
    rebuilt = rebuilt - constant
    span = float(np.ptp(solution.potential)) or 1.0
    relative = np.abs(rebuilt - fe) / span
    names = np.array(probe_names)
    per_region = {name: float(relative[:n_probe][names == name].max()) for name in dict.fromkeys(probe_names)}
    note = ("free charge: each electrode's reaction charges (K u at its DOFs, the weak form of D.n on its faces, the "
            "charge of the capacitance matrix) at the DOFs; bound charge: -div P of the discrete polarisation (P.n on "
            "every element side, both sides adding on material faces, and -div P inside elements); insulated "
            "boundaries: their double layer eps0 V; 2D free-space Green's function, Gauss quadrature on the (curved) "
            "element edges; additive constant by least squares")
    if section.open_circle is not None:
        note += "; open space: the section's own charges (the medium beyond the circle carries none)"
    if mirror is not None:
        note += ("; with their mirror images across the " + ("ground plane (opposite sign)" if mirror.sign < 0 else
                                                             "symmetry line (same sign)"))
    return SuperpositionCheck(
        True, note, float(relative.max()), span, constant, probe_points, tuple(probe_names), fe[:n_probe],
        rebuilt[:n_probe], line, line_points, fe[n_probe:], rebuilt[n_probe:], per_region,
        {c.name: float(q) for c, q in zip(problem.conductors, free)},
        {c.name: float(q) for c, q in zip(problem.conductors, flux)}, sources_summed,
        time.perf_counter() - start)
