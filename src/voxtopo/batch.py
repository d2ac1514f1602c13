"""Many scans with one set of settings, as dask.distributed tasks.

``voxtopo batch MANIFEST --out DIR`` runs one job ("analyse", "pores" with
:mod:`voxtopo.porosity`, or "patches" with :mod:`voxtopo.patches`) on every scan of a
manifest, one dask task per scan, on a local cluster or on any dask scheduler, and
writes::

    DIR/settings.toml (or .yaml)   the settings every scan was run with
    DIR/manifest.csv               the manifest as read, with the result folder names
    DIR/scans/<name>/              one complete result folder per scan
    DIR/summary.csv (+ .parquet)   one row per scan: manifest columns + key numbers
    DIR/failures.csv               scans that failed, with their one-sentence message
    DIR/report.html                the batch report, linking each scan's own report

A rerun with the same DIR skips scans whose result folder is complete (it has
summary.json; folders are written atomically) and redoes the rest, including folders left
half-made by an interrupted run.

The manifest
------------
A CSV file with a header row and one row per scan. Columns:

``path`` (required)
    The scan: any file, folder, glob or zarr store :func:`voxtopo.load` reads; relative
    paths are relative to the manifest's folder.
``spacing`` (optional)
    Voxel size "z,y,x" (or one number for every axis), e.g. "2.5,2.5,2.5"; wins over the
    file's metadata and over the settings file.
``unit`` (optional)
    Unit of the spacing (um, nm, mm, ...).
``group`` (optional)
    A label for comparisons (``voxtopo compare DIR`` colours and tests by it).
``name`` (optional)
    The result folder name; by default the file name without its extensions, made unique.
Any other column is kept as it is and copied into summary.csv.

Instead of a CSV file, MANIFEST may be a glob such as ``"scans/*.tif"`` (quote it).

The settings file (TOML, or YAML with the same keys)
----------------------------------------------------
::

    job = "analyse"            # "analyse" (persistence diagram), "pores" (porosity)
                               # or "patches" (high-contrast patch space of each scan)

    [load]                     # how every scan is read (manifest columns win)
    spacing = [2.5, 2.5, 2.5]  # voxel size z, y, x (or one number)
    unit = "um"
    channel = 0                # of a multichannel file
    timepoint = 0              # of a time series
    level = 0                  # OME-Zarr / pyramid resolution level
    shape = [64, 128, 128]     # raw files only, with dtype, byte_order and offset
    dtype = "uint16"
    byte_order = "little"
    offset = 0

    [analyse]                  # every field of voxtopo.pipeline.AnalysisOptions:
    superlevel = false         # superlevel, neighbourhood, sigma, crop, downsample,
    neighbourhood = 26         # distance, threshold, pores_bright, fill_invalid,
    min_persistence = 0.0      # min_persistence, periodic, field, engine

    [pores]                    # keywords of voxtopo.porosity.analyse: threshold,
    threshold = "otsu"         # pores_bright, label, axis, neighbourhood,
    pores_bright = false       # min_lifetime, engine

    [patches]                  # every field of voxtopo.patches.PatchOptions: k,
    k = 3                      # contrast_percent, positions, seed, log, axis, slices,
    landmarks = 150            # k_neighbour, density_percent, landmarks, fields,
                               # max_edge, method, max_dimension

    [batch]
    workers = 2                # local cluster size (default: the number of cores)
    memory_per_worker = "auto" # bytes, "8GB", or "auto" (from the memory estimate)
    out_of_core = "auto"       # zarr scans: "auto" (when a scan would not fit a
                               # worker), true (always) or false (never)
    chunks = [128, 128, 128]   # out-of-core block shape (default: the store's chunks)

Every key is optional; unknown keys are refused with the key's name.
"""

from __future__ import annotations

import csv
import glob
import json
import math
import os
import re
import shutil
import sys
import time
from dataclasses import dataclass, field, fields
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError, VoxtopoError
from .engine.own import THREADS_VARIABLE

__all__ = ["run_batch", "read_manifest", "read_settings", "Settings", "ScanEntry",
           "analyse_out_of_core", "summary_table", "plan_workers"]

JOBS = ("analyse", "pores", "patches")
LOAD_KEYS = ("spacing", "unit", "channel", "timepoint", "level", "shape", "dtype",
             "byte_order", "offset")
PORES_KEYS = ("threshold", "pores_bright", "label", "axis", "neighbourhood", "min_lifetime",
              "engine")
BATCH_KEYS = ("workers", "memory_per_worker", "out_of_core", "chunks")

