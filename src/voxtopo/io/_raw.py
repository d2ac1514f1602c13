"""Raw binary volumes: the caller gives shape, dtype, byte order and header offset."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._layout import Layout, check_dtype, nbytes

RAW_SUFFIXES = (".raw", ".bin", ".vol", ".dat", ".img")
_BYTE_ORDERS = {"little": "<", "big": ">", "<": "<", ">": ">"}


def parse_shape(shape, path: Path) -> tuple[int, ...]:
    """(96, 96, 96), [96, 96, 96], '96,96,96' or '96x96x96' -> (96, 96, 96)."""
    if isinstance(shape, str):
        parts = [p for p in re.split(r"[,x\s]+", shape.strip().strip("()[]")) if p]
    else:
        parts = list(shape)
    try:
        dims = tuple(int(p) for p in parts)
    except (TypeError, ValueError):
        dims = ()
    if not dims or any(d <= 0 for d in dims):
        raise InputError(f"shape={shape!r} for {path} is not a list of positive whole numbers; "
                         f"give it as (z, y, x), e.g. shape=(96, 96, 96) or --raw-shape 96,96,96.")
    return dims


def open_raw(path: Path, shape, dtype, byte_order="little", offset=0) -> Layout:
    if shape is None or dtype is None:
        missing = " and ".join(n for n, v in (("shape", shape), ("dtype", dtype)) if v is None)
        raise InputError(f"{path} is a raw file, which does not describe itself: give its "
                         f"{missing} (e.g. shape=(96, 96, 96), dtype='uint16', or --raw-shape "
                         f"96,96,96 --raw-dtype uint16 on the command line).")
    dims = parse_shape(shape, path)
    try:
        dtype = np.dtype(dtype)
    except TypeError:
        raise InputError(f"dtype={dtype!r} is not a NumPy type; use e.g. 'uint8', 'uint16', "
                         f"'float32'.") from None
    check_dtype(dtype, str(path))
    order = _BYTE_ORDERS.get(str(byte_order).lower())
    if order is None:
        raise InputError(f"byte_order={byte_order!r} is not understood; use 'little' or 'big'.")
    if isinstance(offset, bool) or not isinstance(offset, (int, np.integer)) or offset < 0:
        raise InputError(f"offset={offset!r} must be a whole number of bytes, 0 or more.")
    stored = dtype.newbyteorder(order) if dtype.itemsize > 1 else dtype
    size = path.stat().st_size
    needed = nbytes(dims, dtype)
    if size - offset != needed:
        raise InputError(f"{path} holds {size - offset} bytes after a {offset}-byte header but "
                         f"shape {dims} of {dtype} needs {needed} bytes; check shape, dtype "
                         f"and offset.")

    def opened() -> np.memmap:
        try:
            return np.memmap(path, dtype=stored, mode="r", offset=offset, shape=dims)
        except (OSError, ValueError) as exc:
            raise InputError(f"{path} could not be read ({' '.join(str(exc).split())[:100]})."
                             ) from None

    def read(index: tuple) -> np.ndarray:
        return np.array(opened()[index], dtype=dtype.newbyteorder("="))

    def mapped(index: tuple) -> np.ndarray | None:
        return opened()[index] if stored.isnative else None

    def peak_bytes(index: tuple) -> int:
        selected = [n for n, i in zip(dims, index) if not isinstance(i, int)]
        return nbytes(selected, dtype)

    return Layout(axes="", shape=dims, dtype=np.dtype(dtype.newbyteorder("=")), read=read,
                  map=mapped,
                  metadata={"format": "raw", "byte_order": "little" if order == "<" else "big",
                            "offset": int(offset), "stored_dtype": str(dtype)},
                  peak_bytes=peak_bytes, labelled=False)
