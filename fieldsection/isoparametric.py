"""scikit-fem's isoparametric mapping for curved (6-node) triangles, with the inverse Jacobian computed once per
basis instead of once per shape function.

Building a basis asks the mapping for the inverse Jacobian at the same points of the same elements once for every
shape function (six times for P2, ten for P3), and scikit-fem computes it afresh each time: on the demo that was
about a tenth of the whole run. ``InverseOnce`` keeps the last one while the same points and elements are asked for
again, and lets it go when the basis asks for the Jacobian's determinant, the last thing it needs.
``install(mesh)`` makes it the mapping of every basis built on ``mesh`` afterwards.
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
            self._j_key, self._j_values = (X, tind), {}
        values = self._j_values
        if (i, j) not in values:
            values[(i, j)] = self._J(i, j, X, tind)
        return values[(i, j)]

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