#: Working memory of one scan beyond the persistence engine's own estimate: the loaded
#: array, its float copy and the prepared filtration, planned at 8 bytes a voxel each.
_COPIES_PER_SCAN = 3

#: Smallest memory limit given to a worker: the interpreter with numpy, numba, gudhi and
#: matplotlib loaded takes about half of it before any scan is read.
_MIN_WORKER_BYTES = 2 * 2**30

#: How workers run. Memory: our tasks hold plain numpy arrays that dask
#: cannot spill, and a paused worker would hold its scan forever, so there is no spilling
#: and no pausing: a worker that passes 95 % of its limit is restarted and its scan is
#: recorded as failed (retried once, in case another task was the one that grew).
_WORKER_CONFIG = {
    "distributed.worker.memory.target": False,
    "distributed.worker.memory.spill": False,
    "distributed.worker.memory.pause": False,
    "distributed.worker.memory.terminate": 0.95,
    "distributed.scheduler.allowed-failures": 1,
    # dask's sampling profiler takes the GIL from the task thread every 10 ms to walk its
    # stack; our tasks are one long call each, so the profile says little and costs time
    "distributed.worker.profile.enabled": False,
    "distributed.admin.tick.interval": "500ms",
    # dask starts workers with MALLOC_TRIM_THRESHOLD_=65536, which turns off glibc's
    # reuse of freed large blocks: every array of a scan then costs fresh page faults
    # (measured: 16 scans of 128^3 took 6.6 % longer with it). A worker keeps, at most,
    # the memory of its largest scan for the next one.
    "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
}

#: Keys of a scan's summary.json that are not key numbers for the table.
_NOT_KEY_NUMBERS = {"most_persistent", "software", "cautions", "plots", "files", "options",
                    "diagram", "created", "voxtopo_version", "preparation", "counts",
                    "essential", "notes"}


# --- settings -----------------------------------------------------------------------------
@dataclass
class Settings:
    """The content of a settings file, checked."""

    job: str = "analyse"
    load: dict = field(default_factory=dict)
    analyse: dict = field(default_factory=dict)
    pores: dict = field(default_factory=dict)
    patches: dict = field(default_factory=dict)
    batch: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"job": self.job, "load": dict(self.load), "analyse": dict(self.analyse),
                "pores": dict(self.pores), "patches": dict(self.patches),
                "batch": dict(self.batch)}


def _analysis_fields() -> tuple[str, ...]:
    from .pipeline import AnalysisOptions

    return tuple(f.name for f in fields(AnalysisOptions))


def _patch_fields() -> tuple[str, ...]:
    try:
        from .patches import PatchOptions
    except ImportError:
        return ()
    return tuple(f.name for f in fields(PatchOptions))


def read_settings(path=None) -> tuple[Settings, str, str]:
    """Read and check a TOML or YAML settings file.

    Returns (settings, the file's text, its suffix "toml" or "yaml"); without a path, the
    defaults and their TOML text.
    """
    if path is None:
        settings = Settings()
        return settings, _to_toml(settings.as_dict()), "toml"
    path = Path(path)
    if not path.is_file():
        raise InputError(f"No settings file at {path}; give a .toml or .yaml file.")
    text = path.read_text(encoding="utf-8", errors="replace")
    suffix = path.suffix.lower()
    try:
        if suffix == ".toml":
            try:
                import tomllib
            except ModuleNotFoundError:  # Python 3.10: the same parser, packaged as tomli
                import tomli as tomllib

            raw = tomllib.loads(text)
            kind = "toml"
        elif suffix in (".yaml", ".yml"):
            import yaml

            raw = yaml.safe_load(text) or {}
            kind = "yaml"
        else:
            raise InputError(f"{path} should be a .toml or .yaml settings file, not "
                             f"{suffix or 'a file without extension'}.")
    except InputError:
        raise
    except Exception as exc:
        raise InputError(f"{path} is not valid {suffix[1:].upper()} "
                         f"({' '.join(str(exc).split())[:120]}).") from None
    if not isinstance(raw, dict):
        raise InputError(f"{path} should hold keys and tables, got a {type(raw).__name__}.")
    return _check_settings(raw, path), text, kind


