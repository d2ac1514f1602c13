"""Readers for scans and the atomic writer of result folders."""

from ._load import load
from ._write import save_tiff
from .results import result_folder

__all__ = ["load", "result_folder", "save_tiff"]
