"""Betti numbers of analytic shapes on the voxel grid, in both neighbourhoods.

Expected values: Hatcher 2002, "Algebraic Topology" -- ball (1,0,0), annulus (1,1),
spherical shell (1,0,1), solid torus (1,1,0), thickened torus surface (1,2,1).
"""

import numpy as np
import pytest
from reference import annulus, ball, shell, solid_torus, torus_surface

import voxtopo


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