def _check_settings(raw: dict, path) -> Settings:
    allowed = {"job", "load", "analyse", "pores", "patches", "batch"}
    unknown = set(raw) - allowed
    if unknown:
        raise InputError(f"{path} has the unknown key(s) {sorted(unknown)}; the settings "
                         f"file knows {sorted(allowed)}.")
    job = raw.get("job", "analyse")
    if job not in JOBS:
        raise InputError(f"job = {job!r} in {path} is not a job voxtopo batch runs; choose "
                         f"one of {list(JOBS)}.")
    tables = {"load": LOAD_KEYS, "analyse": _analysis_fields(), "pores": PORES_KEYS,
              "patches": _patch_fields(), "batch": BATCH_KEYS}
    checked = {}
    for table, keys in tables.items():
        value = raw.get(table, {}) or {}
        if not isinstance(value, dict):
            raise InputError(f"[{table}] in {path} should be a table of keys, got {value!r}.")
        unknown = set(value) - set(keys)
        if unknown:
            raise InputError(f"[{table}] in {path} has the unknown key(s) {sorted(unknown)}; "
                             f"it knows {sorted(keys)}.")
        checked[table] = dict(value)
    out_of_core = checked["batch"].get("out_of_core", "auto")
    if out_of_core not in ("auto", True, False):
        raise InputError(f"out_of_core in {path} should be \"auto\", true or false, "
                         f"got {out_of_core!r}.")
    workers = checked["batch"].get("workers")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise InputError(f"workers in {path} should be a whole number of 1 or more, "
                         f"got {workers!r}.")
    if "memory_per_worker" in checked["batch"]:
        _parse_bytes(checked["batch"]["memory_per_worker"], path)
    return Settings(job=job, **checked)


def _parse_bytes(value, where) -> int | None:
    if value in (None, "auto"):
        return None
    if isinstance(value, (int, float)) and not isinstance(value, bool) and value > 0:
        return int(value)
    match = re.fullmatch(r"\s*([\d.]+)\s*([kMGT]?i?B)\s*", str(value))
    units = {"B": 1, "kB": 1e3, "MB": 1e6, "GB": 1e9, "TB": 1e12, "kiB": 2**10,
             "MiB": 2**20, "GiB": 2**30, "TiB": 2**40}
    if not match or match.group(2) not in units:
        raise InputError(f"memory_per_worker in {where} should be a number of bytes, \"auto\" "
                         f"or a size like \"8GB\", got {value!r}.")
    return int(float(match.group(1)) * units[match.group(2)])


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return json.dumps(str(value))


def _to_toml(settings: dict) -> str:
    """TOML text of a settings dict (scalars, lists, one level of tables)."""
    lines = ["# voxtopo batch settings (see `voxtopo batch --help` for every key)"]
    for key, value in settings.items():
        if not isinstance(value, dict):
            lines.append(f"{key} = {_toml_value(value)}")
    for key, value in settings.items():
        if isinstance(value, dict):
            lines.append(f"\n[{key}]")
            lines.extend(f"{k} = {_toml_value(v)}" for k, v in value.items() if v is not None)
    return "\n".join(lines) + "\n"


# --- manifest -----------------------------------------------------------------------------
@dataclass
class ScanEntry:
    """One row of the manifest."""

    name: str
    path: str
    spacing: tuple | None
    unit: str | None
    group: str
    columns: dict


def _spacing_text(text, where) -> tuple | None:
    if text is None or (isinstance(text, float) and math.isnan(text)) or str(text).strip() == "":
        return None
    try:
        values = tuple(float(v) for v in str(text).replace(";", ",").split(","))
    except ValueError:
        raise InputError(f"spacing {text!r} in {where} should be numbers like "
                         f"\"2.5,2.5,2.5\" (z, y, x) or one number.") from None
    if not all(np.isfinite(v) and v > 0 for v in values):
        raise InputError(f"spacing {text!r} in {where} should be positive numbers.")
    return values


def _folder_name(path: str) -> str:
    stem = Path(path.rstrip("/")).name.split(".")[0] or "scan"
    return re.sub(r"[^A-Za-z0-9_-]+", "_", stem).strip("_") or "scan"


