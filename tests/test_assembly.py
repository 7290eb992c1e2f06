"""The hand-built P1 matrix of the million-node path against scikit-fem's general assembly.

Reference: scikit-fem (PyPI), assembling the same bilinear form (eps grad u, grad v) with its own
element loop; the two must agree to round-off on an irregular mesh with a different eps per element.
"""

from __future__ import annotations

import numpy as np
import pytest
from skfem import Basis, ElementTriP1, MeshTri

from fieldsection.forms import linear_stiffness, permittivity_laplace


def test_hand_built_p1_matrix_equals_scikit_fem_assembly():
    rng = np.random.default_rng(7)
    mesh = MeshTri.init_circle(4)  # curved outline, graded interior: no two elements alike
    mesh = MeshTri(mesh.p + 0.01 * rng.standard_normal(mesh.p.shape) * (np.hypot(*mesh.p) < 0.9), mesh.t)
    eps = 8.854e-12 * rng.uniform(1.0, 10.0, mesh.nelements)
    reference = permittivity_laplace.assemble(Basis(mesh, ElementTriP1()), eps=eps[:, None]).tocsr()
    built = linear_stiffness(mesh, eps)
    scale = abs(reference).max()
    assert abs(built - reference).max() <= 1e-12 * scale
    assert built.nnz == mesh.nvertices + 2 * mesh.nfacets  # one entry per vertex and two per edge
    assert abs(built - built.T).max() == pytest.approx(0.0, abs=1e-15 * scale)
