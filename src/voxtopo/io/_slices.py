"""A stack of 2D slices: a folder or a glob pattern of TIFF or PNG files, one slice each.

Slices are stacked along z in natural sort order ("s2" before "s10"). Every slice must
have the same shape and type as the first; the headers are checked before any pixel is
read. x and y voxel size come from the first slice (TIFF resolution tags or ImageJ
metadata, PNG pHYs chunk); a slice file says nothing about z.
"""

from __future__ import annotations

import glob
import struct
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._layout import Layout, natural_key, nbytes
from ._tiff import TIFF_SUFFIXES, open_tiff

SLICE_SUFFIXES = TIFF_SUFFIXES + (".png",)
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_PNG_SAMPLES = {0: 1, 2: 3, 3: 3, 4: 2, 6: 4}    # colour type -> samples after decoding


def slice_files_in_folder(folder: Path) -> list[Path]:
    files = [p for p in folder.iterdir()
             if p.is_file() and not p.name.startswith(".")
             and p.suffix.lower() in SLICE_SUFFIXES]
    if not files:
        others = sum(1 for p in folder.iterdir() if not p.name.startswith("."))
        extra = f" (it has {others} other entries)" if others else ""
        raise InputError(f"The folder {folder} holds no .tif, .tiff or .png slices{extra}.")
    return sorted(files, key=lambda p: natural_key(p.name))


def slice_files_matching(pattern: str) -> list[Path]:
    matches = [Path(p) for p in glob.glob(pattern) if Path(p).is_file()]
    if not matches:
        raise InputError(f"No files match the pattern {pattern}; check the path.")
    files = [p for p in matches if p.suffix.lower() in SLICE_SUFFIXES]
    if not files:
        raise InputError(f"The pattern {pattern} matches {len(matches)} files but none is a "
                         f".tif, .tiff or .png slice.")
    return sorted(files, key=lambda p: natural_key(p.name))


# --- one slice: its header (shape, type, pixel size) and its pixels -------------------
def png_header(path: Path) -> dict:
    """Shape, bit depth and pixel size of a PNG from its IHDR and pHYs chunks."""
    with open(path, "rb") as fh:
        head = fh.read(8 + 25)
        if head[:8] != _PNG_SIGNATURE or head[12:16] != b"IHDR" or len(head) < 33:
            raise InputError(f"{path} is not a readable PNG file (no PNG signature).")
        width, height, depth, colour = struct.unpack(">IIBB", head[16:26])
        header = {"shape": (height, width), "samples": _PNG_SAMPLES.get(colour, 1),
                  "dtype": "uint16" if depth == 16 else "uint8", "spacing_um": None}
        # walk the chunks up to the image data for pHYs (pixels per metre)
        while True:
            chunk = fh.read(8)
            if len(chunk) < 8:
                break
            length, kind = struct.unpack(">I4s", chunk)
            if kind == b"pHYs":
                x, y, unit = struct.unpack(">IIB", fh.read(9))
                if unit == 1 and x and y:
                    header["spacing_um"] = (1e6 / y, 1e6 / x)
                break
            if kind == b"IDAT":
                break
            fh.seek(length + 4, 1)
    return header


def read_png(path: Path) -> np.ndarray:
    import imagecodecs

    try:
        return np.asarray(imagecodecs.png_decode(path.read_bytes()))
    except Exception as exc:
        raise InputError(f"{path} is not a readable PNG file, it is probably truncated or "
                         f"corrupt ({' '.join(str(exc).split())[:100]}).") from None


def _slice_header(path: Path, is_png: bool) -> dict:
    """shape (y, x), samples per pixel, dtype and pixel size of one slice file."""
    if is_png:
        head = png_header(path)
        spacing = ({"Y": head["spacing_um"][0], "X": head["spacing_um"][1]}
                   if head["spacing_um"] else {})
        return {"shape": head["shape"], "samples": head["samples"], "dtype": head["dtype"],
                "spacing": spacing, "unit": "um" if spacing else "px",
                "found": "png pHYs" if spacing else "none"}
    layout = open_tiff(path)
    layout.close()
    if layout.axes not in ("YX", "YXC", "CYX"):
        raise InputError(f"{path} holds an image of shape {layout.shape} (axes "
                         f"{layout.metadata['axes']}); a slice folder needs one 2D image "
                         f"per file.")
    spacing = {a: v for a, v in layout.spacing.items() if a in "YX"}
    return {"shape": tuple(layout.shape[layout.axes.index(a)] for a in "YX"),
            "samples": layout.shape[layout.axes.index("C")] if "C" in layout.axes else 1,
            "dtype": str(layout.dtype), "spacing": spacing,
            "unit": layout.unit if spacing else "px",
            "found": layout.metadata["spacing_from"] if spacing else "none"}