def read_manifest(manifest) -> list[ScanEntry]:
    """Read a manifest CSV (or expand a glob) into ScanEntry rows, in file order.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "m.csv").write_text("path,group\\na.npy,before\\nb.npy,after\\n")
    >>> [(e.name, e.group) for e in read_manifest(folder / "m.csv")]
    [('a', 'before'), ('b', 'after')]
    """
    text = str(manifest)
    path = Path(manifest)
    if path.is_file() and path.suffix.lower() == ".csv":
        try:
            frame = pd.read_csv(path, dtype=str, keep_default_na=False)
        except Exception as exc:
            raise InputError(f"{path} is not a readable CSV manifest "
                             f"({' '.join(str(exc).split())[:120]}).") from None
        if "path" not in frame.columns:
            raise InputError(f"{path} has no 'path' column; its header should start with "
                             f"path (then optionally spacing, unit, group, name).")
        base = path.parent
        rows = frame.to_dict(orient="records")
    else:  # a glob, or the path of one scan (a glob that matches itself)
        matches = sorted(glob.glob(text))
        if not matches:
            raise InputError(f"No manifest file and no scans match {text}; give a .csv "
                             f"manifest or a glob that matches scan files.")
        base = Path(".")
        rows = [{"path": m} for m in matches]
    if not rows:
        raise InputError(f"The manifest {text} lists no scans.")
    entries, used = [], {}
    for number, row in enumerate(rows, start=2):
        raw_path = str(row.get("path", "")).strip()
        if not raw_path:
            raise InputError(f"Row {number} of {text} has an empty path.")
        full = raw_path if Path(raw_path).is_absolute() else str(base / raw_path)
        name = str(row.get("name", "") or "").strip() or _folder_name(raw_path)
        name = re.sub(r"[^A-Za-z0-9_.-]+", "_", name)
        if name in used:
            used[name] += 1
            name = f"{name}-{used[name]}"
        used.setdefault(name, 1)
        where = f"row {number} of {text}"
        entries.append(ScanEntry(name=name, path=full,
                                 spacing=_spacing_text(row.get("spacing"), where),
                                 unit=(str(row.get("unit") or "").strip() or None),
                                 group=str(row.get("group", "") or ""),
                                 columns={k: v for k, v in row.items() if k != "name"}))
    return entries


# --- one scan, on a worker -------------------------------------------------------------------
def _load_options(entry: ScanEntry, settings: Settings) -> dict:
    options = dict(settings.load)
    if entry.spacing is not None:
        options["spacing"] = entry.spacing
    if entry.unit is not None:
        options["unit"] = entry.unit
    if "shape" in options:
        options["shape"] = tuple(options["shape"])
    if "spacing" in options and isinstance(options["spacing"], list):
        options["spacing"] = tuple(options["spacing"])
    return options


def _analysis_options(settings: Settings):
    from .pipeline import AnalysisOptions

    try:
        return AnalysisOptions(**settings.analyse)
    except TypeError as exc:
        raise InputError(f"The [analyse] settings cannot be used ({exc}).") from None


def analyse_out_of_core(source, out, options=None, *, load_options=None, chunks=None,
                        force: bool = False, scheduler=None):
    """The analyse job for a zarr / OME-Zarr scan too big for memory.

    Dimension 0 and dimension d-1 are computed chunk by chunk
    (:func:`voxtopo.engine.chunked.chunked_persistence`); the result folder is the one
    ``voxtopo analyse`` writes, and its notes say that dimension 1 of a volume is absent.
    Options that need the whole volume at once (smoothing, cropping, downsampling, the
    distance transform, periodic boundaries, other fields than Z/2) are refused.
    """
    from .engine.chunked import chunked_persistence, open_chunked
    from .io.results import check_target
    from .pipeline import AnalysisOptions, write_result
    from .scan import Scan

    options = options or AnalysisOptions()
    whole = {"sigma": options.sigma, "crop": options.crop,
             "downsample": options.downsample not in (None, 1), "distance": options.distance,
             "periodic": options.periodic, "fill_invalid": options.fill_invalid,
             "field": options.field != 2}
    asked = [k for k, v in whole.items() if v]
    if asked:
        raise InputError(f"The out-of-core path cannot apply {', '.join(asked)} (they need the "
                         f"whole volume in memory); leave them out or drop --out-of-core.")
    check_target(out, force)
    load_options = dict(load_options or {})
    unknown = set(load_options) - {"spacing", "unit", "channel", "timepoint", "level"}
    if unknown:
        raise InputError(f"The out-of-core path reads zarr stores and takes no {sorted(unknown)} "
                         f"option; leave it out.")
    opened = open_chunked(source, level=load_options.get("level", 0),
                          channel=load_options.get("channel"),
                          timepoint=load_options.get("timepoint"), chunks=chunks,
                          unit=load_options.get("unit"))
    if load_options.get("spacing") is not None:
        spacing = tuple(float(v) for v in np.atleast_1d(load_options["spacing"]))
        spacing = spacing * opened.ndim if len(spacing) == 1 else spacing
        if len(spacing) != opened.ndim:
            raise InputError(f"Spacing {spacing} has {len(spacing)} values but {source} is "
                             f"{opened.ndim}D; give one value per axis in (z, y, x) order.")
        opened.spacing = spacing
    start = time.perf_counter()
    diagram = chunked_persistence(opened, superlevel=options.superlevel,
                                  neighbourhood=options.neighbourhood,
                                  min_persistence=options.persistence_floor, scheduler=scheduler)
    seconds = time.perf_counter() - start
    placeholder = np.broadcast_to(np.zeros((), opened.dtype), opened.shape)
    scan = Scan(placeholder, spacing=opened.spacing, unit=opened.unit, source=opened.source)
    missing = [d for d in range(1, opened.ndim - 1)]
    write_result(out, scan, diagram, options, timings={"persistence": seconds},
                 notes={"out_of_core": {"chunks": list(opened.chunks),
                                        "dimensions_not_computed": missing}}, force=force)
    return diagram


