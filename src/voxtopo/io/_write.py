"""save_tiff: a Scan as a TIFF file that ImageJ-compatible readers and voxtopo read with its voxel size."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import tifffile

from ..errors import InputError
from ._layout import convert, is_length

#: Types an ImageJ hyperstack can hold as they are.
_IMAGEJ_TYPES = (np.uint8, np.uint16, np.float32)


def save_tiff(scan, path, *, compression: str | None = "zlib") -> Path:
    """Write ``scan`` to ``path`` as a TIFF, keeping spacing and unit.

    uint8, uint16 and float32 scans become ImageJ hyperstacks (``spacing`` and ``unit`` in
    the ImageJ description, x and y in the resolution tags, in pixels per unit). A boolean scan becomes an
    8-bit ImageJ stack of 0 and 255 (ImageJ's binary convention) marked ``voxtopo_dtype=bool``, so that ``voxtopo.load`` gives it back as
    bool. Other types (int8, int16, float64, ...), which ImageJ cannot hold, are written as a
    plain TIFF with ``spacing`` and ``unit`` in tifffile's JSON description; voxtopo and
    tifffile read them back exactly.

    The file appears whole or not at all (written beside ``path``, then renamed); an
    existing file at ``path`` is replaced.

    Parameters
    ----------
    scan : Scan
    path : str or Path
    compression : str or None
        tifffile compression ("zlib" by default; None for none).

    Returns
    -------
    Path
        The path written.
    """
    path = Path(path)
    if not path.parent.is_dir():
        raise InputError(f"The folder {path.parent} that should hold {path.name} does not exist.")
    data = np.asarray(scan.data)
    ndim = data.ndim
    axes = "ZYX"[3 - ndim:]
    spacing = tuple(float(s) for s in scan.spacing)
    unit = scan.unit or "px"
    options = {"compression": compression} if compression else {}
    is_bool = data.dtype == np.bool_
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial", dir=path.parent)
    os.close(fd)
    try:
        if is_bool or data.dtype.type in _IMAGEJ_TYPES:
            metadata = {"axes": axes, "unit": unit}
            if ndim == 3:
                metadata["spacing"] = spacing[0]
            if is_bool:
                metadata["voxtopo_dtype"] = "bool"
            tifffile.imwrite(tmp, data.astype(np.uint8) * 255 if is_bool else data,
                             imagej=True, resolution=(1 / spacing[-1], 1 / spacing[-2]),
                             metadata=metadata, **options)
        else:
            extra = {}
            if is_length(unit):
                per_cm = convert(1.0, "cm", unit)
                extra = {"resolution": (per_cm / spacing[-1], per_cm / spacing[-2]),
                         "resolutionunit": "CENTIMETER"}
            tifffile.imwrite(tmp, data, photometric="minisblack",
                             metadata={"axes": axes, "spacing": list(spacing), "unit": unit},
                             **extra, **options)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path
