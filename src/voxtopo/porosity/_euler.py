"""Euler characteristic of a binary image by counting the cells of its cubical complex.

The two neighbourhoods are two complexes built from the same voxels (Ohser, Nagel &
Schladitz 2002 discuss the choice of adjacency):

* 26 in 3D, 8 in 2D (the voxel construction): the union of the closed voxels. A cell is
  present when any voxel it bounds is foreground.
* 6 in 3D, 4 in 2D (the vertex construction): voxels are the vertices, and a cell spanning
  a 2x2(x2) block of voxels is present when all of them are foreground.

Every cell belongs to exactly one 2x2x2 block of voxels (voxels outside the image count
as background), so the Euler characteristic is a sum over blocks of a term that depends
only on the block's 256 possible contents: one pass over the image with a lookup table,
and no array besides the image. The block whose voxels are ``b .. b + 1`` along each axis
owns, in the voxel construction, the grid corner between its voxels and the edges, faces
and cube that leave that corner towards ``b + 1`` (the cube is voxel ``b + 1``); in the
vertex construction, the vertex at voxel ``b`` and the edges, squares and cube that leave
it towards ``b + 1``::

    voxel construction (2D)        vertex construction (2D)
    +-----+-----+                  b ---- b+(0,1)
    | b   |     |                  |   square   |
    +-----c-->--+   c and the      b+(1,0) -- b+(1,1)   b, the edges b->, b-v
    |     v b+1 |   edges c->, c-v                      and the square
    +-----+-----+   and voxel b+1

Both phases of a two-phase scan (pore and solid, each with its neighbourhood, inside a
region of interest or the whole scan) are counted in the same pass. The pure-Python twin
``euler_characteristic_python`` lists the cells one by one (tests only).

References
----------
Ohser, J., Nagel, W. & Schladitz, K. (2002). The Euler number of discretized sets -- on
the choice of adjacency in homogeneous lattices. In Morphology of Condensed Matter,
Lecture Notes in Physics 600, 275-298.
"""

from __future__ import annotations

from itertools import combinations, product

import numpy as np
from numba import njit

#: bit of the block voxel at offset (dz, dy, dx) in a block's contents
_BLOCK_OFFSETS = list(product((0, 1), repeat=3))


def _block_terms(construction: str) -> np.ndarray:
    """int64[256]: the signed count of the cells a block owns, for each block content."""
    terms = np.zeros(256, np.int64)
    for content in range(256):
        present = {offset for bit, offset in enumerate(_BLOCK_OFFSETS) if content >> bit & 1}
        for cell_dim in range(4):
            for axes in combinations(range(3), cell_dim):
                if construction == "voxel":
                    # the cell leaving the corner along ``axes`` bounds the voxels whose
                    # index is b + 1 along those axes and b or b + 1 along the others
                    voxels = [o for o in _BLOCK_OFFSETS if all(o[a] == 1 for a in axes)]
                    on = any(o in present for o in voxels)
                else:
                    # the cell spanned from voxel b along ``axes``: b + 1 along those, b
                    # along the others
                    voxels = [o for o in _BLOCK_OFFSETS
                              if all(o[a] == 0 for a in range(3) if a not in axes)]
                    on = all(o in present for o in voxels)
                terms[content] += (-1) ** cell_dim * on
    return terms


_VOXEL_TERMS = _block_terms("voxel")
_VERTEX_TERMS = _block_terms("vertex")

#: spreads the 4 bits (dz, dy) of one column of a block to the dx = 0 bits of its content
_SPREAD = np.array([sum(1 << (2 * k) for k in range(4) if nibble >> k & 1)
                    for nibble in range(16)], dtype=np.int64)


def _terms_of(neighbourhood: int) -> np.ndarray:
    if neighbourhood in (26, 8):
        return _VOXEL_TERMS
    if neighbourhood in (6, 4):
        return _VERTEX_TERMS
    raise ValueError(f"neighbourhood must be 4, 6, 8 or 26, got {neighbourhood}")


@njit(cache=True, nogil=True)
def _two_phase_count(mask, sample, with_sample, pore_terms, solid_terms, spread):
    """(pore, solid) Euler characteristics of a 3D bool ``mask`` (True: pore) and its
    complement, both within ``sample`` when ``with_sample``, summed block by block."""
    nz, ny, nx = mask.shape
    chi_pore = 0
    chi_solid = 0
    for z in range(-1, nz):
        for y in range(-1, ny):
            # rows (z + dz, y + dy) of this line of blocks that lie in the image
            row_in = np.zeros(4, np.bool_)
            for k in range(4):
                zz, yy = z + k // 2, y + k % 2
                row_in[k] = 0 <= zz < nz and 0 <= yy < ny
            last_pore = 0
            last_solid = 0
            for x in range(-1, nx):
                pore = 0
                solid = 0
                column = x + 1
                if column < nx:
                    for k in range(4):
                        if not row_in[k]:
                            continue
                        zz, yy = z + k // 2, y + k % 2
                        if with_sample and not sample[zz, yy, column]:
                            continue
                        if mask[zz, yy, column]:
                            pore |= 1 << k
                        else:
                            solid |= 1 << k
                chi_pore += pore_terms[spread[last_pore] | (spread[pore] << 1)]
                chi_solid += solid_terms[spread[last_solid] | (spread[solid] << 1)]
                last_pore = pore
                last_solid = solid
    return chi_pore, chi_solid


def phase_euler_characteristics(mask: np.ndarray, neighbourhoods, sample=None) -> tuple[int, int]:
    """Euler characteristics of the pore phase (``mask``) and of the solid (the rest), each
    with its neighbourhood, in one pass and without any array besides the inputs.

    Parameters
    ----------
    mask : ndarray of bool, 2D or 3D
        True in the pore phase.
    neighbourhoods : (int, int)
        Neighbourhood of the pore phase and of the solid: 26 or 6 in 3D, 8 or 4 in 2D.
    sample : ndarray of bool, optional
        Region of interest on the same grid: a voxel outside it is in neither phase.

    Returns
    -------
    (int, int)
        Euler characteristic of ``mask & sample`` and of ``~mask & sample``.

    Examples
    --------
    >>> import numpy as np
    >>> ring = np.ones((3, 3), bool); ring[1, 1] = False
    >>> phase_euler_characteristics(ring, (8, 4))
    (0, 1)
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.ndim not in (2, 3):
        raise ValueError(f"mask must be 2D or 3D, got shape {mask.shape}.")
    pore_terms, solid_terms = (_terms_of(n) for n in neighbourhoods)
    # a 2D image is one slice: its closed squares times an interval (voxel construction)
    # or the same cells (vertex construction), so the same Euler characteristic
    volume = mask if mask.ndim == 3 else mask[np.newaxis]
    if sample is None:
        inside = np.ones((1, 1, 1), dtype=bool)
    else:
        inside = np.asarray(sample, dtype=bool)
        if inside.shape != mask.shape:
            raise ValueError(f"sample has shape {inside.shape}, the mask {mask.shape}.")
        inside = inside if inside.ndim == 3 else inside[np.newaxis]
    chi_pore, chi_solid = _two_phase_count(volume, inside, sample is not None, pore_terms,
                                           solid_terms, _SPREAD)
    return int(chi_pore), int(chi_solid)


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
    return phase_euler_characteristics(mask, (neighbourhood, neighbourhood))[0]


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
