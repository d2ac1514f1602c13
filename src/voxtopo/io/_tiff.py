"""TIFF files through tifffile: single and multi-page, ImageJ hyperstacks, OME-TIFF.

Voxel size, in this order of trust:

* ImageJ: ``spacing`` (z) and ``unit`` in the ImageJ description; x and y from the
  X/YResolution tags, which ImageJ writes in pixels per ``unit``.
* OME-TIFF: ``PhysicalSizeX/Y/Z`` with ``PhysicalSizeXUnit`` etc. (micrometre when the unit
  is left out, as the OME schema says).
* tifffile's own JSON description (``spacing`` and ``unit`` keys, as ``save_tiff`` writes
  for types ImageJ cannot hold).
* Otherwise X/YResolution with ResolutionUnit inch or centimetre, converted to um. 72 and
  96 dots per inch are screen defaults of image editors, not a pixel size, and are ignored.
"""

from __future__ import annotations

import contextlib
import logging
import math
import re
import sys
import warnings
import xml.etree.ElementTree as ElementTree
from pathlib import Path

import numpy as np
import tifffile

from ..errors import InputError
from ._layout import Layout, convert, is_length, nbytes, normalise_unit, seconds

TIFF_SUFFIXES = (".tif", ".tiff", ".btf", ".tf2", ".tf8")

#: tifffile warnings that mean the file is damaged rather than merely unusual.
_DAMAGE = ("invalid page offset", "failed to reshape", "truncat", "corrupt", "not enough data",
           "failed to read", "invalid tag", "unexpected end")

#: ResolutionUnit codes (TIFF 6.0: 1 none, 2 inch, 3 centimetre; 4/5 are tifffile's mm/um).
_UM_PER_RESOLUTION_UNIT = {2: 25400.0, 3: 1e4, 4: 1e3, 5: 1.0}
_SCREEN_DPI = (72.0, 96.0)
#: byte order of this machine, as tifffile writes it
_NATIVE_ORDER = "<" if sys.byteorder == "little" else ">"


@contextlib.contextmanager
def quiet_tifffile(found: list[str]):
    """Collect tifffile's log messages and warnings into ``found`` instead of stderr."""
    logger = logging.getLogger("tifffile")

    class Collect(logging.Handler):
        def emit(self, record):
            found.append(record.getMessage())

    handler = Collect(logging.WARNING)
    propagate = logger.propagate
    logger.addHandler(handler)
    logger.propagate = False
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            yield
        found.extend(str(w.message) for w in caught)
    finally:
        logger.removeHandler(handler)
        logger.propagate = propagate


def _reason(exc: BaseException) -> str:
    """A short one-line reason, without tifffile's "<tifffile.TiffPages @8>" prefix."""
    text = re.sub(r"^<[^>]*>\s*", "", " ".join(str(exc).split())) or type(exc).__name__
    return text if len(text) <= 120 else text[:117] + "..."


def _raise_if_damaged(path: Path, messages: list[str]) -> None:
    for message in messages:
        if any(word in message.lower() for word in _DAMAGE):
            raise InputError(f"{path} is truncated or corrupt (tifffile: "
                             f"{_reason(Exception(message))}).")


def open_tiff(path: Path, level: int = 0) -> Layout:
    """Read the headers and metadata of a TIFF file; the pixels are read by ``Layout.read``."""
    messages: list[str] = []
    with quiet_tifffile(messages):
        try:
            tif = tifffile.TiffFile(path)
        except Exception as exc:    # tifffile raises many types for damaged files
            raise InputError(f"{path} is not a readable TIFF file ({_reason(exc)}).") from None
        try:
            layout = _layout(tif, path, level, messages)
        except BaseException:
            tif.close()
            raise
    try:
        _raise_if_damaged(path, messages)
    except InputError:
        tif.close()
        raise
    layout.metadata["warnings"] = [_reason(Exception(m)) for m in messages]
    return layout


