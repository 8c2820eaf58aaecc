"""Laplace eigenvalues (Dirichlet and Neumann) of smooth planar domains, with shape gradients.

Boundary integral equations with Kress quadrature (:mod:`.kernels`), a Chebyshev proxy in k
(:mod:`.proxy`), contour-integral eigenvalue windows with Newton polishing and a posteriori
error estimates (:mod:`.solver`), and the JAX wrapper with Hadamard's formula (:mod:`.api`).
"""

from .api import (choose_resolution, eigenvalues, make_eigenvalue_function, nodes_of,
                  probed_resolution)
from .kernels import BOUNDARIES
from .solver import Spectrum, solve, weyl_mean

__all__ = ["BOUNDARIES", "Spectrum", "choose_resolution", "eigenvalues",
           "make_eigenvalue_function", "nodes_of", "probed_resolution", "solve", "weyl_mean"]
