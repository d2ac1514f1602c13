"""voxtopo.load: one entry point for every supported scan format."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ..scan import Scan


def load(path, *, spacing=None, unit=None, **options) -> Scan:
    """Read a 2D image or 3D volume with its voxel size. (Interim: .npy only.)"""
    path = Path(path)
    if not path.exists():
        raise InputError(f"No file or folder at {path}; check the path.")
    if path.suffix.lower() == ".npy":
        data = np.load(path, allow_pickle=False)
        return Scan(data, spacing=tuple(spacing or ()), unit=unit or "px", source=str(path))
    raise InputError(f"Cannot read {path}: unsupported format.")