def _run_one(job: str, path: str, out: str, load_options: dict, settings: dict) -> dict:
    """Run one scan's job ("analyse" or "pores") into ``out`` on a dask worker.

    Bad input and unexpected errors alike come back as a failed record with a message,
    so that one broken scan never stops the others."""
    start = time.perf_counter()
    # dask gives each task one thread: the engine's second thread would only compete
    # with the worker's other tasks (and with other workers on the same machine)
    os.environ[THREADS_VARIABLE] = "1"
    try:
        settings = Settings(**settings)
        if job == "analyse":
            from .pipeline import analyse

            analyse(path, out, _analysis_options(settings), force=True,
                    load_options=load_options)
        elif job == "pores":
            _run_pores(path, out, load_options, settings)
        else:
            _run_patches(path, out, load_options, settings)
        return {"status": "done", "message": "", "seconds": time.perf_counter() - start}
    except (VoxtopoError, MemoryError) as error:
        message = str(error) or type(error).__name__
    except Exception as error:  # an unexpected failure still must not stop the others
        message = f"unexpected {type(error).__name__}: {' '.join(str(error).split())[:300]}"
    return {"status": "failed", "message": message, "seconds": time.perf_counter() - start}


def _run_pores(path, out, load_options, settings: Settings) -> None:
    try:
        from . import porosity
    except ImportError:
        raise InputError("The pores job needs voxtopo.porosity, which this installation "
                         "lacks; use job = \"analyse\".") from None
    from .io import load
    from .report.html import write_report

    scan = load(path, **load_options)
    options = dict(settings.pores)
    if isinstance(options.get("axis"), list):
        options["axis"] = list(options["axis"])
    analysis = porosity.analyse(scan, **options)
    porosity.write_pores(out, analysis, scan, force=True)
    write_report(out)


def _run_patches(path, out, load_options, settings: Settings) -> None:
    try:
        from . import patches
    except ImportError:
        raise InputError("The patches job needs voxtopo.patches, which this installation "
                         "lacks; use job = \"analyse\".") from None
    from .io import load
    from .report.html import write_report

    scan = load(path, **load_options)
    options = {k: tuple(v) if isinstance(v, list) else v for k, v in settings.patches.items()}
    try:
        chosen = patches.PatchOptions(**options)
    except TypeError as exc:
        raise InputError(f"The [patches] settings cannot be used ({exc}).") from None
    patches.analyse([scan], out, chosen, force=True)
    write_report(out)


# --- planning -------------------------------------------------------------------------------
def _peek(path: str, load_options: dict):
    """(shape, dtype) of a scan from its header alone, or None when it cannot be told."""
    from .io import read_header

    try:
        return read_header(path, shape=load_options.get("shape"),
                           dtype=load_options.get("dtype"),
                           byte_order=load_options.get("byte_order", "little"),
                           offset=load_options.get("offset", 0),
                           level=load_options.get("level", 0))
    except Exception:
        return None


def scan_bytes(shape, dtype, job: str = "analyse") -> int:
    """Planned peak memory of one scan's job: the engine's estimate plus the copies the
    pipeline makes (loaded, float, prepared); the pores job twice that."""
    from .engine import estimate

    voxels = int(np.prod(shape, dtype=np.int64))
    need = estimate(shape, np.float64) + _COPIES_PER_SCAN * 8 * voxels
    return int(need * (2 if job == "pores" else 1))