def _layout(tif: tifffile.TiffFile, path: Path, level: int, messages: list[str]) -> Layout:
    if not tif.series or len(tif.pages) == 0:
        raise InputError(f"{path} is a TIFF file without any image in it.")
    base = tif.series[0]
    levels = base.levels
    if not 0 <= level < len(levels):
        raise InputError(f"level={level} is out of range: {path} has {len(levels)} resolution "
                         f"level{'s' if len(levels) > 1 else ''}, numbered 0 to "
                         f"{len(levels) - 1}.")
    series = levels[level]
    axes, shape = _axes(series, path)
    dtype = np.dtype(series.dtype)
    keyframe = series.keyframe
    photometric = keyframe.photometric
    rgb = photometric in (tifffile.PHOTOMETRIC.RGB, tifffile.PHOTOMETRIC.YCBCR) or \
        getattr(photometric, "name", "") in ("RGB", "YCBCR")
    filesize = Path(path).stat().st_size
    _check_extent(series, path, filesize)

    spacing, unit, found = _spacing(tif, keyframe, axes)
    if level > 0:
        spacing = _scaled(spacing, axes, shape, _axes(levels[0], path)[1])
    metadata = {
        "format": "ome-tiff" if tif.is_ome else "imagej-tiff" if tif.is_imagej else "tiff",
        "axes": series.axes,
        "pages": len(tif.pages),
        "series": len(tif.series),
        "levels": len(levels),
        "photometric": getattr(photometric, "name", str(photometric)).lower(),
        "compression": getattr(keyframe.compression, "name", str(keyframe.compression)).lower(),
        "spacing_from": found,
    }
    if tif.is_imagej:
        metadata["imagej"] = {k: v for k, v in (tif.imagej_metadata or {}).items()
                              if isinstance(v, (str, int, float, bool))}
    page_axes = len(series.shape) - len(keyframe.shape)
    pages_ok = (page_axes >= 0 and tuple(series.shape[page_axes:]) == tuple(keyframe.shape)
                and math.prod(series.shape[:page_axes]) == len(series))
    restore_bool = metadata.get("imagej", {}).get("voxtopo_dtype") == "bool"

    def read(index: tuple) -> np.ndarray:
        read_messages: list[str] = []
        with quiet_tifffile(read_messages):
            try:
                if pages_ok and page_axes > 0:
                    grid = np.arange(len(series)).reshape(series.shape[:page_axes])
                    keys = grid[index[:page_axes]]
                    data = tif.asarray(key=[int(k) for k in np.ravel(keys)], series=0,
                                       level=level)
                    data = data.reshape(np.shape(keys) + tuple(keyframe.shape))
                    data = data[(slice(None),) * np.ndim(keys) + tuple(index[page_axes:])]
                else:
                    data = series.asarray()[tuple(index)]
            except InputError:
                raise
            except Exception as exc:
                raise InputError(f"{path} could not be decoded, it is probably truncated or "
                                 f"corrupt ({_reason(exc)}).") from None
        _raise_if_damaged(path, read_messages)
        data = np.ascontiguousarray(data)
        if restore_bool:
            data = data > 0
        return data

    def mapped(index: tuple) -> np.ndarray | None:
        # the pixels as they lie in the file: one uncompressed block in this machine's order
        offset = series.dataoffset
        if offset is None or restore_bool or tif.byteorder != _NATIVE_ORDER:
            return None
        try:
            return np.memmap(path, dtype=dtype, mode="r", offset=offset, shape=shape)[index]
        except (OSError, ValueError) as exc:
            raise InputError(f"{path} could not be read ({_reason(exc)}).") from None

    def peak_bytes(index: tuple) -> int:
        if pages_ok and page_axes > 0:
            selected = [n for n, i in zip(shape[:page_axes], index[:page_axes])
                        if not isinstance(i, int)]
            return nbytes(tuple(selected) + tuple(keyframe.shape), dtype)
        return nbytes(shape, dtype)

    return Layout(axes=axes, shape=shape, dtype=np.dtype(bool) if restore_bool else dtype,
                  read=read, spacing=spacing, unit=unit, metadata=metadata, rgb=rgb,
                  peak_bytes=peak_bytes, map=mapped, close=tif.close, frame_interval=_frame_interval(tif))


def _axes(series, path: Path) -> tuple[str, tuple[int, ...]]:
    """tifffile's axis letters (squeezed) mapped to T, C, Z, Y, X."""
    letters, shape = series.axes, tuple(series.shape)
    if "C" in letters and "S" in letters:
        raise InputError(f"{path} has both a channel axis and colour samples (axes "
                         f"{letters}); voxtopo cannot tell which to pick from.")
    mapped = []
    unnamed = [i for i, a in enumerate(letters) if a in "IQ"]
    for i, a in enumerate(letters):
        if a in "YXZT":
            mapped.append(a)
        elif a in "CS":
            mapped.append("C")
        elif a in "IQ":
            # an unnamed stacking axis: the innermost is depth, one further out is time
            if i == unnamed[-1] and "Z" not in letters:
                mapped.append("Z")
            elif "T" not in letters and "T" not in mapped:
                mapped.append("T")
            else:
                raise InputError(f"{path} has {len(shape)} axes ({letters}, shape {shape}) "
                                 f"and voxtopo cannot tell which are space and which time.")
        else:
            raise InputError(f"{path} has an axis '{a}' of size {shape[i]} (axes {letters}) "
                             f"that voxtopo cannot select from; save one 2D image or 3D "
                             f"volume per file.")
    return "".join(mapped), shape


def _check_extent(series, path: Path, filesize: int) -> None:
    """Refuse a file whose image data would run past its end (a truncated download)."""
    end = 0
    if series.dataoffset is not None:
        end = series.dataoffset + series.nbytes
    else:
        for page in series.pages:
            if page is None:
                continue
            for offset, count in zip(page.dataoffsets, page.databytecounts):
                end = max(end, offset + count)
    if end > filesize:
        raise InputError(f"{path} is truncated: its image data runs to byte {end} but the "
                         f"file has only {filesize} bytes.")