def _read_tiff_slice(path: Path) -> np.ndarray:
    layout = open_tiff(path)
    try:
        data = layout.read((slice(None),) * len(layout.axes))
    finally:
        layout.close()
    return np.moveaxis(data, 0, -1) if layout.axes == "CYX" else data


# --- the stack ---------------------------------------------------------------------------
def open_slices(files: list[Path], source: str) -> Layout:
    suffixes = {".png" if p.suffix.lower() == ".png" else ".tif" for p in files}
    if len(suffixes) > 1:
        raise InputError(f"{source} mixes TIFF and PNG slices; keep one kind per stack.")
    is_png = suffixes == {".png"}
    first = files[0]
    head = _slice_header(first, is_png)
    for path in files[1:]:
        other = _slice_header(path, is_png)
        if any(other[k] != head[k] for k in ("shape", "samples", "dtype")):
            raise InputError(
                f"Slice {path.name} is {_describe(other)} but the first slice {first.name} is "
                f"{_describe(head)}; all slices of a stack must have the same shape and type.")
    samples = head["samples"]
    page = tuple(head["shape"]) + ((samples,) if samples > 1 else ())
    shape = (len(files),) + page
    axes = "ZYX" + ("C" if samples > 1 else "")
    dtype = np.dtype(head["dtype"])
    reader = read_png if is_png else _read_tiff_slice

    def read(index: tuple) -> np.ndarray:
        chosen = files[index[0]]
        chosen = [chosen] if isinstance(chosen, Path) else chosen
        out = None
        for k, path in enumerate(chosen):
            data = reader(path)
            if data.shape != page or data.dtype != dtype:
                raise InputError(
                    f"Slice {path.name} decodes to shape {data.shape} of {data.dtype} but "
                    f"the first slice's header says {page} of {dtype}; all slices of a stack "
                    f"must have the same shape and type.")
            data = data[tuple(index[1:])]
            if out is None:
                out = np.empty((len(chosen),) + data.shape, dtype=data.dtype)
            out[k] = data
        return out[0] if isinstance(index[0], int) else out

    def peak_bytes(index: tuple) -> int:
        selected = [n for n, i in zip(shape, index) if not isinstance(i, int)]
        return nbytes(selected, dtype) + nbytes(page, dtype)

    metadata = {"format": "png-slices" if is_png else "tiff-slices", "files": len(files),
                "first": first.name, "last": files[-1].name, "spacing_from": head["found"],
                "axes": axes}
    return Layout(axes=axes, shape=shape, dtype=dtype, read=read, spacing=head["spacing"],
                  unit=head["unit"], metadata=metadata, rgb=samples in (3, 4),
                  peak_bytes=peak_bytes)


def open_png(path: Path) -> Layout:
    """A single PNG image as a 2D scan."""
    head = png_header(path)
    samples = head["samples"]
    shape = tuple(head["shape"]) + ((samples,) if samples > 1 else ())
    axes = "YX" + ("C" if samples > 1 else "")
    dtype = np.dtype(head["dtype"])

    def read(index: tuple) -> np.ndarray:
        data = read_png(path)
        if data.shape != shape:
            raise InputError(f"{path} decodes to shape {data.shape} but its header says "
                             f"{shape}; the file is probably corrupt.")
        return np.ascontiguousarray(data[tuple(index)])

    spacing = {"Y": head["spacing_um"][0], "X": head["spacing_um"][1]} \
        if head["spacing_um"] else {}
    return Layout(axes=axes, shape=shape, dtype=dtype, read=read, spacing=spacing,
                  unit="um" if spacing else "px",
                  metadata={"format": "png", "spacing_from": "png pHYs" if spacing else "none",
                            "axes": axes},
                  rgb=samples in (3, 4))


def _describe(head: dict) -> str:
    size = "x".join(str(n) for n in head["shape"])
    samples = head["samples"]
    return f"{size}{f' with {samples} channels' if samples > 1 else ''} {head['dtype']}"
