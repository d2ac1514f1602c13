"""Open a voxtopo result folder in napari: the features as layers over their scan.

A result folder (``pairs.csv`` + ``summary.json``, as written by ``voxtopo analyse`` or the
panel's export) becomes one Points layer per dimension at the birth voxels and one at the
death voxels. When the scan named in ``summary.json`` is still where it was, it is opened
below them with its voxel size, and for a distance transform the pore regions are
recomputed from it; otherwise the features come alone, placed by the stored voxel size.
The layers carry the folder's test (significant or robust, and its thresholds) so that
the diagram panel draws the band as it does for a fresh run.

A folder of ``voxtopo pores`` (it holds ``pores.csv``) becomes Points layers of its pores,
grains, loops and voids at their positions, each with its table as ``features``.

A folder of ``voxtopo periodicity`` becomes its score and period maps as images with the
scan's pixel size, and a Points layer at the centre of every signal with regions.csv as
``features``. A folder of ``voxtopo patches`` becomes each source image that is still where
it was, with a Points layer at the centre of every kept patch (``core`` says whether it is
in the dense core) -- the patch cloud itself lives on a sphere, not in the image.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

import voxtopo
from voxtopo import porosity
from voxtopo.diagram import Diagram
from voxtopo.errors import InputError
from voxtopo.io.results import read_summary
from voxtopo.jobs.analyse import AUTO, AnalysisOptions, prepare

from ._layers import METADATA_KEY, placement_of, result_layers

__all__ = ["napari_get_reader", "read_result_folder"]


#: The file that tells each job's folder apart, in the order they are tried (a patches
#: folder holds a pairs.csv too).
_JOB_FILES = (("pores", "pores.csv"), ("periodicity", "regions.csv"), ("patches", "cloud.npy"),
              ("analyse", "pairs.csv"))


def _job_of(path: Path) -> str | None:
    """The job that wrote the result folder ``path``, None for anything else."""
    if not (path.is_dir() and (path / "summary.json").is_file()):
        return None
    return next((job for job, name in _JOB_FILES if (path / name).is_file()), None)


def napari_get_reader(path):
    """npe2 reader hook: a reader for a voxtopo result folder, None for anything else."""
    if isinstance(path, (list, tuple)):
        if len(path) != 1:
            return None
        path = path[0]
    return read_result_folder if _job_of(Path(path)) is not None else None


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


#: tables of a pores folder: file stem -> the column prefix of the position shown
_PORE_TABLES = {"pores": "body", "grains": "body", "loops": "channel", "voids": "void"}


def _read_pore_folder(folder: Path, summary: dict) -> list[tuple]:
    """Points layers of a ``voxtopo pores`` folder, placed by its stored voxel size."""
    spacing = np.asarray(summary.get("spacing", []), dtype=np.float64)
    ndim = len(spacing)
    if ndim not in (2, 3):
        raise InputError(f"{folder / 'summary.json'} has no voxel size for its {ndim} axes; "
                         f"write the folder again with voxtopo pores.")
    axes = ("z", "y", "x")[3 - ndim:]
    unit = summary.get("unit", "px")
    layers = []
    for stem, prefix in _PORE_TABLES.items():
        path = folder / f"{stem}.csv"
        if not path.is_file():
            continue
        try:
            table = pd.read_csv(path)
            positions = table[[f"{prefix}_{a}" for a in axes]].to_numpy(dtype=np.float64)
        except (ValueError, KeyError, pd.errors.ParserError) as error:
            raise InputError(f"{path} cannot be read as a table of {stem} ({error}); write "
                             f"the folder again with voxtopo pores.") from None
        placed = ~np.isnan(positions).any(axis=1)
        table = table[placed].reset_index(drop=True)
        layers.append((positions[placed] / spacing, {
            "name": f"{stem} · {folder.name}",
            "ndim": ndim,
            "scale": tuple(float(s) for s in spacing),
            "features": table,
            "size": 3.0,
            "symbol": "disc",
            "metadata": {METADATA_KEY: {"result": folder.name, "which": stem,
                                        "unit": unit}},
        }, "points"))
    return layers


def read_result_folder(path) -> list[tuple]:
    """Layer-data tuples for a result folder: the scan (when found), then the features."""
    if isinstance(path, (list, tuple)):
        path = path[0]
    folder = Path(path)
    summary = read_summary(folder)
    job = _job_of(folder)
    if job == "pores":
        return _read_pore_folder(folder, summary)
    if job == "periodicity":
        return _read_periodicity_folder(folder, summary)
    if job == "patches":
        return _read_patches_folder(folder, summary)
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
            pores = diagram.dimension(0)
            regions = porosity.pore_regions(prepared.data, pores.voxels("birth"),
                                            pores.pairs["death"].to_numpy(),
                                            diagram.neighbourhood)
    flag, thresholds = _verdict(summary)
    return layers + result_layers(diagram, placement, folder.name, mark_deaths=True,
                                  regions=regions, flag=flag, thresholds=thresholds,
                                  show_all=options.min_persistence != AUTO)


def _verdict(summary: dict) -> tuple[str | None, dict]:
    """The flag column ("significant" / "robust") and the threshold per dimension of an
    analyse folder whose pairs were tested; (None, {}) otherwise."""
    for key, flag in (("significance", "significant"), ("robustness", "robust")):
        thresholds = (summary.get(key) or {}).get("threshold") or {}
        found = {int(d): float(t) for d, t in thresholds.items() if t is not None}
        if found:
            return flag, found
    return None, {}


def _table(path: Path, job: str) -> pd.DataFrame:
    try:
        return pd.read_csv(path)
    except (ValueError, pd.errors.ParserError) as error:
        raise InputError(f"{path} cannot be read as a table ({error}); write the folder again "
                         f"with voxtopo {job}.") from None


def _read_periodicity_folder(folder: Path, summary: dict) -> list[tuple]:
    """The score and period maps over the scan's grid, and the signals' centres."""
    scan = summary.get("scan") or {}
    unit = scan.get("unit", "px")
    ndim = len(scan.get("shape", [])) - 1
    spacing = tuple(float(s) for s in scan.get("spacing", ()))
    if ndim not in (2, 3) or len(spacing) != ndim:
        raise InputError(f"{folder / 'summary.json'} does not give the time-lapse's shape and "
                         f"pixel size; write the folder again with voxtopo periodicity.")
    time_unit = scan.get("time_unit", "frame")
    layers = []
    for name, colormap, words in (("score", "magma", "score (0 to 1)"),
                                  ("period", "viridis", f"period ({time_unit})")):
        path = folder / f"{name}.tif"
        if not path.is_file():
            continue
        values = voxtopo.load(path).data.astype(np.float32)
        finite = values[np.isfinite(values)]
        limits = ((0.0, 1.0) if name == "score" else
                  (float(finite.min()), float(finite.max()) or 1.0) if len(finite) else (0, 1))
        if limits[0] == limits[1]:
            limits = (limits[0], limits[0] + 1.0)
        layers.append((values, {"name": f"{name} · {folder.name}", "scale": spacing,
                                "colormap": colormap, "contrast_limits": limits,
                                "blending": "additive" if name == "period" else "translucent",
                                "visible": name == "score",
                                "metadata": {METADATA_KEY: {"result": folder.name,
                                                            "which": name, "unit": unit,
                                                            "values": words}}}, "image"))
    table = _table(folder / "regions.csv", "periodicity")
    axes = ("z", "y", "x")[3 - ndim:]
    # folders written before the centre columns were named so held them as y_px, x_px
    names = [f"centre_voxel_{a}" if f"centre_voxel_{a}" in table else f"{a}_px" for a in axes]
    if not set(names) <= set(table.columns):
        raise InputError(f"{folder / 'regions.csv'} has no centre columns {names}; write the "
                         f"folder again with voxtopo periodicity.")
    centres = table[names].to_numpy(dtype=np.float64)
    layers.append((centres, {"name": f"signals · {folder.name}", "ndim": ndim, "scale": spacing,
                             "features": table, "size": 2.0, "symbol": "ring",
                             "metadata": {METADATA_KEY: {"result": folder.name,
                                                         "which": "signals", "unit": unit}}},
                   "points"))
    return layers


def _read_patches_folder(folder: Path, summary: dict) -> list[tuple]:
    """Each source image still where it was, with the centres of its kept patches."""
    try:
        origin = np.load(folder / "cloud_origin.npy", allow_pickle=False)
        core = np.load(folder / "core.npy", allow_pickle=False)
    except (OSError, ValueError) as error:
        raise InputError(f"{folder} lacks a readable cloud_origin.npy or core.npy ({error}); "
                         f"write the folder again with voxtopo patches.") from None
    options = summary.get("options") or {}
    k = int(options.get("k", 3))
    axis = options.get("axis") or 0         # volumes are cut along z unless told otherwise
    axis = "zyx".index(axis) if isinstance(axis, str) else int(axis)
    in_core = np.zeros(len(origin), dtype=bool)
    in_core[core] = True
    layers = []
    for number, source in enumerate(summary.get("sources") or []):
        mine = origin[:, 0] == number
        if not mine.any():
            continue
        name = Path(str(source)).stem
        spacing = None
        if Path(str(source)).exists():
            scan = voxtopo.load(source)
            spacing = tuple(scan.spacing)
            layers.append((scan.data, {"name": name, "scale": spacing,
                                       "metadata": {METADATA_KEY: {"unit": scan.unit,
                                                                   "which": "scan"}}},
                           "image"))
        centre = origin[mine][:, 2:].astype(np.float64) + (k - 1) / 2
        slices = origin[mine][:, 1]
        if (slices >= 0).any():
            centre = np.insert(centre, axis, slices, axis=1)
        features = pd.DataFrame({"patch": np.flatnonzero(mine), "core": in_core[mine],
                                 "row": origin[mine][:, 2], "column": origin[mine][:, 3]})
        kwargs = {"name": f"patches · {name} · {folder.name}", "ndim": centre.shape[1],
                  "features": features, "size": float(k), "symbol": "square",
                  "face_color": "transparent",
                  "metadata": {METADATA_KEY: {"result": folder.name, "which": "patches",
                                              "patch_size": k}}}
        if spacing is not None and len(spacing) == centre.shape[1]:
            kwargs["scale"] = spacing
        layers.append((centre, kwargs, "points"))
    if not layers:
        raise InputError(f"{folder} lists no patch of any source; write the folder again with "
                         f"voxtopo patches.")
    return layers
