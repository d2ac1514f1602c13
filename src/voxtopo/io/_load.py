"""voxtopo.load: one entry point for every supported scan format."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..memory import ensure_fits
from ..scan import FRAME, Scan, TimeLapse
from ._layout import AXES, Layout, convert, is_length, nbytes, normalise_unit, unlabelled_axes
from ._npy import open_npy
from ._raw import RAW_SUFFIXES, open_raw
from ._slices import open_png, open_slices, slice_files_in_folder, slice_files_matching
from ._tiff import TIFF_SUFFIXES, open_tiff
from ._zarr import is_zarr, open_zarr

_GLOB_CHARACTERS = set("*?[")


def load(path, *, spacing=None, unit=None, channel=None, timepoint=None, shape=None,
         dtype=None, byte_order="little", offset=0, level=0, mapped=False) -> Scan:
    """Read a 2D image or 3D volume with its voxel size.

    Parameters
    ----------
    path : str or Path
        A file (``.tif``/``.tiff`` incl. ImageJ and OME-TIFF, ``.png``, ``.npy``, a raw
        file, an OME-Zarr or zarr store), a folder of 2D TIFF or PNG slices, or a glob
        pattern of slices such as ``"scan/slice_*.tif"``. Slices are stacked in natural
        order (``s2`` before ``s10``).
    spacing : float or sequence of float, optional
        Voxel size in (z, y, x) order (one number for all axes); wins over the metadata.
    unit : str, optional
        Unit of the voxel size ("um", "nm", "mm", ...). Given alone, the voxel size found in
        the file is converted to it when both are lengths.
    channel, timepoint : int, optional
        Which channel (of an RGB or multi-channel file) and which time point (of a time
        series) to read. A file with several of either needs the option. For formats that
        name no axes (.npy, raw, plain zarr) the channel is the last axis and the time point
        the first.
    shape, dtype, byte_order, offset : optional
        Describe a raw file: its (z, y, x) shape, NumPy type, "little" or "big" byte order,
        and the number of header bytes before the data.
    level : int
        Resolution level of a multiscale OME-Zarr or pyramidal TIFF (0 is the finest).
    mapped : bool
        Map the file read-only instead of reading it, where it holds the array as it is
        (.npy in C order, raw, an uncompressed TIFF; in this machine's byte order); other
        files are read. The data are then read from the file as they are used, and
        :func:`voxtopo.memory.release_pages` gives their memory back. The file must not
        change while the scan is in use.

    Returns
    -------
    Scan
        With ``data`` (y, x) or (z, y, x), ``spacing``, ``unit``, ``source`` (the path as
        given) and ``metadata`` (what the reader found, as JSON values).

    Raises
    ------
    InputError
        Missing path, unknown format, damaged file, several channels or time points without
        the option that picks one, and the like; the message is one sentence.
    TooBigError
        The data would not fit in the memory available (estimated before reading).

    Notes
    -----
    Nothing is ever written: files are opened read-only, zarr stores with ``mode="r"``,
    .npy files without pickles. When the file gives the x and y voxel size but no z
    spacing, z is taken equal to x and ``metadata["notes"]`` says so. NaN voxels are kept
    as they are; the filtration refuses them unless told how to fill them.

    Examples
    --------
    >>> import voxtopo
    >>> scan = voxtopo.load("sample_volumes/beads.tif")   # from the repository's root
    >>> scan.shape, scan.spacing, scan.unit
    ((96, 96, 96), (2.5, 2.5, 2.5), 'um')
    """
    for name, value in (("channel", channel), ("timepoint", timepoint), ("level", level)):
        if value is not None and (isinstance(value, bool)
                                  or not isinstance(value, (int, np.integer)) or value < 0):
            raise InputError(f"{name}={value!r} must be a whole number, 0 or more.")
    source = str(path)
    layout = _open(path, shape=shape, dtype=dtype, byte_order=byte_order, offset=offset,
                   level=int(level))
    try:
        return _scan(layout, source, spacing=spacing, unit=unit, channel=channel,
                     timepoint=timepoint, mapped=mapped)
    finally:
        layout.close()


def load_on_grid_of(scan: Scan, path, what: str) -> Scan:
    """A mask of ``scan`` (pores, or the sample) read from ``path``, on the scan's voxel
    size; a file of another shape is refused in one sentence naming ``what`` it is."""
    other = load(path)
    if other.shape != scan.shape:
        raise InputError(f"The {what} {path} has shape {other.shape} but the scan "
                         f"{scan.source or ''} has shape {scan.shape}; give a {what} of the "
                         f"same scan.")
    return other.with_data(other.data, spacing=scan.spacing, unit=scan.unit)


def load_timelapse(path, *, axes=None, frame_interval=None, spacing=None, unit=None,
                   channel=None, shape=None, dtype=None, byte_order="little", offset=0,
                   level=0) -> TimeLapse:
    """Read a time series of 2D images or 3D volumes with its frame interval.

    Parameters
    ----------
    path : str or Path
        Anything :func:`load` reads: an ImageJ hyperstack (T axis, ``finterval``), an
        OME-TIFF (T, ``TimeIncrement``), an OME-Zarr image with a time axis, a folder or
        glob pattern of frames (one 2D image per file, in natural order), .npy, raw.
    axes : str, optional
        The stored axes, one letter per axis from T, C, Z, Y, X (e.g. "TYX", "TZYX"), for
        files that name none or name them wrongly (a plain multi-page TIFF, a folder of
        frames, .npy); wins over the file's.
    frame_interval : float, optional
        Seconds between frames; wins over the file's. Without either, times are counted in
        frames (``time_unit`` "frame").
    spacing, unit, channel, shape, dtype, byte_order, offset, level
        As for :func:`load` (spacing in (y, x) or (z, y, x) order).

    Returns
    -------
    TimeLapse
        ``data`` (t, y, x) or (t, z, y, x).

    Raises
    ------
    InputError
        No time axis (and no ``axes`` saying which it is), an ``axes`` string that does
        not fit the file, several channels without ``channel``, and what :func:`load`
        refuses; one sentence each.

    Examples
    --------
    >>> import tempfile, pathlib, tifffile
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "beats.tif"
    >>> tifffile.imwrite(path, np.zeros((5, 4, 4), np.uint8), imagej=True,
    ...                  metadata={"axes": "TYX", "finterval": 0.2})
    >>> lapse = load_timelapse(path)
    >>> lapse.data.shape, lapse.frame_interval, lapse.time_unit
    ((5, 4, 4), 0.2, 's')
    """
    if channel is not None and (isinstance(channel, bool) or not isinstance(
            channel, (int, np.integer)) or channel < 0):
        raise InputError(f"channel={channel!r} must be a whole number, 0 or more.")
    source = str(path)
    layout = _open(path, shape=shape, dtype=dtype, byte_order=byte_order, offset=offset,
                   level=int(level))
    try:
        stored = _time_axes(layout, source, axes)
        index = []
        for letter, size in zip(stored, layout.shape):
            if letter != "C":
                index.append(slice(None))
            elif channel is None and size > 1:
                raise InputError(_pick_message(source, layout, [("C", size)]))
            elif channel is not None and channel >= size:
                raise InputError(f"channel={channel} is out of range: {source} has {size} "
                                 f"channels, numbered 0 to {size - 1}.")
            else:
                index.append(int(channel or 0))
        index = tuple(index)
        kept = "".join(a for a, i in zip(stored, index) if not isinstance(i, int))
        if kept not in ("TYX", "TZYX"):
            raise InputError(f"{source} has axes {stored} (shape {layout.shape}); a "
                             f"time-lapse needs T, Y, X and maybe Z, once a channel is "
                             f"picked.")
        expected = tuple(n for n, i in zip(layout.shape, index) if not isinstance(i, int))
        peak = layout.peak_bytes(index) if layout.peak_bytes else nbytes(expected, layout.dtype)
        ensure_fits(peak, f"Reading {source} ({'x'.join(map(str, expected))} of "
                          f"{layout.dtype})", "crop it, bin it or pick fewer frames first")
        data = layout.read(index)
        if data.shape != expected:
            raise InputError(f"{source} decoded to shape {data.shape} instead of {expected}; "
                             f"the file is probably damaged.")
        data = np.moveaxis(data, kept.index("T"), 0)
        spatial = kept.replace("T", "")
        notes: list[str] = []
        found_spacing, found_unit = _found_spacing(layout, spatial, notes)
        final_spacing, final_unit = _caller_wins(found_spacing, found_unit, spacing, unit,
                                                 spatial, source)
        interval, time_unit, interval_from = _interval(layout, frame_interval, source)
    finally:
        layout.close()
    if data.dtype == np.float16:
        data = data.astype(np.float32)
    metadata = dict(layout.metadata)
    metadata.update({"stored_axes": stored, "stored_shape": list(layout.shape),
                     "frame_interval_from": interval_from})
    if notes and spacing is None:
        metadata["notes"] = notes
    return TimeLapse(data, frame_interval=interval, time_unit=time_unit, spacing=final_spacing,
                     unit=final_unit, source=source, metadata=_jsonable(metadata))


def _time_axes(layout: Layout, source: str, axes) -> str:
    """The stored axes of a time-lapse: the caller's, else the file's, which must hold T."""
    if axes is not None:
        letters = str(axes).upper()
        if (len(letters) != len(layout.shape) or set(letters) - set(AXES)
                or len(set(letters)) != len(letters) or "T" not in letters):
            raise InputError(f"axes={axes!r} does not fit {source}, which holds "
                             f"{len(layout.shape)} axes of shape {layout.shape}; give one "
                             f"letter per axis from T, C, Z, Y, X with one T, e.g. "
                             f"{'TYX' if len(layout.shape) == 3 else 'TZYX'}.")
        return letters
    if layout.labelled and "T" in layout.axes:
        return layout.axes
    if layout.labelled and layout.axes.replace("C", "") == "YX":
        raise InputError(f"{source} is a single image (one frame, shape {layout.shape}); a "
                         f"rhythm needs a time series of frames covering at least two "
                         f"periods.")
    found = layout.axes if layout.labelled else "no named axes"
    raise InputError(f"{source} has no time axis (its axes read as {found}, shape "
                     f"{layout.shape}); if one of "
                     f"its axes is time, say which with axes= (--axes), e.g. "
                     f"{'TYX' if len(layout.shape) == 3 else 'TZYX'}.")


def _interval(layout: Layout, frame_interval, source: str):
    """(interval, time unit, where it came from): the caller's, the file's, or 1 frame."""
    if frame_interval is not None:
        try:
            value = float(frame_interval)
        except (TypeError, ValueError):
            value = float("nan")
        if not (math.isfinite(value) and value > 0):
            raise InputError(f"frame_interval={frame_interval!r} must be a positive number of "
                             f"seconds.")
        return value, "s", "caller"
    if layout.frame_interval is not None:
        return float(layout.frame_interval), "s", layout.metadata.get("format", "file")
    return 1.0, FRAME, "none (times counted in frames; give --frame-interval SECONDS)"


def read_header(path, *, shape=None, dtype=None, byte_order="little", offset=0,
                level=0) -> tuple[tuple[int, ...], np.dtype]:
    """(shape, dtype) of the gray image or volume in ``path``, from its header alone.

    The shape keeps the z, y and x axes (channels and timepoints are left out, as
    :func:`load` leaves them once one is picked); the file's voxels are not read. The
    arguments are :func:`load`'s, for raw files and pyramid levels. Bad paths and files
    get the same one-sentence :class:`~voxtopo.InputError` as :func:`load`.

    Parameters
    ----------
    path : str or Path
        A file, folder of slices or zarr store :func:`load` reads.
    shape, dtype, byte_order, offset : optional
        The layout of a raw file (its shape in z, y, x order, its voxel type, "little" or
        "big", bytes before the first voxel).
    level : int
        The resolution level of a pyramid (OME-Zarr, pyramidal TIFF); 0 is the full one.

    Returns
    -------
    shape : tuple of int
        The z, y, x (or y, x) sizes.
    dtype : numpy.dtype
        The stored voxel type.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "scan.npy"
    >>> np.save(path, np.zeros((4, 5, 6), dtype=np.uint16))
    >>> read_header(path)
    ((4, 5, 6), dtype('uint16'))
    """
    layout = _open(path, shape=shape, dtype=dtype, byte_order=byte_order, offset=offset,
                   level=int(level))
    try:
        keep = [n for n, a in zip(layout.shape, layout.axes or "") if a in "ZYX"]
        kept = tuple(keep) if len(keep) in (2, 3) else tuple(layout.shape[-3:])
        return tuple(int(n) for n in kept), np.dtype(layout.dtype)
    finally:
        layout.close()


def _open(path, *, shape, dtype, byte_order, offset, level) -> Layout:
    text = str(path)
    target = Path(path)
    if not target.exists():
        if _GLOB_CHARACTERS & set(text):
            files = slice_files_matching(text)
            return open_slices(files, f"The pattern {text}")
        raise InputError(f"No file or folder at {text}; check the path.")
    suffix = target.suffix.lower()
    if target.is_dir():
        if is_zarr(target):
            return open_zarr(target, level)
        return open_slices(slice_files_in_folder(target), f"The folder {target}")
    if shape is not None or dtype is not None:
        if suffix in TIFF_SUFFIXES + (".png", ".npy", ".zarr"):
            raise InputError(f"shape= and dtype= (--raw-shape, --raw-dtype) describe raw "
                             f"files, but {target} is a {suffix} file that describes itself; "
                             f"leave them out.")
        return open_raw(target, shape, dtype, byte_order, offset)
    if suffix in TIFF_SUFFIXES:
        return open_tiff(target, level)
    if suffix == ".npy":
        return open_npy(target)
    if suffix == ".png":
        return open_png(target)
    if suffix in RAW_SUFFIXES:
        return open_raw(target, shape, dtype, byte_order, offset)
    raise InputError(f"Cannot read {target}: voxtopo reads .tif/.tiff (also ImageJ and "
                     f"OME-TIFF), .png, .npy, OME-Zarr, folders of slices, and raw files "
                     f"given shape= and dtype=.")


def _scan(layout: Layout, source: str, *, spacing, unit, channel, timepoint,
          mapped=False) -> Scan:
    axes = layout.axes if layout.labelled else unlabelled_axes(layout.shape, source,
                                                                channel, timepoint)
    index = _selection(layout, axes, source, channel, timepoint)
    kept = "".join(a for a, i in zip(axes, index) if not isinstance(i, int))
    if kept not in ("ZYX", "YX"):
        raise InputError(f"{source} holds axes {axes} of shape {layout.shape}; voxtopo needs "
                         f"(y, x) or (z, y, x) once a channel and time point are picked.")
    expected = tuple(n for n, i in zip(layout.shape, index) if not isinstance(i, int))
    data = layout.map(index) if mapped and layout.map is not None else None
    if data is None or not data.flags.c_contiguous:
        peak = (layout.peak_bytes(index) if layout.peak_bytes
                else nbytes(expected, layout.dtype))
        ensure_fits(peak, f"Reading {source} ({'x'.join(map(str, expected))} of "
                          f"{layout.dtype})",
                    "crop or downsample it before loading, or pick one channel or time point")
        data = layout.read(index)
    if data.shape != expected:
        raise InputError(f"{source} decoded to shape {data.shape} instead of {expected}; the "
                         f"file is probably damaged.")
    if data.dtype == np.float16:
        data = data.astype(np.float32)

    notes: list[str] = []
    found_spacing, found_unit = _found_spacing(layout, kept, notes)
    final_spacing, final_unit = _caller_wins(found_spacing, found_unit, spacing, unit, kept,
                                             source)
    metadata = dict(layout.metadata)
    metadata.update({"stored_axes": axes, "stored_shape": list(layout.shape),
                     "dtype": str(data.dtype)})
    if layout.rgb:
        metadata["rgb"] = True
    selected = {name: int(index[axes.index(letter)]) for letter, name in
                (("T", "timepoint"), ("C", "channel")) if letter in axes}
    if selected:
        metadata["selected"] = selected
    if spacing is not None:
        metadata["spacing_from"] = "caller"
    elif unit is not None:
        metadata["unit_from"] = "caller"
    # what the reader noticed stays; notes on the metadata's spacing only when it is used
    notes = list(layout.metadata.get("notes", [])) + (notes if spacing is None else [])
    if notes:
        metadata["notes"] = notes
    return Scan(data, spacing=final_spacing, unit=final_unit, source=source,
                metadata=_jsonable(metadata))


_WHAT = {"T": ("timepoint", "time point"), "C": ("channel", "channel")}


def _selection(layout: Layout, axes: str, source: str, channel, timepoint) -> tuple:
    """One index per stored axis: the chosen time point and channel, all of the rest."""
    index: list = [slice(None)] * len(axes)
    unpicked = []
    for letter, option in (("T", timepoint), ("C", channel)):
        name, word = _WHAT[letter]
        pos = axes.find(letter)
        if pos < 0:
            if option is not None:
                raise InputError(f"{name}={option} was given but {source} has no {word} axis "
                                 f"(its axes are {axes}, shape {layout.shape}).")
            continue
        size = layout.shape[pos]
        if option is None:
            if size == 1:
                index[pos] = 0
            else:
                unpicked.append((letter, size))
            continue
        if not 0 <= option < size:
            raise InputError(f"{name}={option} is out of range: {source} has {size} {word}s, "
                             f"numbered 0 to {size - 1}.")
        index[pos] = int(option)
    if unpicked:
        raise InputError(_pick_message(source, layout, unpicked))
    return tuple(index)


def _pick_message(source: str, layout: Layout, unpicked) -> str:
    sizes = dict(unpicked)
    if set(sizes) == {"T", "C"}:
        return (f"{source} has {sizes['T']} time points and {sizes['C']} channels; pick one "
                f"of each with timepoint=N and channel=M (--timepoint N --channel M on the "
                f"command line).")
    letter, size = unpicked[0]
    name, word = _WHAT[letter]
    if letter == "T":
        return (f"{source} is a time-lapse of {size} time points; analyse one with "
                f"timepoint=N (--timepoint N on the command line), N from 0 to {size - 1}, "
                f"or measure its rhythms with `voxtopo periodicity`.")
    what = (f"is an RGB{'A' if size == 4 else ''} image with {size} channels"
            if letter == "C" and layout.rgb else f"has {size} {word}s")
    return (f"{source} {what}; pick one with {name}=N (--{name} N on the command line), "
            f"N from 0 to {size - 1}.")


def _found_spacing(layout: Layout, kept: str, notes: list[str]):
    """The metadata's voxel size for the kept axes, z taken as x when only x and y are known."""
    found = dict(layout.spacing)
    if not any(a in found for a in kept):
        return None, "px"
    if "Z" in kept and "Z" not in found and "X" in found:
        found["Z"] = found["X"]
        notes.append("The file gives no z spacing; z is taken equal to the x spacing.")
    for a in "YX":
        if a not in found:
            other = "X" if a == "Y" else "Y"
            if other in found:
                found[a] = found[other]
                notes.append(f"The file gives no {a.lower()} spacing; it is taken equal to "
                             f"the {other.lower()} spacing.")
    values = tuple(float(found[a]) for a in kept)
    if not all(math.isfinite(v) and v > 0 for v in values):
        notes.append(f"The file's voxel size {values} is not usable; 1 px is used instead.")
        return None, "px"
    return values, normalise_unit(layout.unit)


def _caller_wins(found, found_unit, spacing, unit, kept, source):
    """The caller's spacing and unit over the file's."""
    ndim = len(kept)
    if spacing is not None:
        values = _spacing_option(spacing, ndim, source)
        chosen_unit = normalise_unit(unit) if unit is not None else (found_unit if found else "px")
        return values, chosen_unit
    if unit is not None:
        wanted = normalise_unit(unit)
        if found is not None and is_length(found_unit) and is_length(wanted):
            return tuple(convert(v, found_unit, wanted) for v in found), wanted
        return found or (1.0,) * ndim, wanted
    return found or (1.0,) * ndim, found_unit if found else "px"


def _spacing_option(spacing, ndim: int, source: str) -> tuple[float, ...]:
    try:
        values = tuple(float(s) for s in np.atleast_1d(spacing))
        if len(values) == 1:  # one number: the same size along every axis
            values = values * ndim
    except (TypeError, ValueError):
        raise InputError(f"spacing={spacing!r} is not a number or a list of numbers.") from None
    if len(values) != ndim:
        raise InputError(f"spacing={spacing!r} has {len(values)} values but {source} is "
                         f"{ndim}D; give one per axis in ({', '.join('zyx'[3 - ndim:])}) order "
                         f"or a single number.")
    if not all(math.isfinite(v) and v > 0 for v in values):
        raise InputError(f"spacing={spacing!r} must be positive numbers.")
    return values


def _jsonable(value):
    """Metadata as plain JSON values (numpy scalars and tuples converted)."""
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    return str(value)

