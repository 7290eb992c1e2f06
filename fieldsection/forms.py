"""Weak forms, written like the mathematics, and the one hand-built matrix of the million-node path."""

import numpy as np
import scipy.sparse as sp
from skfem import BilinearForm, MeshTri1
from skfem.helpers import dot, grad


@BilinearForm
def permittivity_laplace(u, v, w):
    """(eps grad u, grad v): the electrostatic energy form.

    ``w.eps`` (F/m) is given per element, or per element and quadrature point where it carries a
    weight: 2 pi r for a body of revolution, R^2/rho^2 in the Kelvin image of open space.
    """
    return w.eps * dot(grad(u), grad(v))


def linear_stiffness(mesh: MeshTri1, eps: np.ndarray) -> sp.csr_matrix:
    """``permittivity_laplace`` for P1 on straight triangles with ``eps`` (F/m) per element, built directly.

    With s_i the side opposite vertex i, grad(l_i) . grad(l_j) = s_i . s_j / (4 A^2) for the barycentric
    coordinates l, so the element matrix is eps s_i . s_j / (4 A). Its entries are summed straight onto
    the vertices (diagonal) and the mesh's edges (off-diagonal): no element matrices or COO triplets
    are stored, about a third of the memory and time of the general assembly at a million nodes.
    """
    t = mesh.t
    xs, ys = mesh.p[0][t], mesh.p[1][t]  # (3, m)
    sx, sy = xs[[2, 0, 1]] - xs[[1, 2, 0]], ys[[2, 0, 1]] - ys[[1, 2, 0]]  # side i runs from vertex i+1 to i+2
    coefficient = eps / (2.0 * np.abs(sx[1] * sy[2] - sx[2] * sy[1]))  # eps / (4 A)
    n, edges = mesh.nvertices, mesh.facets
    diagonal = np.bincount(t.ravel(), weights=(coefficient * (sx**2 + sy**2)).ravel(), minlength=n)
    off = np.zeros(edges.shape[1])
    for side, (i, j) in enumerate(mesh.elem.refdom.facets):  # the facet t2f[side] joins local vertices i, j
        off += np.bincount(mesh.t2f[side], weights=coefficient * (sx[i] * sx[j] + sy[i] * sy[j]),
                           minlength=edges.shape[1])
    rows = np.concatenate([np.arange(n, dtype=edges.dtype), edges[0], edges[1]])
    columns = np.concatenate([np.arange(n, dtype=edges.dtype), edges[1], edges[0]])
    return sp.csr_matrix((np.concatenate([diagonal, off, off]), (rows, columns)), shape=(n, n))
