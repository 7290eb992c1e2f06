"""Weak forms, written like the mathematics, and the one hand-built matrix of the million-node path."""

import os

import numpy as np
import scipy.sparse as sp
from skfem import BilinearForm, MeshTri1
from skfem.helpers import dot, grad

from .mesh import linear_gradients_and_areas


#: threads assembling a form's 36 (P2) or 100 (P3) local matrix entries: numpy lets go of the interpreter lock in its
#: kernels, so two threads assemble the demo's final matrix in 0.12 s instead of 0.16 s (the same matrix, entry for
#: entry); none (0: no threads) where this process has one core
ASSEMBLY_THREADS = 2 if hasattr(os, "sched_getaffinity") and len(os.sched_getaffinity(0)) >= 2 else 0


@BilinearForm(nthreads=ASSEMBLY_THREADS)
def permittivity_laplace(u, v, w):
    """(eps grad u, grad v): the electrostatic energy form.

    ``w.eps`` (F/m) is given per element, or per element and quadrature point where it carries a
    weight: 2 pi r for a body of revolution, R^2/rho^2 in the Kelvin image of open space.
    """
    return w.eps * dot(grad(u), grad(v))


def linear_stiffness(mesh: MeshTri1, eps: np.ndarray) -> sp.csr_matrix:
    """``permittivity_laplace`` for P1 on straight triangles with ``eps`` (F/m) per element, built directly.

    The element matrix is eps A grad(l_i) . grad(l_j) for the barycentric coordinates l. Its entries are
    summed straight onto the vertices (diagonal) and the mesh's edges (off-diagonal): no element matrices
    or COO triplets are stored, about a third of the memory and time of the general assembly at a
    million nodes.
    """
    gradients, areas = linear_gradients_and_areas(mesh)  # (3 vertices, 2, m), (m,)
    weight = eps * areas
    t, edges, n = mesh.t, mesh.facets, mesh.nvertices
    diagonal = np.bincount(t.ravel(), weights=(weight * (gradients**2).sum(axis=1)).ravel(), minlength=n)
    off = np.zeros(edges.shape[1])
    for side, (i, j) in enumerate(mesh.elem.refdom.facets):  # the facet t2f[side] joins local vertices i, j
        off += np.bincount(mesh.t2f[side], weights=weight * (gradients[i] * gradients[j]).sum(axis=0),
                           minlength=edges.shape[1])
    rows = np.concatenate([np.arange(n, dtype=edges.dtype), edges[0], edges[1]])
    columns = np.concatenate([np.arange(n, dtype=edges.dtype), edges[1], edges[0]])
    return sp.csr_matrix((np.concatenate([diagonal, off, off]), (rows, columns)), shape=(n, n))
