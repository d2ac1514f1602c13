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
    import zarr

    shape = tuple(int(n) for n in source.shape)
    ndim = len(shape)
    names = list(features)
    folder.mkdir(parents=True, exist_ok=True)
    task = dask.delayed(_pass_task, pure=False)
    stores_in = None
    for axis in range(ndim):
        label = "ab"[axis % 2]
        stores_out = []
        for name in names:
            path = folder / f"{name}-{label}.zarr"
            if path.exists():
                shutil.rmtree(path)
            stores_out.append(zarr.create_array(str(path), shape=shape, chunks=tuple(chunks),
                                                dtype=np.float32, fill_value=np.inf))
        tasks = [task(source if stores_in is None else None,
                      [features[n] for n in names], stores_in, stores_out, lo, hi, axis,
                      float(spacing[axis]))
                 for lo, hi in line_blocks(shape, chunks, axis)]
        compute(tasks)
        if progress is not None:
            progress("distance transform", (axis + 1) / ndim)
        stores_in = stores_out
    return dict(zip(names, stores_in))
