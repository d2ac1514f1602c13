"""What every reader hands to ``load``: the stored array's axes, shape, voxel size, and a
way to read a selection of it.

A reader only looks at headers and metadata; ``load`` decides what to read (one channel,
one time point), checks that it fits in memory, and only then calls ``Layout.read``.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..errors import InputError

#: Axis letters a Layout may carry: time, channel, and the three spatial axes.
AXES = "TCZYX"
SPATIAL = "ZYX"

#: Metres per unit, for the length units voxtopo converts between.
_METRES = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "nm": 1e-9, "pm": 1e-12,
           "angstrom": 1e-10, "in": 0.0254}

_UNIT_NAMES = {
    "um": "um", "µm": "um", "μm": "um", "\\u00b5m": "um", "micron": "um", "microns": "um",
    "micrometer": "um", "micrometre": "um", "micrometers": "um", "micrometres": "um",
    "nm": "nm", "nanometer": "nm", "nanometre": "nm", "nanometers": "nm", "nanometres": "nm",
    "mm": "mm", "millimeter": "mm", "millimetre": "mm", "millimeters": "mm", "millimetres": "mm",
    "cm": "cm", "centimeter": "cm", "centimetre": "cm", "centimeters": "cm", "centimetres": "cm",
    "m": "m", "meter": "m", "metre": "m", "meters": "m", "metres": "m",
    "pm": "pm", "picometer": "pm", "picometre": "pm",
    "å": "angstrom", "angstrom": "angstrom", "ångström": "angstrom", "a": "angstrom",
    "in": "in", "inch": "in", "inches": "in",
    "px": "px", "pixel": "px", "pixels": "px", "voxel": "px", "voxels": "px", "": "px",
}


#: Seconds per time unit, for the frame intervals of ImageJ, OME-TIFF and OME-Zarr.
_SECONDS = {"s": 1.0, "sec": 1.0, "second": 1.0, "seconds": 1.0,
            "ms": 1e-3, "msec": 1e-3, "millisecond": 1e-3, "milliseconds": 1e-3,
            "us": 1e-6, "µs": 1e-6, "μs": 1e-6, "microsecond": 1e-6, "microseconds": 1e-6,
            "ns": 1e-9, "nanosecond": 1e-9, "nanoseconds": 1e-9,
            "min": 60.0, "minute": 60.0, "minutes": 60.0,
            "h": 3600.0, "hr": 3600.0, "hour": 3600.0, "hours": 3600.0,
            "d": 86400.0, "day": 86400.0, "days": 86400.0}


def seconds(value, unit) -> float | None:
    """A time ``value`` in ``unit`` (default seconds) as seconds; None when either is not
    usable (unknown unit, not a positive number)."""
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    factor = _SECONDS.get(str(unit if unit is not None else "s").strip().lower())
    if factor is None or not math.isfinite(value) or value <= 0:
        return None
    return value * factor


def normalise_unit(unit) -> str:
    """'µm', 'micron', 'micrometer', '\\u00B5m' -> 'um'; unknown words are kept, lower case."""
    if unit is None:
        return "px"
    text = str(unit).strip()
    return _UNIT_NAMES.get(text.lower(), _UNIT_NAMES.get(text, text))


def convert(value: float, unit: str, to: str) -> float:
    """``value`` in ``unit`` expressed in ``to`` (both normalised length units)."""
    return value * _METRES[unit] / _METRES[to]


def is_length(unit: str) -> bool:
    return unit in _METRES


@dataclass
class Layout:
    """A stored array as a reader found it, before anything is read.

    ``axes`` has one letter per stored axis from ``AXES`` (T time, C channel, Z, Y, X).
    ``read(index)`` takes one entry per stored axis (an int or ``slice(None)``) and returns
    that part of the array. ``spacing`` maps the spatial axes found in the metadata to their
    voxel size in ``unit``. ``peak_bytes(index)``, when given, is the memory the read needs
    at its peak (e.g. all samples of an RGB page before one is kept). ``map(index)``, when
    given, returns that part as a read-only memory map of the file, or None where the stored
    bytes are not the array itself (compressed, another byte order). ``close`` releases
    the open file. ``frame_interval`` is the time between frames in seconds when the
    metadata gives it. ``labelled`` is False for formats that name no axes (.npy, raw, plain
    zarr); their ``axes`` are then chosen by ``unlabelled_axes`` from the options given.
    """

    axes: str
    shape: tuple[int, ...]
    dtype: np.dtype
    read: Callable[[tuple], np.ndarray]
    spacing: dict[str, float] = field(default_factory=dict)
    unit: str = "px"
    metadata: dict = field(default_factory=dict)
    rgb: bool = False
    peak_bytes: Callable[[tuple], int] | None = None
    map: Callable[[tuple], np.ndarray | None] | None = None
    close: Callable[[], None] = lambda: None
    labelled: bool = True
    frame_interval: float | None = None


def unlabelled_axes(shape, source: str, channel, timepoint) -> str:
    """Axis letters for an array that names none (.npy, raw, plain zarr).

    2D is (y, x) and 3D is (z, y, x). Asking for a time point makes the first axis time;
    asking for a channel makes the last axis the channel; what remains must be 2D or 3D.
    """
    ndim = len(shape)
    lead = "T" if timepoint is not None else ""
    tail = "C" if channel is not None else ""
    spatial = ndim - len(lead) - len(tail)
    if spatial in (2, 3):
        return lead + SPATIAL[3 - spatial:] + tail
    if spatial > 3:
        options = []
        if timepoint is None:
            options.append("a time point along the first axis with timepoint=N (--timepoint N)")
        if channel is None:
            options.append("a channel along the last axis with channel=N (--channel N)")
        raise InputError(f"{source} holds a {ndim}D array of shape {tuple(shape)} but voxtopo "
                         f"reads 2D images and 3D volumes; pick {' or '.join(options)}.")
    raise InputError(f"{source} holds a {ndim}D array of shape {tuple(shape)}, too few axes "
                     f"for an image once the time point or channel is picked.")


def natural_key(text: str):
    """Sort key that puts 's2' before 's10'."""
    return [int(part) if part.isdigit() else part.lower() for part in re.split(r"(\d+)", text)]


def nbytes(shape, dtype) -> int:
    return int(math.prod(shape)) * np.dtype(dtype).itemsize


def check_dtype(dtype, source: str) -> np.dtype:
    """Refuse what is not a number (objects, strings, records, complex)."""
    dtype = np.dtype(dtype)
    if dtype.kind not in "biuf":
        raise InputError(f"{source} holds {dtype} values; voxtopo reads 8/16-bit integer, "
                         f"other integer, float32/64 or boolean data.")
    return dtype
