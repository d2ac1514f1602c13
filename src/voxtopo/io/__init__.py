"""Readers for scans and the atomic writer of result folders."""

from ._chunked import ChunkedArray, open_chunked
from ._load import load, load_on_grid_of, load_timelapse, read_header
from ._write import save_tiff
from .results import result_folder

__all__ = ["load", "load_on_grid_of", "load_timelapse", "read_header", "result_folder",
           "save_tiff", "open_chunked", "ChunkedArray"]