def plan_workers(needs: list[int], *, workers=None, memory_per_worker=None,
                 available=None, cores=None) -> tuple[int, int]:
    """(number of workers, memory limit per worker in bytes) for a local cluster.

    Each worker gets room for the largest scan (plus a quarter for the interpreter and
    libraries, at least 512 MiB); there are as many workers as cores (or ``workers``),
    fewer when the machine's memory cannot give each of them that much.

    Examples
    --------
    >>> plan_workers([2 * 10**9], available=5 * 10**9, cores=4)
    (1, 2500000000)
    """
    from .memory import BUDGET_FRACTION, available_bytes

    available = available_bytes() if available is None else available
    cores = cores or os.cpu_count() or 1
    count = int(workers or cores)
    budget = int(available * BUDGET_FRACTION)
    if memory_per_worker:
        limit = int(memory_per_worker)
    else:
        largest = max(needs) if needs else 0
        limit = max(int(largest * 1.25), _MIN_WORKER_BYTES)
    if count * limit > budget:
        count = max(1, budget // limit)
    if memory_per_worker is None and limit * count > budget:
        limit = budget
    return int(count), int(limit)


# --- the run ------------------------------------------------------------------------------
def _clear_half_made(scans_dir: Path, name: str) -> bool:
    """Remove what an interrupted run left of one scan; True when something was removed."""
    removed = False
    for partial in scans_dir.glob(f".{name}.partial-*"):
        shutil.rmtree(partial, ignore_errors=True)
        removed = True
    for old in scans_dir.glob(f".{name}.old-*"):
        shutil.rmtree(old, ignore_errors=True)
    target = scans_dir / name
    if target.exists() and not (target / "summary.json").is_file():
        shutil.rmtree(target, ignore_errors=True)
        removed = True
    return removed


def _key_numbers(summary: dict) -> dict:
    """The scalar numbers of a scan's summary.json, flattened to table columns."""
    row = {}
    for key, prefix in (("counts", "pairs_dim"), ("essential", "essential_dim")):
        for d, n in (summary.get(key) or {}).items():
            # the analyse job counts pairs per dimension; other jobs count their features
            row[f"{prefix}{d}" if str(d).isdigit() else f"{key}_{d}"] = n

    def add(prefix, value, depth):
        if isinstance(value, dict):
            if depth < 2:
                for k, v in value.items():
                    add(f"{prefix}_{k}" if prefix else str(k), v, depth + 1)
        elif isinstance(value, (list, tuple)):
            if value and all(isinstance(v, (int, float, str)) for v in value) and len(value) <= 4:
                row[prefix] = ",".join(str(v) for v in value)
        elif isinstance(value, (bool, int, float, str)) or value is None:
            row[prefix] = value

    for key, value in summary.items():
        if key not in _NOT_KEY_NUMBERS:
            add(key, value, 0)
    out_of_core = (summary.get("preparation") or {}).get("out_of_core") or {}
    for d in out_of_core.get("dimensions_not_computed", []):
        # an out-of-core run has no pairs of these dimensions: unknown, not zero
        row[f"pairs_dim{d}"] = row[f"essential_dim{d}"] = None
    return row


def summary_table(out, entries: list[ScanEntry], records: dict | None = None) -> pd.DataFrame:
    """One row per scan: manifest columns, name, status, result folder, key numbers."""
    out = Path(out)
    records = records or {}
    rows = []
    for entry in entries:
        row = dict(entry.columns)
        row["name"] = entry.name
        folder = out / "scans" / entry.name
        summary_path = folder / "summary.json"
        if summary_path.is_file():
            row["status"] = "done"
            row["result"] = f"scans/{entry.name}"
            for key, value in _key_numbers(json.loads(summary_path.read_text())).items():
                # the manifest's own columns are kept as the user wrote them
                row[f"result_{key}" if key in entry.columns else key] = value
        else:
            row["status"] = "failed"
            row["result"] = ""
            row["message"] = records.get(entry.name, {}).get("message", "not run")
        rows.append(row)
    table = pd.DataFrame(rows)
    for column in table.columns:
        values = table[column].dropna()
        if len(values) and all(isinstance(v, (int, np.integer)) and not isinstance(v, bool)
                               for v in values):
            # counts stay whole numbers next to the empty cells of failed scans
            table[column] = table[column].astype("Int64")
    return table


def _format_seconds(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "unknown"
    seconds = int(round(seconds))
    if seconds < 60:
        return f"{seconds} s"
    minutes, seconds = divmod(seconds, 60)
    if minutes < 60:
        return f"{minutes} min {seconds:02d} s"
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes:02d} min"


class _Progress:
    """done / failed / left with a time estimate, one line per finished scan on stderr."""

    def __init__(self, total: int, skipped: int, stream=None):
        self.stream = stream or sys.stderr
        self.total, self.skipped = total, skipped
        self.done = self.failed = 0
        self.started = time.perf_counter()

    def update(self, name: str, record: dict) -> None:
        if record["status"] == "done":
            self.done += 1
        else:
            self.failed += 1
        finished = self.done + self.failed
        left = self.total - finished
        elapsed = time.perf_counter() - self.started
        eta = elapsed / finished * left if finished else float("nan")
        what = "done" if record["status"] == "done" else f"FAILED: {record['message']}"
        self.stream.write(f"voxtopo batch: {name} {what}\n"
                          f"voxtopo batch: {self.done} done, {self.failed} failed, {left} left"
                          f"{f' (+{self.skipped} done earlier)' if self.skipped else ''}; "
                          f"about {_format_seconds(eta)} to go\n")
        self.stream.flush()


def _prepare_out(out: Path, settings_text: str, kind: str, settings: Settings) -> None:
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} exists and is not a folder; name a folder for the batch.")
    if not out.parent.exists():
        raise InputError(f"The folder {out.parent} that should hold {out.name} does not exist.")
    saved = [p for p in (out / "settings.toml", out / "settings.yaml") if p.is_file()]
    if saved:
        before, _, _ = read_settings(saved[0])
        if before.as_dict() != settings.as_dict():
            raise InputError(f"{out} was run with the settings in {saved[0].name}, which differ "
                             f"from these; use the same settings to resume, or a new --out.")
    out.mkdir(exist_ok=True)
    (out / "scans").mkdir(exist_ok=True)
    if not saved:
        (out / f"settings.{kind}").write_text(settings_text, encoding="utf-8")


