"""Sample data: the demo scans in the repository's sample_volumes/ folder.

They are an invented scenario (a filter disc of partly sintered glass beads, an open-cell
foam, a phase-separated polymer film) made by ``sample_volumes/make_samples.py``. The folder
is found through the environment variable ``VOXTOPO_SAMPLES`` or, for a checkout with the
plugin installed in place, beside the plugin's own folder.
"""

from __future__ import annotations

import os
from pathlib import Path

import voxtopo
from voxtopo.errors import InputError

from ._layers import METADATA_KEY

__all__ = ["sample_folder", "beads", "foam", "film"]


def sample_folder() -> Path:
    """The folder holding beads.tif, foam.tif and film.tif."""
    given = os.environ.get("VOXTOPO_SAMPLES")
    candidates = [Path(given)] if given else []
    candidates += [parent / "sample_volumes" for parent in Path(__file__).resolve().parents]
    for folder in candidates:
        if (folder / "beads.tif").is_file():
            return folder
    raise InputError("The voxtopo sample volumes were not found; set VOXTOPO_SAMPLES to the "
                     "sample_volumes folder of a voxtopo checkout.")


def _open(filename: str, name: str):
    scan = voxtopo.load(sample_folder() / filename)
    return [(scan.data, {"name": name, "scale": scan.spacing,
                         "metadata": {METADATA_KEY: {"unit": scan.unit, "which": "scan"}}},
             "image")]


def beads():
    """Micro-CT of a filter disc of partly sintered glass beads (96^3, 2.5 um voxels)."""
    return _open("beads.tif", "bead filter disc")


def foam():
    """Micro-CT of an open-cell polymer foam (80^3, 4 um voxels)."""
    return _open("foam.tif", "open-cell foam")


def film():
    """Micrograph of a phase-separated polymer film (256 x 256, 50 nm pixels)."""
    return _open("film.tif", "blend film")
