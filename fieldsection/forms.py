"""Weak forms, written like the mathematics."""

from skfem import BilinearForm
from skfem.helpers import dot, grad


@BilinearForm
def permittivity_laplace(u, v, w):
    """(eps grad u, grad v): the electrostatic energy form. ``w.eps`` is per element, F/m."""
    return w.eps * dot(grad(u), grad(v))
