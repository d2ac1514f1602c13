"""Readers for scans and the atomic writer of result folders."""

from ._load import load, read_header
from ._write import save_tiff
from .results import result_folder

__all__ = ["load", "read_header", "result_folder", "save_tiff"]
