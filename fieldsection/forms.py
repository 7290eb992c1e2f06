"""Weak forms, written like the mathematics."""

from skfem import BilinearForm
from skfem.helpers import dot, grad


@BilinearForm
def permittivity_laplace(u, v, w):
    """(eps grad u, grad v): the electrostatic energy form.

    ``w.eps`` (F/m) is given per element, or per element and quadrature point where it carries a
    weight: 2 pi r for a body of revolution, R^2/rho^2 in the Kelvin image of open space.
    """
    return w.eps * dot(grad(u), grad(v))
