"""The main job as one function: scan -> filtration -> persistence -> result folder.

The CLI (`voxtopo analyse`), the napari plugin's export and the batch runner all call
:func:`analyse` or :func:`write_result`, so a result folder means the same thing whichever
shell made it.
"""

from __future__ import annotations

import json
import platform
import time
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from . import filtration as filt
from .diagram import Diagram
from .engine import estimate, persistence
from .errors import InputError
from .io import load, result_folder
from .io.results import check_target
from .memory import ensure_fits, reported_as_too_big
from .scan import Scan

CAUTIONS = (
    "These results support research. They are not a medical diagnosis, nor a certification "
    "of a part, a material or a structure; defer to local codes and licensed practice.",
    "The numbers depend on segmentation, resolution, smoothing and the chosen neighbourhood; "
    "features a few voxels across are at the limit of what the scan resolves.",
)


@dataclass
class AnalysisOptions:
    """Settings of one analysis; every field has the CLI option of the same name.

    superlevel      sweep bright to dark instead of dark to bright
    neighbourhood   4/8 (2D) or 6/26 (3D); None = 8/26, the voxel construction
    sigma           Gaussian smoothing in the scan's unit (None = none)
    crop            'z0:z1,y0:y1,x0:x1' box applied first (None = whole scan)
    downsample      block-mean factor (1 = none)
    distance        analyse the signed distance transform of a mask (pores negative)
    threshold       for distance on a gray scan: a value or "otsu"; pores at or below it
    pores_bright    with threshold: pores are the voxels above it
    fill_invalid    None (NaN is an error), "max", "min" or a number to put in NaN voxels
    min_persistence keep pairs with persistence above this
    periodic        glue opposite faces
    field           prime p of the coefficients Z/p
    engine          "auto", "voxtopo" or "gudhi"
    """

    superlevel: bool = False
    neighbourhood: int | None = None
    sigma: float | None = None
    crop: str | None = None
    downsample: int = 1
    distance: bool = False
    threshold: str | float | None = None
    pores_bright: bool = False
    fill_invalid: str | float | None = None
    min_persistence: float = 0.0
    periodic: bool = False
    field: int = 2
    engine: str = "auto"


