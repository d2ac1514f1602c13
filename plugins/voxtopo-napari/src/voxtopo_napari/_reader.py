"""Open a voxtopo result folder in napari: the features as layers over their scan.

A result folder (``pairs.csv`` + ``summary.json``, as written by ``voxtopo analyse`` or the
panel's export) becomes one Points layer per dimension at the birth voxels and one at the
death voxels. When the scan named in ``summary.json`` is still where it was, it is opened
below them with its voxel size, and for a distance transform the pore regions are
recomputed from it; otherwise the features come alone, placed by the stored voxel size.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

import voxtopo
from voxtopo.diagram import Diagram
from voxtopo.errors import InputError
from voxtopo.pipeline import AnalysisOptions, prepare

from ._layers import METADATA_KEY, placement_of, result_layers
from ._pore_regions import pore_regions

__all__ = ["napari_get_reader", "read_result_folder"]


def _is_result_folder(path: Path) -> bool:
    return path.is_dir() and (path / "summary.json").is_file() and (path / "pairs.csv").is_file()


def napari_get_reader(path):
    """npe2 reader hook: a reader for a voxtopo result folder, None for anything else."""
    if isinstance(path, (list, tuple)):
        if len(path) != 1:
            return None
        path = path[0]
    return read_result_folder if _is_result_folder(Path(path)) else None


def _summary(folder: Path) -> dict:
    try:
        return json.loads((folder / "summary.json").read_text())
    except (json.JSONDecodeError, UnicodeDecodeError):
        raise InputError(f"{folder / 'summary.json'} is not valid JSON (truncated or "
                         f"edited?); write the folder again with voxtopo analyse.") from None


def _check_counts(folder: Path, summary: dict, diagram: Diagram) -> None:
    """A pairs.csv cut at a line break still parses: compare with the counts on record."""
    counts = summary.get("counts")
    if not counts:
        return
    kept = summary.get("options", {}).get("min_persistence", 0.0)
    # "auto" folders list only the significant (or robust) pairs: count them all
    found = diagram.counts(None if kept == "auto" else float(kept))
    listed = {int(d): int(n) for d, n in counts.items()}
    if found != listed:
        raise InputError(f"{folder / 'pairs.csv'} holds {sum(found.values())} pairs but "
                         f"summary.json lists {sum(listed.values())}; the folder is "
                         f"incomplete, write it again with voxtopo analyse.")


def _options(summary: dict) -> AnalysisOptions:
    known = AnalysisOptions.__dataclass_fields__
    return AnalysisOptions(**{k: v for k, v in summary.get("options", {}).items() if k in known})


def read_result_folder(path) -> list[tuple]:
    """Layer-data tuples for a result folder: the scan (when found), then the features."""
    if isinstance(path, (list, tuple)):
        path = path[0]
    folder = Path(path)
    summary = _summary(folder)
    try:
        diagram = Diagram.load(folder)
    except (ValueError, KeyError) as error:
        if isinstance(error, InputError):
            raise
        raise InputError(f"{folder / 'pairs.csv'} cannot be read as a table of pairs "
                         f"({error}); write the folder again with voxtopo analyse.") from None
    _check_counts(folder, summary, diagram)
    options = _options(summary)
    scan_info = summary.get("scan", {})
    source = scan_info.get("source", "")
    shape = tuple(scan_info.get("shape", diagram.shape))
    spacing = tuple(scan_info.get("spacing", diagram.spacing))
    unit = scan_info.get("unit", diagram.unit)
    placement = placement_of(shape, spacing, unit, crop=options.crop,
                             downsample=options.downsample)
    layers, regions = [], None
    if source and Path(source).exists():
        scan = voxtopo.load(source, spacing=spacing, unit=unit)
        layers.append((scan.data, {"name": Path(source).stem, "scale": scan.spacing,
                                   "metadata": {METADATA_KEY: {"unit": scan.unit,
                                                               "which": "scan"}}}, "image"))
        if options.distance:
            prepared, _ = prepare(scan, options)
            pores = diagram.dimension(0).pairs
            axes = ("birth_z", "birth_y", "birth_x")[3 - diagram.ndim:]
            regions = pore_regions(prepared.data, pores[list(axes)].to_numpy(dtype=np.int64),
                                   pores["death"].to_numpy(), diagram.neighbourhood)
    return layers + result_layers(diagram, placement, folder.name, mark_deaths=True,
                                  regions=regions)
