"""Exact Euclidean distance transforms of a chunked array, one axis at a time.

The squared distance to the nearest feature voxel is separable (Felzenszwalb & Huttenlocher
2012; Meijster, Roerdink & Hesselink 2000): a one-dimensional lower-envelope pass along z,
then along y on its output, then along x, gives the exact squared distance. Each pass is one
dask task per *line block*: whole along the pass axis, one chunk wide along the others, so
a task holds ``n_axis * c * c`` values. Between passes the values go through a float32
store in the scratch folder, chunked like the input; the next pass reads its own blocks,
whole along its own axis, from those chunks (the rechunking between passes)::

    pass z: [|||]  -> store A      blocks whole along z
    pass y: [===]  <- A -> store B  blocks whole along y
    pass x: [...]  <- B -> store A  blocks whole along x

A task only writes the block it read, and never into the store it reads, so a task that
is run again after its worker died finds its input intact.

Two phases that fill the scan between them (pores and solid, no region of interest) need
one store, not two (:func:`signed_distance`): a voxel keeps only the transform it is not
a feature of, since the other one is 0 there at every pass (as
:func:`voxtopo.porosity._edt.signed_squared_distance` does in memory), and the last pass
writes the signed distance itself::

    pass z: [|||]  <- phase -> store A
    pass y: [===]  <- A -> store B        (A removed)
    pass x: [...]  <- B -> signed distance (B removed)

The one-dimensional kernel is :func:`voxtopo.porosity._edt.squared_distance_pass`.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from itertools import product
from pathlib import Path

import numpy as np

#: Bytes per voxel of one pass task and transform: the float32 line block being passed,
#: the block as read, and the kernel's lower-envelope buffers (a few per voxel of a line).
BYTES_PER_PASS_VOXEL = 4 + 4 + 8


@dataclass(frozen=True)
class Feature:
    """The feature voxels of one transform: where ``source`` holds one of ``codes``."""

    codes: tuple

    def of(self, block: np.ndarray) -> np.ndarray:
        return np.isin(block, self.codes)


def line_blocks(shape, chunks, axis: int):
    """(lo, hi) of the blocks of a pass along ``axis``: whole along it, one chunk wide
    along the other axes."""
    starts = [range(0, n, n if a == axis else c) for a, (n, c) in enumerate(zip(shape, chunks))]
    for lo in product(*starts):
        hi = tuple(n if a == axis else min(s + c, n)
                   for a, (s, n, c) in enumerate(zip(lo, shape, chunks)))
        yield lo, hi


def _box(lo, hi):
    return tuple(slice(a, b) for a, b in zip(lo, hi))


def _new_store(path: Path, shape, chunks):
    """An empty float32 store of a pass (+inf until written), replacing any left there."""
    import zarr

    if path.exists():
        shutil.rmtree(path)
    return zarr.create_array(str(path), shape=shape, chunks=tuple(chunks), dtype=np.float32,
                             fill_value=np.inf)


def _two_phase_task(source, pore_codes, store_in, store_out, lo, hi, axis, step, last):
    """One line block of one pass of :func:`signed_distance`; returns the largest finite
    distance of the block on the last pass, else 0."""
    from . import _edt

    box = _box(lo, hi)
    pores = np.isin(np.asarray(source[box]), pore_codes)
    squared = (np.full(pores.shape, np.inf, np.float32) if store_in is None
               else np.array(store_in[box], dtype=np.float32))
    _edt.two_phase_pass(squared, pores, axis, step)
    if not last:
        store_out[box] = squared
        return 0.0
    distance = np.sqrt(squared, out=squared)
    finite = distance[np.isfinite(distance)]
    largest = float(finite.max()) if finite.size else 0.0
    np.negative(distance, out=distance, where=pores)
    store_out[box] = distance
    return largest


def signed_distance(source, pore_codes: tuple, spacing, folder: Path, distance, *, chunks,
                    compute, progress=None) -> float:
    """Write into ``distance`` the signed distance of a scan whose voxels are all pore or
    solid: -d in the pores, +d in the solid, d to the nearest voxel of the other phase.

    Parameters
    ----------
    source : array-like
        Sliceable like a zarr array (the phase codes); a voxel is a pore when its code is
        one of ``pore_codes``.
    spacing, chunks, compute, progress :
        As for :func:`squared_distances`.
    folder : Path
        Scratch folder for the passes' stores (removed once read).
    distance : zarr array
        float32, the shape of ``source``; a phase absent from the whole scan leaves
        ``inf`` (or ``-inf``) everywhere.

    Returns
    -------
    float
        The largest finite distance.
    """
    import dask

    shape = tuple(int(n) for n in source.shape)
    ndim = len(shape)
    folder.mkdir(parents=True, exist_ok=True)
    task = dask.delayed(_two_phase_task, pure=False)
    if progress is not None:
        progress("distance transform", 0.0)
    store_in, path_in, largest = None, None, 0.0
    for axis in range(ndim):
        last = axis == ndim - 1
        path_out = None if last else folder / f"two-phase-{'ab'[axis % 2]}.zarr"
        store_out = distance if last else _new_store(path_out, shape, chunks)
        largest = max(compute([task(source, tuple(pore_codes), store_in, store_out, lo, hi,
                                    axis, float(spacing[axis]), last)
                               for lo, hi in line_blocks(shape, chunks, axis)]))
        if path_in is not None:
            shutil.rmtree(path_in)
        if progress is not None:
            progress("distance transform", (axis + 1) / ndim)
        store_in, path_in = store_out, path_out
    return largest


def _pass_task(source, feature, stores_in, stores_out, lo, hi, axis, step):
    """One line block of one pass, for every transform; returns the voxels done."""
    from . import _edt

    box = _box(lo, hi)
    if stores_in is None:
        block = np.asarray(source[box])
        squares = [np.where(f.of(block), np.float32(0), np.float32(np.inf)) for f in feature]
    else:
        squares = [np.array(store[box], dtype=np.float32) for store in stores_in]
    for squared, store in zip(squares, stores_out):
        _edt.squared_distance_pass(squared, axis, step)
        store[box] = squared
    return int(np.prod([b - a for a, b in zip(lo, hi)]))


def squared_distances(source, features: dict, spacing, folder: Path, *, chunks,
                      compute, progress=None) -> dict:
    """Squared Euclidean distance of every voxel to the nearest voxel of each feature.

    Parameters
    ----------
    source : array-like
        Sliceable like a zarr array (the phase codes of a scan).
    features : dict
        Name -> :class:`Feature`; each gives one transform.
    spacing : tuple of float
        Voxel size per axis; distances are in its unit.
    folder : Path
        Scratch folder for the stores of the passes (created, and left for the caller to
        remove with everything else in it).
    chunks : tuple of int
        Chunk shape of the stores and width of the line blocks.
    compute : callable
        Runs a list of dask delayed objects (the caller's scheduler and error handling).
    progress : callable(phase, fraction), optional

    Returns
    -------
    dict
        Name -> zarr array of float32 squared distances (``inf`` where the feature is
        absent from the whole array).
    """
    import dask

    shape = tuple(int(n) for n in source.shape)
    ndim = len(shape)
    names = list(features)
    folder.mkdir(parents=True, exist_ok=True)
    task = dask.delayed(_pass_task, pure=False)
    if progress is not None:
        progress("distance transform", 0.0)
    stores_in = None
    for axis in range(ndim):
        label = "ab"[axis % 2]
        stores_out = [_new_store(folder / f"{name}-{label}.zarr", shape, chunks)
                      for name in names]
        tasks = [task(source if stores_in is None else None,
                      [features[n] for n in names], stores_in, stores_out, lo, hi, axis,
                      float(spacing[axis]))
                 for lo, hi in line_blocks(shape, chunks, axis)]
        compute(tasks)
        if progress is not None:
            progress("distance transform", (axis + 1) / ndim)
        stores_in = stores_out
    return dict(zip(names, stores_in))