def _write_manifest(out: Path, entries: list[ScanEntry]) -> None:
    columns = ["name"] + list(dict.fromkeys(k for e in entries for k in e.columns))
    with open(out / "manifest.csv", "w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=columns)
        writer.writeheader()
        for entry in entries:
            writer.writerow({"name": entry.name, **entry.columns})


def _job_of(entry: ScanEntry, settings: Settings, load_options: dict, worker_bytes) -> str:
    if settings.job != "analyse":
        return settings.job
    choice = settings.batch.get("out_of_core", "auto")
    from .io._zarr import is_zarr

    path = Path(entry.path)
    if choice is False or not path.is_dir() or not is_zarr(path):
        return "analyse"
    if choice is True:
        return "analyse-out-of-core"
    peek = _peek(entry.path, load_options)
    if peek is not None and worker_bytes and scan_bytes(*peek) > worker_bytes:
        return "analyse-out-of-core"
    return "analyse"


def _client(scheduler, workers, limit, stream):
    from distributed import Client, LocalCluster

    if scheduler:
        try:
            client = Client(scheduler, timeout="10s")
        except Exception as exc:
            raise InputError(f"Could not reach the dask scheduler at {scheduler} "
                             f"({' '.join(str(exc).split())[:120]}); check the address or leave "
                             f"out --scheduler to use a local cluster.") from None
        return client, None
    import dask

    with dask.config.set(_WORKER_CONFIG):
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               memory_limit=limit, host="127.0.0.1",
                               dashboard_address="127.0.0.1:0", silence_logs=40)
    return Client(cluster), cluster


