"""Euler characteristic of a binary image by counting the cells of its cubical complex.

The two neighbourhoods are two complexes built from the same voxels (Ohser, Nagel &
Schladitz 2002 discuss the choice of adjacency):

* 26 in 3D, 8 in 2D (the voxel construction): the union of the closed voxels. A cell is
  present when any voxel it bounds is foreground.
* 6 in 3D, 4 in 2D (the vertex construction): voxels are the vertices, and a cell spanning
  a 2x2(x2) block of voxels is present when all of them are foreground.

Cells are enumerated by type: for a set ``T`` of axes, the cells of dimension ``|T|``.
The Euler characteristic is the alternating sum of the counts, vectorised with numpy; the
pure-Python twin ``euler_characteristic_python`` lists the cells one by one (tests only).
"""

from __future__ import annotations

from itertools import combinations, product

import numpy as np


def _window(mask: np.ndarray, axes, combine) -> np.ndarray:
    for axis in axes:
        lower = [slice(None)] * mask.ndim
        upper = [slice(None)] * mask.ndim
        lower[axis] = slice(None, -1)
        upper[axis] = slice(1, None)
        mask = combine(mask[tuple(lower)], mask[tuple(upper)])
    return mask


def euler_characteristic(mask: np.ndarray, neighbourhood: int) -> int:
    """Euler characteristic of the foreground of ``mask`` with the given neighbourhood.

    Examples
    --------
    >>> import numpy as np
    >>> ring = np.ones((3, 3), bool); ring[1, 1] = False
    >>> euler_characteristic(ring, 8), euler_characteristic(ring, 4)
    (0, 0)
    >>> diagonal = np.eye(2, dtype=bool)
    >>> euler_characteristic(diagonal, 8), euler_characteristic(diagonal, 4)
    (1, 2)
    """
    mask = np.asarray(mask, dtype=bool)
    ndim = mask.ndim
    chi = 0
    if neighbourhood in (26, 8):
        padded = np.pad(mask, 1)
        for planes in range(ndim + 1):      # axes along which the cell sits on a grid plane
            for axes in combinations(range(ndim), planes):
                cell_dim = ndim - planes
                chi += (-1) ** cell_dim * int(np.count_nonzero(
                    _window(padded, axes, np.logical_or)))
    else:
        for cell_dim in range(ndim + 1):
            for axes in combinations(range(ndim), cell_dim):
                chi += (-1) ** cell_dim * int(np.count_nonzero(
                    _window(mask, axes, np.logical_and)))
    return chi


def euler_characteristic_python(mask: np.ndarray, neighbourhood: int) -> int:
    """Twin of :func:`euler_characteristic` listing every cell (tiny inputs only).

    Cells live on the doubled grid: a coordinate is odd where the cell spans a voxel
    (voxel construction) or spans a step between voxel centres (vertex construction).
    """
    mask = np.asarray(mask, dtype=bool)
    ndim = mask.ndim
    cells = set()
    for voxel in zip(*np.nonzero(mask)):
        if neighbourhood in (26, 8):
            for step in product((0, 1, 2), repeat=ndim):
                cells.add(tuple(2 * i + s for i, s in zip(voxel, step)))
        else:
            for step in product((0, 1), repeat=ndim):
                corners = product(*[(i, i + 1) if s else (i,) for i, s in zip(voxel, step)])
                if all(all(0 <= c < n for c, n in zip(corner, mask.shape)) and mask[corner]
                       for corner in corners):
                    cells.add(tuple(2 * i + s for i, s in zip(voxel, step)))
    return sum((-1) ** sum(c % 2 for c in cell) for cell in cells)
