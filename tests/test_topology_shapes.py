"""Betti numbers of analytic shapes on the voxel grid, in both neighbourhoods.

Expected values: Hatcher 2002, "Algebraic Topology" -- ball (1,0,0), annulus (1,1),
spherical shell (1,0,1), solid torus (1,1,0), thickened torus surface (1,2,1).
"""

import numpy as np
import pytest

import voxtopo


def _grid(n, ndim):
    c = (n - 1) / 2
    return np.meshgrid(*([np.arange(n) - c] * ndim), indexing="ij")


def annulus(n=41, r_in=8, r_out=15):
    y, x = _grid(n, 2)
    r = np.hypot(y, x)
    return (r >= r_in) & (r <= r_out)


def ball(n=31, r=11):
    z, y, x = _grid(n, 3)
    return np.sqrt(z * z + y * y + x * x) <= r


def shell(n=33, r_in=8, r_out=13):
    z, y, x = _grid(n, 3)
    r = np.sqrt(z * z + y * y + x * x)
    return (r >= r_in) & (r <= r_out)


def solid_torus(n=41, big=12, small=5):
    z, y, x = _grid(n, 3)
    return (np.hypot(y, x) - big) ** 2 + z * z <= small * small


def torus_surface(n=45, big=13, small=6, thickness=2.2):
    z, y, x = _grid(n, 3)
    tube = np.sqrt((np.hypot(y, x) - big) ** 2 + z * z)
    return np.abs(tube - small) <= thickness


SHAPES = [
    ("annulus", annulus, (1, 1)),
    ("ball", ball, (1, 0, 0)),
    ("spherical shell", shell, (1, 0, 1)),
    ("solid torus", solid_torus, (1, 1, 0)),
    ("thickened torus surface", torus_surface, (1, 2, 1)),
]


@pytest.mark.parametrize("name, make, expected", SHAPES, ids=[s[0] for s in SHAPES])
@pytest.mark.parametrize("low_connectivity", [False, True])
def test_shape_has_textbook_betti_numbers(name, make, expected, low_connectivity):
    """Betti numbers of the shape (value 0) inside empty space (value 1), sublevel at 0."""
    shape = make()
    values = np.where(shape, 0.0, 1.0)
    ndim = values.ndim
    neighbourhood = (4 if ndim == 2 else 6) if low_connectivity else None
    diagram = voxtopo.persistence(values, neighbourhood=neighbourhood)
    assert tuple(diagram.betti(0.0)) == expected