def _spacing(tif: tifffile.TiffFile, page, axes: str) -> tuple[dict, str, str]:
    """(spacing per axis, unit, where it came from) from the file's metadata."""
    if tif.is_imagej:
        meta = tif.imagej_metadata or {}
        unit = normalise_unit(meta.get("unit"))
        if meta.get("unit") and unit != "px":
            spacing = _resolution(page)
            if "spacing" in meta:
                spacing["Z"] = float(meta["spacing"])
            return spacing, unit, "imagej"
    if tif.is_ome:
        found = _ome_spacing(tif.ome_metadata)
        if found is not None:
            return found[0], found[1], "ome"
    shaped = tif.shaped_metadata[0] if tif.is_shaped and tif.shaped_metadata else {}
    if "spacing" in shaped and len(shaped["spacing"]) == len([a for a in axes if a in "ZYX"]):
        spatial = [a for a in axes if a in "ZYX"]
        return ({a: float(s) for a, s in zip(spatial, shaped["spacing"])},
                normalise_unit(shaped.get("unit")), "tifffile description")
    return _resolution_um(page)


def _frame_interval(tif: tifffile.TiffFile) -> float | None:
    """Seconds between frames: ImageJ ``finterval`` (in ``tunit``, seconds when left out)
    or OME ``TimeIncrement`` (in ``TimeIncrementUnit``, seconds when left out)."""
    if tif.is_imagej:
        meta = tif.imagej_metadata or {}
        if "finterval" in meta:
            return seconds(meta["finterval"], meta.get("tunit", "s"))
    if tif.is_ome and tif.ome_metadata:
        try:
            root = ElementTree.fromstring(tif.ome_metadata)
        except ElementTree.ParseError:
            return None
        pixels = next((e for e in root.iter() if e.tag.rsplit("}", 1)[-1] == "Pixels"), None)
        if pixels is not None and pixels.get("TimeIncrement") is not None:
            return seconds(pixels.get("TimeIncrement"), pixels.get("TimeIncrementUnit", "s"))
    return None


def _resolution(page) -> dict:
    x, y = _tag_ratio(page, "XResolution"), _tag_ratio(page, "YResolution")
    spacing = {}
    if x:
        spacing["X"] = 1.0 / x
    if y:
        spacing["Y"] = 1.0 / y
    return spacing


def _resolution_um(page) -> tuple[dict, str, str]:
    unit_tag = page.tags.get("ResolutionUnit")
    code = int(unit_tag.value) if unit_tag is not None else 2   # TIFF default: inch
    x, y = _tag_ratio(page, "XResolution"), _tag_ratio(page, "YResolution")
    if code not in _UM_PER_RESOLUTION_UNIT or not x or not y:
        return {}, "px", "none"
    if code == 2 and x in _SCREEN_DPI and y in _SCREEN_DPI:
        return {}, "px", "none (72/96 dpi is a screen default)"
    per = _UM_PER_RESOLUTION_UNIT[code]
    return {"X": per / x, "Y": per / y}, "um", "resolution tags"


def _tag_ratio(page, name: str) -> float | None:
    tag = page.tags.get(name)
    if tag is None:
        return None
    value = tag.value
    num, den = (value if isinstance(value, tuple) else (value, 1))[:2]
    if not den or not num:
        return None
    return float(num) / float(den)


def _ome_spacing(xml: str | None):
    """PhysicalSize{X,Y,Z} of the first image, in one unit (X's when they differ)."""
    if not xml:
        return None
    try:
        root = ElementTree.fromstring(xml)
    except ElementTree.ParseError:
        return None
    pixels = next((e for e in root.iter() if e.tag.rsplit("}", 1)[-1] == "Pixels"), None)
    if pixels is None:
        return None
    sizes = {}
    for axis in "XYZ":
        value = pixels.get(f"PhysicalSize{axis}")
        if value is None:
            continue
        sizes[axis] = (float(value), normalise_unit(pixels.get(f"PhysicalSize{axis}Unit", "µm")))
    if not sizes:
        return None
    unit = next(sizes[a][1] for a in "XYZ" if a in sizes)
    spacing = {}
    for axis, (value, its_unit) in sizes.items():
        if its_unit != unit and is_length(its_unit) and is_length(unit):
            value = convert(value, its_unit, unit)
        spacing[axis] = value
    return spacing, unit


def _scaled(spacing: dict, axes: str, shape, base_shape) -> dict:
    """Voxel size at a coarser pyramid level: the base size times the shrink factor."""
    scaled = dict(spacing)
    for axis in list(scaled):
        if axis in axes:
            i = axes.index(axis)
            scaled[axis] = spacing[axis] * base_shape[i] / shape[i]
    return scaled
