"""scikit-fem's isoparametric mapping for curved (6-node) triangles, with the inverse Jacobian computed once per
basis instead of once per shape function.

Building a basis asks the mapping for the inverse Jacobian at the same points of the same elements once for every
shape function (six times for P2, ten for P3), and scikit-fem computes it afresh each time: on the demo that was
about a tenth of the whole run. ``InverseOnce`` keeps the last one while the same points and elements are asked for
again, and lets it go when the basis asks for the Jacobian's determinant, the last thing it needs.
It also computes the Jacobian's four entries and the global points at once, each as a matrix product of the
elements' node coordinates with the shape functions (scikit-fem gathers the coordinates anew for every entry and
every shape function: 24 gathers per Jacobian). ``install(mesh)`` makes it the mapping of every basis built on
``mesh`` afterwards.
"""

from __future__ import annotations

import numpy as np
from skfem import MeshTri2
from skfem.mapping import MappingIsoparametric


class InverseOnce(MappingIsoparametric):
    """``MappingIsoparametric`` with a one-entry memory of ``invDF`` (see the module docstring), and of the
    Jacobian's entries for the last points and elements only: scikit-fem's own memory keeps those of every
    combination asked for, for the mesh's lifetime (four arrays of elements x points each: about 1 GB at a million
    curved elements after the bases of one run), and hashes a copy of the arrays at every call."""

    _last: tuple | None = None
    _j_key: tuple | None = None
    _j_values: dict | None = None

    def J(self, i: int, j: int, X: np.ndarray, tind: np.ndarray | None = None) -> np.ndarray:  # noqa: N802
        key = self._j_key
        if key is None or key[0] is not X or key[1] is not tind:  # other arrays: other points or elements
            self._j_key, self._j_values = (X, tind), self._jacobian(X, tind)
        return self._j_values[(i, j)]

    def _jacobian(self, X: np.ndarray, tind: np.ndarray | None) -> dict:
        """dx_i / dX_j at points X (2, q) of elements ``tind``, as {(i, j): (elements, q)}."""
        pairs = [(i, j) for i in range(self.dim) for j in range(self.dim)]
        if X.ndim != 2:  # points of their own per element (facet bases): scikit-fem's own sums
            return {(i, j): self._J(i, j, X, tind) for i, j in pairs}
        t = self._element_nodes(tind)
        gradients = [self.elem.lbasis(X, k)[1] for k in range(t.shape[0])]  # each (dim, q)
        coordinates = [self.mesh.doflocs[i][t].T for i in range(self.dim)]  # each (elements, nodes)
        return {(i, j): coordinates[i] @ np.stack([g[j] for g in gradients]) for i, j in pairs}

    def F(self, X: np.ndarray, tind: np.ndarray | None = None) -> np.ndarray:  # noqa: N802
        if X.ndim != 2:
            return super().F(X, tind)
        t = self._element_nodes(tind)
        values = np.stack([self.elem.lbasis(X, k)[0] for k in range(t.shape[0])])  # (nodes, q)
        return np.array([self.mesh.doflocs[i][t].T @ values for i in range(X.shape[0])])

    def _element_nodes(self, tind: np.ndarray | None) -> np.ndarray:
        t = self.mesh.dofs.element_dofs
        return t if tind is None else t[:, tind]

    def invDF(self, X: np.ndarray, tind: np.ndarray | None = None) -> np.ndarray:  # noqa: N802 (scikit-fem's name)
        last = self._last
        if last is not None and last[0] is X and last[1] is tind:  # the same arrays: the same points and elements
            return last[2]
        inverse = super().invDF(X, tind)
        self._last = (X, tind, inverse)
        return inverse

    def detDF(self, X: np.ndarray, tind: np.ndarray | None = None, J=None) -> np.ndarray:  # noqa: N802
        self._last = None  # asked last by a basis being built: the inverse is not needed again
        return super().detDF(X, tind, J=J)


def install(mesh: MeshTri2) -> MeshTri2:
    """Give ``mesh`` the mapping ``InverseOnce`` for the bases built on it (scikit-fem keeps a mesh's mapping as
    ``_cached_mapping``; should that change, the mesh keeps scikit-fem's own mapping, which gives the same numbers)."""
    if hasattr(mesh, "_mapping") and not hasattr(mesh, "_cached_mapping"):
        mesh._cached_mapping = InverseOnce(mesh, mesh.elem(), mesh.bndelem)
    return mesh
