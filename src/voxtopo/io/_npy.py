"""NumPy .npy files, never with pickles: the header is read first, object arrays refused."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ._layout import Layout, check_dtype, nbytes


def _header(path: Path):
    fmt = np.lib.format
    with open(path, "rb") as fh:
        try:
            version = fmt.read_magic(fh)
            if version == (1, 0):
                shape, fortran, dtype = fmt.read_array_header_1_0(fh)
            elif version == (2, 0):
                shape, fortran, dtype = fmt.read_array_header_2_0(fh)
            else:
                shape, fortran, dtype = fmt._read_array_header(fh, version)
        except Exception as exc:
            raise InputError(f"{path} is not a readable .npy file "
                             f"({' '.join(str(exc).split())[:100]}).") from None
        data_offset = fh.tell()
    shape = tuple(shape)
    if any(n < 0 for n in shape):
        raise InputError(f"{path} has a header with a negative dimension in its shape "
                         f"{shape}, so the file is damaged; save the array again.")
    return shape, fortran, np.dtype(dtype), data_offset


def open_npy(path: Path) -> Layout:
    shape, fortran, dtype, data_offset = _header(path)
    if dtype.hasobject:
        raise InputError(f"{path} holds Python objects, which only unpickling could read; "
                         f"voxtopo never loads pickles, so save a numeric array instead.")
    check_dtype(dtype, str(path))
    present = path.stat().st_size - data_offset
    needed = nbytes(shape, dtype)
    if present < needed:
        raise InputError(f"{path} is truncated: shape {shape} of {dtype} needs {needed} bytes "
                         f"of data but only {present} follow its header.")
    if present > needed:
        raise InputError(f"{path} does not match its header: shape {shape} of {dtype} needs "
                         f"{needed} bytes of data but {present} bytes follow it, so the header "
                         f"is damaged; save the array again.")

    def opened() -> np.memmap:
        try:
            return np.load(path, mmap_mode="r", allow_pickle=False)
        except (OSError, ValueError) as exc:
            raise InputError(f"{path} could not be read ({' '.join(str(exc).split())[:100]})."
                             ) from None

    def read(index: tuple) -> np.ndarray:
        return np.array(opened()[index], dtype=dtype.newbyteorder("="))

    def mapped(index: tuple) -> np.ndarray | None:
        return None if fortran or not dtype.isnative else opened()[index]

    return Layout(axes="", shape=shape, dtype=dtype, read=read, map=mapped,
                  metadata={"format": "npy", "fortran_order": bool(fortran)}, labelled=False)