def preparation_plan(scan: Scan, options: AnalysisOptions) -> list[tuple[str, int]]:
    """What each step of :func:`prepare` and then persistence will allocate beyond the
    scan, in order.

    Returns ``(step, bytes)`` pairs, worked out from shapes alone so that a step that would
    not fit is refused before any earlier step has run.
    """
    shape, dtype = scan.shape, scan.data.dtype
    steps = []

    def named(step):
        return f"{step} the {'x'.join(map(str, shape))} scan"

    if options.crop:
        box = (filt.parse_box(options.crop, scan.ndim) if isinstance(options.crop, str)
               else options.crop)
        shape = tuple(len(range(*b.indices(n))) for b, n in zip(box, shape))
    if options.fill_invalid is not None:
        steps.append((named("Filling the invalid voxels of"),
                      int(np.prod(shape, dtype=np.int64)) * dtype.itemsize))
    if options.downsample and options.downsample != 1:
        factors = tuple(max(int(f), 1) for f in np.broadcast_to(options.downsample, scan.ndim))
        steps.append((named("Downsampling"), filt.downsampling_bytes(shape, factors)))
        shape = tuple(n // f for n, f in zip(shape, factors))
    if options.sigma:
        steps.append((named("Smoothing"), filt.smoothing_bytes(shape, dtype)))
        dtype = np.dtype(np.float32)
    if options.distance:
        steps.append((named("The distance transform of"), filt.distance_bytes(shape)))
        dtype = np.dtype(np.float64)
    steps.append((named("Persistence of"),
                  estimate(shape, dtype, engine=options.engine,
                           neighbourhood=options.neighbourhood, field=options.field,
                           periodic=bool(np.any(options.periodic)))))
    return steps


def prepare(scan: Scan, options: AnalysisOptions) -> tuple[Scan, dict]:
    """Apply crop, invalid-voxel filling, downsampling, smoothing and (optionally) the
    signed distance transform, in that order. Returns the scan to analyse and notes.

    Every step's memory is checked before the first one runs (:func:`preparation_plan`).
    """
    # persistence, the last step, is checked by the engine with its own remedies
    for step, needed in preparation_plan(scan, options)[:-1]:
        ensure_fits(needed, step, filt.PREPARATION_REMEDY)
    notes = {}
    if options.crop:
        scan = filt.crop(scan, options.crop)
    if options.fill_invalid is not None:
        scan = filt.fill_invalid(scan, options.fill_invalid)
    filt.check_finite(scan)
    if options.downsample and options.downsample != 1:
        scan = filt.downsample(scan, options.downsample)
    if options.sigma:
        scan = filt.smooth(scan, options.sigma)
    if options.distance:
        data = scan.data
        is_binary = data.dtype == bool or set(np.unique(data).tolist()) <= {0, 1}
        if options.threshold is None and not is_binary:
            raise InputError(
                f"{scan.source or 'The scan'} is not a binary mask; give --threshold VALUE "
                f"or --threshold otsu to separate pores from solid."
            )
        if options.threshold is not None:
            mask, used = filt.threshold(scan, options.threshold, below=not options.pores_bright)
            notes["threshold"] = {"value": used, "method": "otsu" if options.threshold == "otsu"
                                  else "given", "pores": "above" if options.pores_bright
                                  else "at or below"}
        else:
            mask = data.astype(bool)
        scan = filt.signed_distance(scan.with_data(mask))
    return scan, notes


def analyse(source, out, options: AnalysisOptions | None = None, *, force: bool = False,
            progress=None, load_options: dict | None = None) -> Diagram:
    """Run the main job and write its result folder.

    Parameters
    ----------
    source : path or Scan
        A file/folder/glob for :func:`voxtopo.load`, or a Scan already in memory.
    out : path
        The result folder to create (``pairs.csv``, ``summary.json``, PNG plots).
    options : AnalysisOptions
    force : bool
        Replace ``out`` if it exists.
    progress : callable(phase, fraction), optional
    load_options : dict, optional
        Keyword arguments for :func:`voxtopo.load` (spacing, unit, channel, ...).

    Returns
    -------
    Diagram
    """
    options = options or AnalysisOptions()
    check_target(out, force)
    timings = {}
    start = time.perf_counter()
    scan = source if isinstance(source, Scan) else load(source, **(load_options or {}))
    timings["load"] = time.perf_counter() - start
    if progress is not None:
        progress("load", 1.0)
    planned = max(needed for _, needed in preparation_plan(scan, options))
    with reported_as_too_big(f"Analysing {scan.source or 'the scan'}", planned,
                             filt.PREPARATION_REMEDY):
        start = time.perf_counter()
        prepared, notes = prepare(scan, options)
        timings["prepare"] = time.perf_counter() - start
        start = time.perf_counter()
        diagram = persistence(prepared, superlevel=options.superlevel,
                              neighbourhood=options.neighbourhood, periodic=options.periodic,
                              field=options.field, engine=options.engine,
                              min_persistence=options.min_persistence, progress=progress)
        timings["persistence"] = time.perf_counter() - start
    write_result(out, scan, diagram, options, prepared=prepared, timings=timings, notes=notes,
                 force=force)
    return diagram


def _records(frame) -> list[dict]:
    """Rows as JSON values: missing and infinite numbers become null."""
    out = []
    for row in frame.to_dict(orient="records"):
        clean = {}
        for key, value in row.items():
            if pd.isna(value):
                clean[key] = None
            elif isinstance(value, (np.integer, int)):
                clean[key] = int(value)
            elif isinstance(value, (np.floating, float)):
                clean[key] = float(value) if np.isfinite(value) else None
            else:
                clean[key] = value
        out.append(clean)
    return out


def software_versions() -> dict:
    """Versions of voxtopo, Python and the libraries the numbers depend on."""
    import importlib.metadata as md
    versions = {"voxtopo": __version__, "python": platform.python_version()}
    for name in ("numpy", "scipy", "scikit-image", "gudhi", "numba", "tifffile", "pandas"):
        try:
            versions[name] = md.version(name)
        except md.PackageNotFoundError:
            versions[name] = None
    return versions


def summarise(scan: Scan, diagram: Diagram, options: AnalysisOptions, *, prepared=None,
              timings=None, notes=None) -> dict:
    """The content of summary.json (the diagram's own description is added on save)."""
    prepared = prepared or scan
    threshold = options.min_persistence
    most = diagram.most_persistent(10)
    top = {str(d): _records(most[most["dim"] == d]) for d in range(diagram.ndim)}
    return {
        "voxtopo_version": __version__,
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "scan": scan.describe(),
        "analysed": prepared.describe(),
        "options": asdict(options),
        "counts": {str(d): n for d, n in diagram.counts(threshold).items()},
        "essential": {str(d): int(((diagram.pairs["dim"] == d)
                                   & ~np.isfinite(diagram.pairs["death"])).sum())
                      for d in range(diagram.ndim)},
        "most_persistent": top,
        "timings_seconds": {k: round(v, 4) for k, v in (timings or {}).items()},
        "preparation": notes or {},
        "software": software_versions(),
        "cautions": list(CAUTIONS),
    }


def write_result(out, scan: Scan, diagram: Diagram, options: AnalysisOptions | None = None, *,
                 prepared=None, timings=None, notes=None, force: bool = False) -> Path:
    """Write pairs.csv, summary.json and the standard plots into ``out``, atomically."""
    from .report.html import write_report
    from .report.plots import save_standard_plots

    options = options or AnalysisOptions()
    timings = dict(timings or {})
    start = time.perf_counter()
    with result_folder(out, force=force) as tmp:
        summary = summarise(scan, diagram, options, prepared=prepared, timings=timings,
                            notes=notes)
        (tmp / "summary.json").write_text(json.dumps(summary, indent=2, allow_nan=False))
        diagram.save(tmp)
        summary["plots"] = save_standard_plots(diagram, tmp)
        summary["timings_seconds"]["write"] = round(time.perf_counter() - start, 4)
        summary["diagram"] = diagram.description()
        (tmp / "summary.json").write_text(json.dumps(summary, indent=2, allow_nan=False))
        write_report(tmp)
    return Path(out)
