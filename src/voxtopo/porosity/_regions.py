"""Pore regions: the basin of each pore of a signed distance transform, at its death level.

A pore of the sublevel sweep of the signed distance (negative in the pore phase) is born at
its deepest voxel and dies at the level where it merges with an older pore. Its region is
the connected part of ``{distance < level}`` that holds its birth voxel, where ``level`` is
its death level capped at 0 (the pore/solid boundary)::

    distance   -3 -2 -1 -2 -4 -1 +1
    pore A      A  A  .  .  .  .  .     A born at -3, dies at -1 (merges into B)
    pore B      B  B  B  B  B  B  .     B born at -4, essential: its level is 0

Regions of different pores are nested or disjoint; a voxel gets the label of the innermost
region that holds it (the output above: ``A A B B B B 0``). This is the partition a
flooding of the distance from the pore births produces when each pore stops at its death.

The kernel floods once with a union-find under the elder rule, keeping for every pore the
older pore it merged into; a second pass climbs that merge tree to the nearest chosen pore
whose level lies above the voxel. :func:`pore_regions_by_levels` computes the same partition
straight from the definition (one connected-component labelling per pore), slow but easy to
read, and is the kernel's twin in the tests.

The kernels release the GIL (``nogil=True``) so that the viewer stays responsive while a
worker thread floods a large volume. Neighbour offsets and the union-find ``find`` are the
basin sweeps' own (:mod:`._sweep`). :func:`regions_of` labels the pores of a
:class:`PoreAnalysis` by their ``id``.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from scipy import ndimage

from ..diagram import AXES_3D
from ..errors import InputError
from ._sweep import _find, _neighbour, as_3d_shape, neighbour_offsets

__all__ = ["pore_regions", "pore_regions_by_levels", "regions_of"]


def _check(distance, birth_voxels, levels, neighbourhood):
    distance = np.asarray(distance)
    if distance.ndim not in (2, 3):
        raise InputError(f"Pore regions need a 2D or 3D distance transform, got shape "
                         f"{distance.shape}.")
    allowed = (4, 8) if distance.ndim == 2 else (6, 26)
    if neighbourhood not in allowed:
        raise InputError(f"Neighbourhood for a {distance.ndim}D distance transform should be "
                         f"one of {list(allowed)}, got {neighbourhood}.")
    birth_voxels = np.asarray(birth_voxels, dtype=np.int64).reshape(-1, distance.ndim)
    levels = np.asarray(levels, dtype=np.float64).ravel()
    if len(levels) != len(birth_voxels):
        raise InputError(f"Got {len(birth_voxels)} pore birth voxels but {len(levels)} death "
                         f"levels; give one level per pore.")
    if len(birth_voxels) and ((birth_voxels < 0).any()
                              or (birth_voxels >= np.array(distance.shape)).any()):
        raise InputError(f"A pore birth voxel lies outside the volume of shape "
                         f"{distance.shape}.")
    return distance.astype(np.float64, copy=False), birth_voxels, np.minimum(levels, 0.0)


def pore_regions(distance, birth_voxels, death_levels, neighbourhood: int = 26,
                 progress=None) -> np.ndarray:
    """Label each pore's basin of voxels at its death level.

    Parameters
    ----------
    distance : ndarray
        Signed distance transform, negative in the pore phase (2D or 3D).
    birth_voxels : (n, ndim) array of int
        Voxel index of each pore's birth (the ``birth_voxel_z, birth_voxel_y, birth_voxel_x`` of a
        diagram).
    death_levels : (n,) array of float
        Each pore's death; ``inf`` for a pore that never dies. Levels above 0 count as 0.
    neighbourhood : {4, 8} in 2D, {6, 26} in 3D
        Must be the neighbourhood the diagram was computed with.
    progress : callable(phase, fraction), optional
        Called as the flooding advances; raising voxtopo.Cancelled in it stops the work.

    Returns
    -------
    ndarray of int32, same shape as ``distance``
        ``k + 1`` on the region of pore ``k``, 0 elsewhere (solid, and pore voxels that
        belong to no listed pore).

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[-3., -2, -1, -2, -4, -1, 1]])
    >>> pore_regions(d, [[0, 0], [0, 4]], [-1.0, np.inf], neighbourhood=8).tolist()
    [[1, 1, 2, 2, 2, 2, 0]]
    """
    distance, birth_voxels, levels = _check(distance, birth_voxels, death_levels, neighbourhood)
    flat = distance.ravel()
    shape3 = as_3d_shape(distance.shape)
    seed_of_voxel = np.full(flat.size, -1, dtype=np.int32)
    if len(birth_voxels):
        seed_flat = np.ravel_multi_index(tuple(birth_voxels.T), distance.shape)
        seed_of_voxel[seed_flat] = np.arange(len(birth_voxels), dtype=np.int32)
    if progress is not None:
        progress("pore regions", 0.0)
    in_pores = np.flatnonzero(flat < 0)
    order = in_pores[np.argsort(flat[in_pores], kind="stable")]
    if progress is not None:
        progress("pore regions", 0.3)
    entry_pore, parent_pore, merge_level, tag = _flood(
        flat, order, np.array(shape3, dtype=np.int64), neighbour_offsets(neighbourhood),
        seed_of_voxel, levels)
    if progress is not None:
        progress("pore regions", 0.8)
    labels = _assign(flat, order, entry_pore, parent_pore, merge_level, tag, levels)
    if progress is not None:
        progress("pore regions", 1.0)
    return labels.reshape(distance.shape)


@njit(cache=True, nogil=True)
def _elder_first(a, b, values, tag, levels):
    """True when pore ``a`` is older than pore ``b``: born lower; on a tie, the one a
    diagram pore is attached to (the longer-lived diagram pore first), then voxel order."""
    if values[a] != values[b]:
        return values[a] < values[b]
    level_a = levels[tag[a]] if tag[a] >= 0 else -np.inf
    level_b = levels[tag[b]] if tag[b] >= 0 else -np.inf
    if level_a != level_b:
        return level_a > level_b
    return a < b


@njit(cache=True, nogil=True)
def _flood(values, order, shape3, offsets, seed_of_voxel, levels):
    n = values.size
    parent = np.full(n, -1, dtype=np.int64)        # union-find over entered voxels
    pore_of_root = np.full(n, -1, dtype=np.int64)  # the pore alive in each component
    entry_pore = np.full(n, -1, dtype=np.int64)    # the pore alive when a voxel entered
    parent_pore = np.full(n, -1, dtype=np.int64)   # the older pore a pore merged into
    merge_level = np.full(n, np.inf)               # the level at which it merged
    tag = np.full(n, -1, dtype=np.int32)           # diagram pore attached to a pore
    nz, ny, nx = shape3[0], shape3[1], shape3[2]
    roots = np.empty(offsets.shape[0], dtype=np.int64)
    for v in order:
        z = v // (ny * nx)
        y = (v // nx) % ny
        x = v % nx
        count = 0
        for k in range(offsets.shape[0]):
            w = _neighbour(offsets, k, z, y, x, nz, ny, nx)
            if w < 0 or parent[w] < 0:
                continue
            r = _find(parent, w)
            seen = False
            for j in range(count):
                if roots[j] == r:
                    seen = True
            if not seen:
                roots[count] = r
                count += 1
        parent[v] = v
        if count == 0:
            pore_of_root[v] = v
            if seed_of_voxel[v] >= 0:
                tag[v] = seed_of_voxel[v]
            entry_pore[v] = v
            continue
        elder_root = roots[0]
        for j in range(1, count):
            if _elder_first(pore_of_root[roots[j]], pore_of_root[elder_root], values, tag,
                            levels):
                elder_root = roots[j]
        elder = pore_of_root[elder_root]
        if seed_of_voxel[v] >= 0 and tag[elder] < 0:
            tag[elder] = seed_of_voxel[v]
        for j in range(count):
            r = roots[j]
            if r != elder_root:
                parent_pore[pore_of_root[r]] = elder
                merge_level[pore_of_root[r]] = values[v]
                parent[r] = elder_root
        parent[v] = elder_root
        entry_pore[v] = elder
    return entry_pore, parent_pore, merge_level, tag


@njit(cache=True, nogil=True)
def _nearest_tagged(pore, parent_pore, merge_level, tag, memo_pore, memo_level):
    """The pore itself or the nearest older pore above it in the merge tree that carries a
    diagram pore (-1 when none), and the level at which the path from ``pore`` joined it
    (-inf when it is ``pore`` itself). Merge levels only grow along a path, so the last
    one is the highest. Answers are remembered in ``memo_pore`` (-2 = not yet known)."""
    p = pore
    while p >= 0 and tag[p] < 0 and memo_pore[p] == -2:
        p = parent_pore[p]
    if p < 0:
        found, level = -1, np.inf
    elif tag[p] >= 0:
        found, level = p, -np.inf
    else:
        found, level = memo_pore[p], memo_level[p]
    q = pore
    while q >= 0 and q != p:
        memo_pore[q] = found
        # the step from the last untagged pore into the found one sets the level
        if parent_pore[q] == found:
            level = merge_level[q]
        q = parent_pore[q]
    q = pore
    while q >= 0 and q != p:
        memo_level[q] = level
        q = parent_pore[q]
    return found, level


@njit(cache=True, nogil=True)
def _assign(values, order, entry_pore, parent_pore, merge_level, tag, levels):
    labels = np.zeros(values.size, dtype=np.int32)
    memo_pore = np.full(values.size, -2, dtype=np.int64)
    memo_level = np.full(values.size, np.inf)
    for v in order:
        reach = values[v]  # the highest level on the way from the voxel to the pore
        p = entry_pore[v]
        while p >= 0:
            found, joined = _nearest_tagged(p, parent_pore, merge_level, tag, memo_pore,
                                            memo_level)
            if found < 0:
                break
            reach = max(reach, joined)
            if reach < levels[tag[found]]:
                labels[v] = tag[found] + 1
                break
            # outside this pore's region: it lies in the region of a pore further up
            reach = max(reach, merge_level[found])
            p = parent_pore[found]
    return labels


def pore_regions_by_levels(distance, birth_voxels, death_levels, neighbourhood: int = 26):
    """The same partition as :func:`pore_regions`, straight from the definition.

    For each pore, outermost first, label the connected part of ``{distance < level}``
    holding its birth voxel; inner regions overwrite outer ones. One labelling per pore:
    for tests on small inputs.
    """
    distance, birth_voxels, levels = _check(distance, birth_voxels, death_levels, neighbourhood)
    structure = ndimage.generate_binary_structure(
        distance.ndim, distance.ndim if neighbourhood in (8, 26) else 1)
    labels = np.zeros(distance.shape, dtype=np.int32)
    for k in np.argsort(-levels, kind="stable"):
        below, _ = ndimage.label(distance < levels[k], structure=structure)
        component = below[tuple(birth_voxels[k])]
        if component:
            labels[below == component] = k + 1
    return labels


def regions_of(analysis, progress=None) -> np.ndarray:
    """The region of every pore of a :func:`voxtopo.porosity.analyse` result, labelled by
    the pore's ``id`` (0: solid, outside the region of interest, or no pore).

    The same partition as the pores' ``body_volume`` (``body_area`` in 2D): the count of
    voxels labelled ``id`` times the voxel volume is that pore's own size.

    Parameters
    ----------
    analysis : PoreAnalysis
        What :func:`voxtopo.porosity.analyse` returned.
    progress : callable(phase, fraction), optional
        Called as the flooding goes on; may raise :class:`~voxtopo.Cancelled`.

    Returns
    -------
    ndarray of int
        The scan's shape; each voxel holds the ``id`` of its pore, or 0.
    """
    pores = analysis.pores
    distance = analysis.distance
    axes = AXES_3D[3 - distance.ndim:]
    birth_voxels = pores[[f"body_voxel_{a}" for a in axes]].to_numpy(dtype=np.int64)
    throat = pores["throat_radius"].to_numpy(dtype=np.float64)
    levels = np.where(np.isnan(throat), np.inf, -throat)
    field = distance.data
    if analysis.sample is not None:
        field = np.where(analysis.sample, field, np.inf)
    labels = pore_regions(field, birth_voxels, levels,
                          analysis.diagram.neighbourhood, progress=progress)
    ids = np.concatenate([[0], pores["id"].to_numpy(dtype=np.int32)])
    return ids[labels]
