"""Stores opened for out-of-core work: a lazy, picklable view of their spatial axes.

:func:`open_chunked` opens a zarr array or OME-Zarr image without reading voxel data and
returns a :class:`ChunkedArray`, which the engine and the porosity path slice one box at a
time (they take any array with ``shape``, ``dtype``, ``chunks`` and ``__getitem__``; this
one adds the voxel size, unit and what the reader noticed). Dask workers unpickle it and
read the store themselves.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError

#: Chunk edge used when the array has no chunks of its own (a numpy array).
DEFAULT_CHUNK_EDGE = 128


def chunks_of(array) -> tuple[int, ...]:
    """The chunk shape of ``array``: zarr's, dask's first block per axis, or a default
    edge of :data:`DEFAULT_CHUNK_EDGE` for an unchunked array."""
    own = getattr(array, "chunks", None)
    if isinstance(own, tuple) and own and isinstance(own[0], tuple):  # dask: per-axis tuples
        own = tuple(c[0] for c in own)
    if own is None:
        return tuple(min(int(n), DEFAULT_CHUNK_EDGE) for n in array.shape)
    return tuple(int(c) for c in own)


class ChunkedArray:
    """The 2D or 3D spatial view of a stored array, sliced lazily.

    ``array`` is anything with ``shape``, ``dtype`` and slicing (zarr.Array, numpy, dask);
    ``fixed`` maps stored axis positions to the index taken there (a channel or a time
    point), so only the spatial axes remain. ``notes`` are what the reader noticed (such as
    chunks the store does not hold).
    """

    def __init__(self, array, *, fixed=None, spacing=(), unit="px", source="", chunks=None,
                 notes=()):
        self.array = array
        self.fixed = dict(fixed or {})
        stored = tuple(int(n) for n in array.shape)
        self.axes = [i for i in range(len(stored)) if i not in self.fixed]
        self.shape = tuple(stored[i] for i in self.axes)
        self.dtype = np.dtype(array.dtype)
        own = chunks_of(array)
        self.chunks = (tuple(int(c) for c in chunks) if chunks is not None
                       else tuple(own[i] for i in self.axes))
        self.spacing = tuple(float(s) for s in spacing) or (1.0,) * len(self.shape)
        self.unit = unit
        self.source = source
        self.notes = tuple(notes)

    @property
    def ndim(self) -> int:
        return len(self.shape)

    def __getitem__(self, index) -> np.ndarray:
        """Slices of the spatial axes (a tuple of slices, one per axis)."""
        index = index if isinstance(index, tuple) else (index,)
        spatial = iter(index)
        full = tuple(self.fixed[i] if i in self.fixed else next(spatial, slice(None))
                     for i in range(len(self.axes) + len(self.fixed)))
        try:
            return np.asarray(self.array[full])
        except Exception as exc:
            raise InputError(f"{self.source or 'The array'} could not be read at {index}; a "
                             f"chunk may be missing or corrupt "
                             f"({' '.join(str(exc).split())[:100]}).") from None


def open_chunked(path, *, level: int = 0, channel=None, timepoint=None, chunks=None,
                 spacing=None, unit=None) -> ChunkedArray:
    """Open a zarr array or OME-Zarr image for out-of-core work, reading no voxel data.

    Axes, voxel size and unit come from the OME-Zarr metadata (as :func:`voxtopo.load`
    reads them); a channel or time axis longer than one needs ``channel`` / ``timepoint``.

    Parameters
    ----------
    path : str or Path
        A zarr array or OME-Zarr image.
    level : int
        The resolution level of an OME-Zarr pyramid; 0 is the full one.
    channel, timepoint : int, optional
        The index taken on a channel or time axis.
    chunks : tuple of int, optional
        The block shape the work is cut into, in the spatial axes' order; default the
        store's own chunks.
    spacing : tuple of float, optional
        Voxel size, winning over the metadata.
    unit : str, optional
        Unit of the spacing, winning over the metadata.

    Returns
    -------
    ChunkedArray
        The 2D or 3D spatial view, with its spacing, unit, source and chunks.

    Raises
    ------
    InputError
        For a path that is not a zarr store, a channel or time axis left unchosen or
        chosen out of range, or an array without 2 or 3 spatial axes.
    """
    import zarr

    from ._zarr import is_zarr, open_zarr

    path = Path(path)
    if not path.exists():
        raise InputError(f"No zarr store at {path}; check the path.")
    if not is_zarr(path):
        raise InputError(f"{path} is not a zarr store; the out-of-core path reads zarr and "
                         f"OME-Zarr (convert other formats, or drop --out-of-core).")
    layout = open_zarr(path, level=level)
    node = zarr.open(str(path), mode="r")
    array = node if isinstance(node, zarr.Array) else node[layout.metadata["dataset"]]
    letters = layout.axes or ("ZYX"[3 - len(layout.shape):] if len(layout.shape) <= 3 else "")
    if not letters:
        raise InputError(f"{path} holds a {len(layout.shape)}D array with no axis names; "
                         f"the out-of-core path needs a 2D or 3D array.")
    fixed = {}
    for i, letter in enumerate(letters):
        if letter in "TC":
            chosen = timepoint if letter == "T" else channel
            size = layout.shape[i]
            what = "time points" if letter == "T" else "channels"
            option = "--timepoint" if letter == "T" else "--channel"
            if chosen is None and size > 1:
                raise InputError(f"{path} has {size} {what}; choose one with {option}.")
            chosen = 0 if chosen is None else int(chosen)
            if not 0 <= chosen < size:
                raise InputError(f"{option.lstrip('-')}={chosen} is out of range for {path}, "
                                 f"which has {size}.")
            fixed[i] = chosen
    spatial = [a for a in letters if a in "ZYX"]
    if len(spatial) not in (2, 3):
        raise InputError(f"{path} has the axes {letters}; the out-of-core path needs 2 or 3 "
                         f"spatial axes.")
    own_spacing = tuple(layout.spacing.get(a, 1.0) for a in spatial)
    return ChunkedArray(array, fixed=fixed, spacing=tuple(spacing) if spacing else own_spacing,
                        unit=unit or layout.unit, source=str(path), chunks=chunks,
                        notes=layout.metadata.get("notes", ()))
