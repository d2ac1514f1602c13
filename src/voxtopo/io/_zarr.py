"""OME-Zarr (NGFF 0.4 and 0.5) and plain zarr arrays, read into memory.

For an OME-Zarr group the ``multiscales`` metadata names the resolution levels
(``datasets``), their ``coordinateTransformations`` give the voxel size (a ``scale`` per
axis, times the multiscale's own scale when there is one) and ``axes`` give each axis's
name, type and unit. A plain zarr array names no axes and carries no voxel size.
Everything is opened read-only. (Reading volumes larger than memory chunk by chunk is the
out-of-core path's job, not this reader's.)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ._layout import Layout, check_dtype, convert, is_length, normalise_unit, seconds

_MARKERS = (".zgroup", ".zarray", ".zattrs", "zarr.json")


def is_zarr(path: Path) -> bool:
    return path.suffix.lower() == ".zarr" or (
        path.is_dir() and any((path / m).is_file() for m in _MARKERS))


def _short(exc: BaseException) -> str:
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text[:117] + "..." if len(text) > 120 else text


def open_zarr(path: Path, level: int = 0) -> Layout:
    import zarr

    try:
        node = zarr.open(str(path), mode="r")
    except Exception as exc:
        raise InputError(f"{path} is not a readable zarr store ({_short(exc)}).") from None
    if isinstance(node, zarr.Array):
        if level != 0:
            raise InputError(f"level={level} is out of range: {path} is a plain zarr array "
                             f"with a single resolution level (0).")
        return _layout(node, path, axes="", spacing={}, unit="px",
                       metadata={"format": "zarr"}, labelled=False)
    attrs = dict(node.attrs)
    ome = attrs.get("ome", attrs)
    multiscales = ome.get("multiscales") if isinstance(ome, dict) else None
    if not multiscales:
        arrays = sorted(name for name, _ in node.arrays())
        hint = (f"name one of its arrays, e.g. {path / arrays[0]}" if arrays
                else "it holds no arrays")
        raise InputError(f"{path} is a zarr group without OME multiscales metadata; {hint}.")
    scales = multiscales[0]
    datasets = scales.get("datasets") or []
    if not 0 <= level < len(datasets):
        raise InputError(f"level={level} is out of range: {path} has {len(datasets)} "
                         f"resolution levels, numbered 0 to {len(datasets) - 1}.")
    dataset = datasets[level]
    try:
        array = node[dataset["path"]]
    except Exception as exc:
        raise InputError(f"{path} names level {level} as '{dataset.get('path')}' but it cannot "
                         f"be opened ({_short(exc)}).") from None
    axes_meta = scales.get("axes")
    ndim = len(array.shape)
    if axes_meta is None:
        letters, units = "", [None] * ndim
    else:
        letters, units = _axes(axes_meta, path, ndim)
    scale = _scale(dataset.get("coordinateTransformations"), ndim)
    outer = _scale(scales.get("coordinateTransformations"), ndim)
    spacing, unit = {}, "px"
    if letters:
        spatial = [(a, s * o, u) for a, s, o, u in zip(letters, scale, outer, units)
                   if a in "ZYX"]
        unit = next((normalise_unit(u) for a, _, u in reversed(spatial) if u), "px")
        for axis, size, axis_unit in spatial:
            axis_unit = normalise_unit(axis_unit) if axis_unit else unit
            if axis_unit != unit and is_length(axis_unit) and is_length(unit):
                size = convert(size, axis_unit, unit)
            spacing[axis] = float(size)
    frame_interval = None
    if "T" in letters:
        at = letters.index("T")
        frame_interval = seconds(scale[at] * outer[at], units[at] or "s")
    metadata = {"format": "ome-zarr", "ngff_version": str(scales.get("version",
                                                                    ome.get("version", ""))),
                "level": level, "levels": len(datasets), "dataset": str(dataset["path"]),
                "axes": letters or None, "spacing_from": "ome-zarr" if spacing else "none"}
    layout = _layout(array, path, axes=letters, spacing=spacing, unit=unit,
                     metadata=metadata, labelled=bool(letters))
    layout.frame_interval = frame_interval
    return layout


def _axes(axes_meta, path: Path, ndim: int):
    if len(axes_meta) != ndim:
        raise InputError(f"{path} names {len(axes_meta)} axes but its array has {ndim}.")
    letters, units = [], []
    for axis in axes_meta:
        axis = axis if isinstance(axis, dict) else {"name": axis}
        name = str(axis.get("name", "")).lower()
        kind = str(axis.get("type", "")).lower()
        if kind == "time" or name == "t":
            letter = "T"
        elif kind == "channel" or name == "c":
            letter = "C"
        elif name in ("z", "y", "x"):
            letter = name.upper()
        else:
            raise InputError(f"{path} has an axis '{name}' of type '{kind}' that voxtopo "
                             f"cannot interpret; it reads t, c, z, y and x.")
        letters.append(letter)
        units.append(axis.get("unit"))
    return "".join(letters), units


def _scale(transforms, ndim: int) -> list[float]:
    for transform in transforms or []:
        if transform.get("type") == "scale" and "scale" in transform:
            values = [float(v) for v in transform["scale"]]
            if len(values) == ndim:
                return values
    return [1.0] * ndim


def missing_chunks_note(array, path) -> str | None:
    """A sentence saying how many chunks of ``array`` are not stored, or None.

    zarr reads a chunk that is not stored as the array's fill value. It leaves out, by
    design, chunks that hold only that value (zarr-python 3 does so by default), so a
    missing chunk is not in itself damage, and a store is not refused for it; but a chunk
    lost in a copy looks exactly the same, so the user is told, with the count.
    """
    try:
        stored, total = int(array.nchunks_initialized), int(array.nchunks)
    except Exception as exc:
        raise InputError(f"{path} could not be listed to check its chunks "
                         f"({_short(exc)}).") from None
    if stored >= total:
        return None
    return (f"{total - stored} of {total} chunks of {path} are not stored and were read as "
            f"the fill value {array.fill_value}: zarr leaves out chunks that hold only that "
            f"value, but a lost chunk looks the same, so check the store if that region "
            f"should hold data")


def _layout(array, path: Path, *, axes, spacing, unit, metadata, labelled) -> Layout:
    dtype = check_dtype(array.dtype, str(path))
    metadata = dict(metadata, chunks=[int(c) for c in array.chunks])
    missing = missing_chunks_note(array, path)
    if missing:
        metadata["notes"] = [missing]

    def read(index: tuple) -> np.ndarray:
        try:
            return np.ascontiguousarray(np.asarray(array[index]), dtype=dtype.newbyteorder("="))
        except Exception as exc:
            raise InputError(f"{path} could not be read, a chunk may be missing or corrupt "
                             f"({_short(exc)}).") from None

    return Layout(axes=axes, shape=tuple(int(n) for n in array.shape), dtype=dtype, read=read,
                  spacing=spacing, unit=unit, metadata=metadata, labelled=labelled)
