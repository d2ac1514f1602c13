"""Euler characteristics and Minkowski functionals counted one chunk at a time.

Both are sums of local terms, so a chunk counts the terms it *owns* and the chunks' sums
add up to the whole scan's, exactly (to the rounding of a floating-point sum):

* cells of the cubical complex (:mod:`voxtopo.porosity._euler`): a chunk owns the cells
  whose grid position lies in its box; in the voxel construction a cell also spans the
  voxel before it, in the vertex construction the voxel after it, so a one-voxel halo
  suffices. Counting the cells by the level at which they enter a sublevel set gives the
  Euler characteristic at every level at once (the Euler curve).
* triangles of the marching-cubes interface (:mod:`voxtopo.porosity._minkowski`): a chunk
  owns the triangles of the cubes whose first corner lies in its box. The mask is smoothed
  first (a Gaussian reaching 3 voxels), and the curvature of an edge needs the triangle on
  its other side (one cube further), hence a halo of :data:`HALO` voxels::

      |<- halo ->|<------ chunk (owned cubes) ------>|<- halo ->|
        smoothing  +1 cube                   +1 cube  smoothing

An edge's curvature term is shared half and half by its two triangles, so each chunk adds
exactly the half of the terms of the triangles it owns.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
from scipy import ndimage

from . import _minkowski

#: reach of the smoothing kernel (scipy truncates the Gaussian at 4 sigma)
SMOOTHING_REACH = 3
#: voxels read around a chunk for the interface: smoothing, one cube, one more cube
HALO = SMOOTHING_REACH + 2


def _window(values: np.ndarray, axis: int, combine) -> np.ndarray:
    lower = [slice(None)] * values.ndim
    upper = [slice(None)] * values.ndim
    lower[axis] = slice(None, -1)
    upper[axis] = slice(1, None)
    return combine(values[tuple(lower)], values[tuple(upper)])


def euler_histogram(values: np.ndarray, origin, lo, hi, shape, construction: str,
                    levels: np.ndarray) -> np.ndarray:
    """Signed cell counts of the cells owned by the box [lo, hi), binned by level.

    ``values`` is the field over the global box starting at ``origin``, reaching at least
    one voxel beyond [lo, hi) wherever the scan continues. A cell enters the sublevel set
    ``{value <= t}`` at the lowest (voxel construction) or highest (vertex construction)
    value of the voxels it touches. Entry ``j`` of the result is the signed count of the
    cells entering in ``(levels[j-1], levels[j]]``; its cumulative sum is the Euler
    characteristic at each level.
    """
    ndim = len(shape)
    n_levels = len(levels)
    histogram = np.zeros(n_levels, np.int64)
    # Each voxel's bin, found once: the bin is a non-decreasing function of the value, so
    # the bin of a cell's lowest (highest) value is the lowest (highest) of its voxels'
    # bins, and the windows below run on small integers.
    bins = np.searchsorted(levels, values, side="left").astype(
        np.uint16 if n_levels < np.iinfo(np.uint16).max else np.int64)
    if construction == "voxel":
        pad = [(int(origin[a] == 0), int(origin[a] + values.shape[a] == shape[a]))
               for a in range(ndim)]
        bins = np.pad(bins, pad, constant_values=n_levels)  # beyond the scan: no level
        origin = [origin[a] - pad[a][0] for a in range(ndim)]
        families = [(axes, ndim - len(axes)) for k in range(ndim + 1)
                    for axes in combinations(range(ndim), k)]
        combine = np.minimum
    else:
        families = [(axes, len(axes)) for k in range(ndim + 1)
                    for axes in combinations(range(ndim), k)]
        combine = np.maximum
    for axes, cell_dim in families:
        cells = bins
        for a in axes:
            cells = _window(cells, a, combine)
        owned = []
        for a in range(ndim):
            if a not in axes:
                start, stop, shift = lo[a], hi[a], 0
            elif construction == "voxel":  # cell k lies between voxels k - 1 and k
                start, stop, shift = lo[a], hi[a] + int(hi[a] == shape[a]), 1
            else:                           # cell k lies between voxels k and k + 1
                start, stop, shift = lo[a], min(hi[a], shape[a] - 1), 0
            first = start - origin[a] - shift
            owned.append(slice(first, first + max(stop - start, 0)))
        counts = np.bincount(cells[tuple(owned)].ravel(), minlength=n_levels + 1)[:n_levels]
        histogram += (-1) ** cell_dim * counts
    return histogram


def smoothed(mask_block: np.ndarray, origin, shape, sigma: float) -> np.ndarray:
    """The Gaussian-smoothed mask over the block, as the whole scan's smoothing with
    ``mode="nearest"`` gives it wherever the block reaches :data:`SMOOTHING_REACH` voxels
    beyond (the scan's faces are extended as that mode extends them)."""
    ndim = len(shape)
    pad = [(SMOOTHING_REACH if origin[a] == 0 else 0,
            SMOOTHING_REACH if origin[a] + mask_block.shape[a] == shape[a] else 0)
           for a in range(ndim)]
    padded = np.pad(mask_block.astype(np.float32), pad, mode="edge")
    soft = ndimage.gaussian_filter(padded, sigma=[sigma] * ndim, mode="nearest")
    return soft[tuple(slice(p[0], p[0] + n) for p, n in zip(pad, mask_block.shape))]


def interface_terms(soft: np.ndarray, origin, lo, hi, shape, spacing,
                    sample: np.ndarray | None = None) -> tuple[float, float | None]:
    """(area, integral mean curvature) of the owned triangles in 3D, or (boundary length,
    None) of the owned contour steps in 2D.

    ``soft`` is the smoothed mask over the global box at ``origin`` (``HALO`` voxels
    beyond [lo, hi) where the scan continues); ``sample`` the region of interest over the
    same box, or None: then, as in the whole-scan count, only the interface inside it
    counts.
    """
    ndim = len(shape)
    spacing = np.asarray(spacing, dtype=np.float64)
    owned_hi = [min(hi[a], shape[a] - 1) for a in range(ndim)]
    if any(h <= l for l, h in zip(lo, owned_hi)):  # a last slab owns no square or cube
        return 0.0, (None if ndim == 2 else 0.0)
    if ndim == 2:
        from skimage.measure import find_contours

        start = [lo[a] - origin[a] for a in range(2)]
        region = soft[tuple(slice(s, s + (h - l) + 1) for s, l, h in zip(start, lo, owned_hi))]
        total = 0.0
        for contour in find_contours(region, 0.5):
            steps = np.linalg.norm(np.diff(contour * spacing, axis=0), axis=1)
            if sample is not None:
                middle = np.rint(0.5 * (contour[1:] + contour[:-1]) + np.asarray(lo)
                                 ).astype(np.int64)
                middle = np.clip(middle, 0, np.array(shape) - 1) - np.asarray(origin)
                steps = steps[sample[tuple(middle.T)]]
            total += float(np.sum(steps))
        return total, None
    first = [max(lo[a] - 1, 0) for a in range(3)]
    stop = [min(hi[a] + 2, shape[a]) for a in range(3)]
    region = soft[tuple(slice(f - o, s - o) for f, s, o in zip(first, stop, origin))]
    vertices, faces = _minkowski.interface_mesh(region, spacing)
    if len(faces) == 0:
        return 0.0, 0.0
    centre = vertices[faces].mean(axis=1) / spacing + np.asarray(first)
    if sample is not None:
        voxel = np.clip(np.rint(centre).astype(np.int64), 0, np.array(shape) - 1)
        keep = sample[tuple((voxel - np.asarray(origin)).T)]
        faces, centre = faces[keep], centre[keep]
    cube = np.floor(centre).astype(np.int64)
    owned = np.all((cube >= np.asarray(lo)) & (cube < np.asarray(owned_hi)), axis=1)
    area, curvature = _minkowski.owned_terms(vertices.astype(np.float64), faces, owned)
    return float(area), float(curvature)