def run_batch(manifest, out, *, settings_path=None, scheduler=None, workers=None,
              stream=None) -> pd.DataFrame:
    """Run every scan of ``manifest`` as a dask task and write the batch folder ``out``.

    Parameters
    ----------
    manifest : path or glob
        A CSV manifest or a glob of scan files (see the module docstring).
    out : path
        The batch folder (created; an existing one is resumed with the same settings).
    settings_path : path, optional
        TOML or YAML settings (see the module docstring); default settings otherwise.
    scheduler : str, optional
        Address of a running dask scheduler; default a new local cluster.
    workers : int, optional
        Workers of the local cluster (wins over the settings file).
    stream : file, optional
        Where progress goes (default stderr).

    Returns
    -------
    DataFrame
        The summary table also written to ``out/summary.csv``.
    """
    from .memory import human
    from .report.html import write_batch_report

    stream = stream or sys.stderr
    settings, text, kind = read_settings(settings_path)
    entries = read_manifest(manifest)
    out = Path(out)
    _prepare_out(out, text, kind, settings)
    _write_manifest(out, entries)
    scans_dir = out / "scans"

    todo, skipped = [], 0
    for entry in entries:
        if (scans_dir / entry.name / "summary.json").is_file():
            skipped += 1
            continue
        if _clear_half_made(scans_dir, entry.name):
            stream.write(f"voxtopo batch: {entry.name} was left half-made; redoing it\n")
        todo.append(entry)
    stream.write(f"voxtopo batch: {len(entries)} scans, {skipped} already complete, "
                 f"{len(todo)} to run\n")

    records = {}
    if todo:
        loads = {e.name: _load_options(e, settings) for e in todo}
        needs = [scan_bytes(*peek, settings.job) for e in todo
                 if (peek := _peek(e.path, loads[e.name])) is not None]
        count, limit = plan_workers(
            needs, workers=workers or settings.batch.get("workers"),
            memory_per_worker=_parse_bytes(settings.batch.get("memory_per_worker"),
                                           "the settings"))
        jobs = {e.name: _job_of(e, settings, loads[e.name], limit) for e in todo}
        client, cluster = _client(scheduler, count, limit, stream)
        try:
            if cluster is not None:
                stream.write(f"voxtopo batch: local cluster of {count} worker(s), "
                             f"{human(limit)} each\n")
            stream.write(f"voxtopo batch: dashboard at {client.dashboard_link}\n")
            stream.flush()
            records = _submit_all(client, todo, jobs, loads, settings, scans_dir, skipped,
                                  stream)
        finally:
            client.close()
            if cluster is not None:
                cluster.close()

    table = summary_table(out, entries, records)
    _write_tables(out, table, entries, records)
    write_batch_report(out, settings.as_dict())
    done = int((table["status"] == "done").sum())
    stream.write(f"voxtopo batch: finished: {done} of {len(entries)} scans complete; "
                 f"results in {out}\n")
    stream.flush()
    return table


def _submit_all(client, todo, jobs, loads, settings, scans_dir, skipped, stream) -> dict:
    from distributed import as_completed

    progress = _Progress(len(todo), skipped, stream)
    records = {}
    futures = {}
    in_process = [e for e in todo if jobs[e.name] == "analyse-out-of-core"]
    for entry in todo:
        if jobs[entry.name] == "analyse-out-of-core":
            continue
        future = client.submit(_run_one, jobs[entry.name], entry.path,
                               str(scans_dir / entry.name), loads[entry.name],
                               settings.as_dict(), key=f"voxtopo-scan-{entry.name}",
                               pure=False, retries=0)
        futures[future] = entry
    # the tables' and report's libraries load while the first scans run, not after the last
    import jinja2  # noqa: F401

    from .report import plots  # noqa: F401
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        pass

    for future in as_completed(list(futures)):
        entry = futures[future]
        try:
            record = future.result()
        except Exception as error:  # the worker itself died (memory limit, kill)
            record = {"status": "failed", "seconds": float("nan"),
                      "message": f"the dask worker running it failed "
                                 f"({type(error).__name__}: {' '.join(str(error).split())[:200]}); "
                                 f"it may have run out of memory"}
        records[entry.name] = record
        progress.update(entry.name, record)
    for entry in in_process:
        # Out-of-core scans spread their chunk tasks over the whole cluster.
        record = _run_out_of_core(client, entry, loads[entry.name], settings,
                                  scans_dir / entry.name)
        records[entry.name] = record
        progress.update(entry.name, record)
    return records


def _run_out_of_core(client, entry, load_options, settings, out) -> dict:
    start = time.perf_counter()
    try:
        analyse_out_of_core(entry.path, out, _analysis_options(settings),
                            load_options=load_options, chunks=settings.batch.get("chunks"),
                            force=True, scheduler=client)
        return {"status": "done", "message": "", "seconds": time.perf_counter() - start}
    except (VoxtopoError, MemoryError) as error:
        return {"status": "failed", "message": str(error),
                "seconds": time.perf_counter() - start}


def _write_tables(out: Path, table: pd.DataFrame, entries, records) -> None:
    table.to_csv(out / "summary.csv", index=False)
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        (out / "summary.parquet").unlink(missing_ok=True)
    else:
        table.astype({c: str for c in table.columns if table[c].dtype == object}
                     ).to_parquet(out / "summary.parquet", index=False)
    failed = [{"name": e.name, "path": e.path,
               "message": records.get(e.name, {}).get("message", "not run")}
              for e in entries if not (out / "scans" / e.name / "summary.json").is_file()]
    failures = out / "failures.csv"
    if failed:
        pd.DataFrame(failed).to_csv(failures, index=False)
    else:
        failures.unlink(missing_ok=True)
