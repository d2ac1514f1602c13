"""Many scans with one set of settings, as dask.distributed tasks.

`voxtopo batch MANIFEST --out DIR` runs one job ("analyse", "pores" or "patches") on every
scan of a manifest, one dask task per scan, on a local cluster or on any dask scheduler,
and writes:

    DIR/settings.toml (or .yaml)   the settings every scan was run with
    DIR/manifest.csv               the manifest as read, with the result folder names
    DIR/scans/<name>/              one complete result folder per scan
    DIR/summary.csv (+ .parquet)   one row per scan: manifest columns + key numbers
    DIR/failures.csv               scans that failed, with their one-sentence message
    DIR/report.html                the batch report, linking each scan's own report

DIR must be new, or a batch folder voxtopo wrote: a rerun with the same DIR and settings
skips scans whose result folder is complete (folders are written whole or not at all) and
redoes the rest; --force starts it anew. DIR may not hold the manifest, the settings file
or any scan. The tables and the report are written even when a run stops early (Ctrl-C,
no dask worker left), and the finished scans are kept.

The manifest
------------
A CSV file with a header row and one row per scan. Columns:

path (required)
    The scan: any file, folder, glob or zarr store voxtopo reads; relative paths are
    relative to the manifest's folder.
spacing (optional)
    Voxel size "z,y,x" (or one number for every axis), e.g. "2.5,2.5,2.5"; wins over the
    file's metadata and over the settings file.
unit (optional)
    Unit of the spacing (um, nm, mm, ...).
group (optional)
    A label for comparisons (`voxtopo compare DIR` colours and tests by it).
name (optional)
    The result folder name; by default the file name without its extensions. Names are
    made safe: letters, digits, "-", "_" and inner dots are kept, anything else becomes
    "_", leading dots go, and rows that would share a folder get -2, -3, ...
channel, timepoint, level (optional)
    Which channel, time point or resolution level of this scan to read; win over [load].
mask, roi (optional, pores job)
    A binary pore mask of this scan (1 = pore; the scan is then drawn under the plots), and
    a mask of the sample (1 = sample; outside it voxels are neither pore nor solid).
Any other column is kept as it is and copied into summary.csv.

Instead of a CSV file, MANIFEST may be a glob such as "scans/*.tif" (quote it).

The settings file (TOML, or YAML with the same keys)
----------------------------------------------------
::

    job = "analyse"            # "analyse" (persistence diagram), "pores" (porosity),
                               # "patches" (high-contrast patch space of each scan) or
                               # "periodicity" (rhythms of each time-lapse)

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
    axes = "TYX"               # periodicity only: axes of files that name none
    frame_interval = 0.5       # periodicity only: seconds between frames

    [analyse]                  # the options of `voxtopo analyse`: superlevel,
    superlevel = false         # neighbourhood, sigma (= --smooth), crop, downsample,
    neighbourhood = 26         # distance, threshold, pores_bright, fill_invalid,
    min_persistence = 0.0      # min_persistence, periodic, field, engine

    [pores]                    # the options of `voxtopo pores`: threshold,
    threshold = "otsu"         # pores_bright, label, axis, neighbourhood,
    pores_bright = false       # roi, min_persistence, engine

    [patches]                  # the options of `voxtopo patches`: k, contrast_percent,
    k = 3                      # positions, seed, log, axis, slices, k_neighbour,
    landmarks = 150            # density_percent, landmarks, fields, max_edge,
                               # method, max_dimension

    [periodicity]              # the options of `voxtopo periodicity`: periods,
    periods = [2.0, 20.0]      # bin, tiles, regions, surrogates, significance,
    surrogates = 99            # points, whole_field, top, seed, workers

    [batch]
    workers = 2                # local cluster size (default: the number of cores)
    memory_per_worker = "auto" # bytes, "8GB", or "auto" (from the memory estimate)
    out_of_core = "auto"       # zarr scans: "auto" (when a scan would not fit a
                               # worker), true (always) or false (never)
    chunks = [128, 128, 128]   # out-of-core block shape (default: the store's chunks)
    worker_timeout = 120       # seconds with no dask worker before the batch stops

Every key is optional. Unknown keys and values of the wrong type or range are refused
before anything runs, with the key's name.
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
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError, VoxtopoError
from .io.results import (check_output, is_complete, is_voxtopo_folder, read_summary,
                         safe_folder_name,
                         unique_folder_names, write_atomically, write_marker)
from .options import (COUNT, POSITIVE, SHAPE,
                      SPACING, TEXT, WHOLE, Rule, check, one_of)
from .engine.own import THREADS_VARIABLE

__all__ = ["run_batch", "read_manifest", "read_settings", "Settings", "ScanEntry",
           "job_options", "summary_table", "plan_workers"]

JOBS = ("analyse", "pores", "patches", "periodicity")

#: How every scan is read ([load]); the manifest's columns of the same names win.
LOAD_RULES = {
    "spacing": SPACING, "unit": TEXT, "channel": WHOLE, "timepoint": WHOLE, "level": WHOLE,
    "shape": SHAPE, "dtype": TEXT, "byte_order": one_of("little", "big"), "offset": WHOLE,
    "axes": TEXT, "frame_interval": POSITIVE,
}
#: [load] keys that only a time-lapse job reads.
_TIME_KEYS = ("axes", "frame_interval")
#: How the batch itself runs ([batch]).
BATCH_RULES = {
    "workers": COUNT,
    "memory_per_worker": Rule(lambda v: _bytes_or_none(v) is not False,
                              "a number of bytes, \"auto\" or a size like \"8GB\""),
    "out_of_core": one_of("auto", True, False),
    "chunks": SHAPE,
    "worker_timeout": POSITIVE,
}
#: Manifest columns that choose how one scan is read.
_LOAD_COLUMNS = ("channel", "timepoint", "level")
#: Manifest columns naming files of one scan that its job reads (the pores job's options
#: of the same names).
_FILE_COLUMNS = ("mask", "roi")

#: Seconds a batch waits with no dask worker connected before it stops (keeping what
#: finished); ``[batch] worker_timeout`` changes it.
WORKER_TIMEOUT = 120.0

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
                    "essential", "notes", "pairs_computed"}

# --- settings -----------------------------------------------------------------------------
@dataclass
class Settings:
    """The content of a settings file, checked."""

    job: str = "analyse"
    load: dict = field(default_factory=dict)
    analyse: dict = field(default_factory=dict)
    pores: dict = field(default_factory=dict)
    patches: dict = field(default_factory=dict)
    periodicity: dict = field(default_factory=dict)
    batch: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"job": self.job, "load": dict(self.load),
                **{name: dict(getattr(self, name)) for name in JOBS},
                "batch": dict(self.batch)}


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
    allowed = {"job", "load", *JOBS, "batch"}
    unknown = set(raw) - allowed
    if unknown:
        raise InputError(f"{path} has the unknown key(s) {sorted(unknown)}; the settings "
                         f"file knows {sorted(allowed)}.")
    job = raw.get("job", "analyse")
    if job not in JOBS:
        raise InputError(f"job = {job!r} in {path} is not a job voxtopo batch runs; choose "
                         f"one of {list(JOBS)}.")
    checked = {}
    for table in ("load", *JOBS, "batch"):
        value = raw.get(table, {}) or {}
        if not isinstance(value, dict):
            raise InputError(f"[{table}] in {path} should be a table of keys, got {value!r}.")
        checked[table] = dict(value)
    where = {table: f"[{table}] in {Path(path).name}" for table in checked}
    check(checked["load"], LOAD_RULES, where["load"])
    check(checked["batch"], BATCH_RULES, where["batch"])
    time_keys = sorted(set(_TIME_KEYS) & set(checked["load"]))
    if time_keys and job != "periodicity":
        raise InputError(f"{', '.join(time_keys)} in {where['load']} only matter to the "
                         f"periodicity job, not to {job}; leave them out.")
    for name in JOBS:
        job_options(name, checked[name], where[name])
    return Settings(job=job, **checked)


def job_options(name: str, values: dict, where: str = "the settings"):
    """The Options of job ``name`` from a settings table, checked key by key (TOML lists
    become the tuples the options hold)."""
    from dataclasses import fields

    from . import jobs

    options = jobs.get(name).Options
    known = {f.name for f in fields(options)}
    unknown = sorted(set(values) - known)
    if unknown:
        raise InputError(f"{where} has the unknown key(s) {unknown}; it knows {sorted(known)}.")
    try:
        return options(**{k: tuple(v) if isinstance(v, list) else v for k, v in values.items()})
    except InputError as error:
        raise InputError(f"{where}: {error}") from None


def _bytes_or_none(value):
    """Bytes of a memory size, None for "auto", False when it is not a size."""
    if value in (None, "auto"):
        return None
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return int(value) if math.isfinite(value) and value > 0 else False
    match = re.fullmatch(r"\s*([\d.]+)\s*([kMGT]?i?B)\s*", str(value))
    units = {"B": 1, "kB": 1e3, "MB": 1e6, "GB": 1e9, "TB": 1e12, "kiB": 2**10,
             "MiB": 2**20, "GiB": 2**30, "TiB": 2**40}
    if not match or match.group(2) not in units:
        return False
    try:
        return int(float(match.group(1)) * units[match.group(2)])
    except ValueError:
        return False


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
    load: dict = field(default_factory=dict)
    files: dict = field(default_factory=dict)


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


def _default_name(path: str) -> str:
    """The result folder name of a scan with no name: its file name without extensions."""
    return Path(path.rstrip("/")).name.split(".")[0]


def _csv_rows(path: Path) -> list[tuple[int, dict]]:
    """(line number, row) of a CSV manifest; a row with more or fewer fields than the
    header is refused, naming the line."""
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            lines = [(number, cells) for number, cells in enumerate(csv.reader(handle), 1)
                     if any(cell.strip() for cell in cells)]
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise InputError(f"{path} is not a readable CSV manifest "
                         f"({' '.join(str(exc).split())[:120]}).") from None
    if not lines:
        raise InputError(f"The manifest {path} is empty; its first line should be a header "
                         f"starting with path.")
    _, header = lines[0]
    header = [name.strip() for name in header]
    if "path" not in header:
        raise InputError(f"{path} has no 'path' column; its header should start with "
                         f"path (then optionally spacing, unit, group, name).")
    rows = []
    for number, cells in lines[1:]:
        if len(cells) != len(header):
            raise InputError(f"Line {number} of {path} has {len(cells)} fields but the header "
                             f"has {len(header)} ({','.join(header)}); quote values that "
                             f"hold commas.")
        rows.append((number, dict(zip(header, (cell.strip() for cell in cells)))))
    return rows


def _load_columns(row: dict, where: str) -> dict:
    """channel, timepoint and level columns: whole numbers that choose what is read."""
    chosen = {}
    for column in _LOAD_COLUMNS:
        text = str(row.get(column, "") or "").strip()
        if text:
            if not text.isdigit():
                raise InputError(f"{column} {text!r} in {where} should be a whole number, "
                                 f"0 or more.")
            chosen[column] = int(text)
    return chosen


def read_manifest(manifest) -> list[ScanEntry]:
    """Read a manifest CSV (or expand a glob) into ScanEntry rows, in file order.

    Each row's result folder name (the ``name`` column, or the file name) is made safe:
    no separators, no dots-only or hidden names, and no two rows share a folder.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "m.csv").write_text("path,group,name\\na.npy,before,..\\nb.npy,after,a\\n")
    >>> [(e.name, e.group) for e in read_manifest(folder / "m.csv")]
    [('a', 'before'), ('a-2', 'after')]
    """
    text = str(manifest)
    path = Path(manifest)
    if path.is_file() and path.suffix.lower() == ".csv":
        base = path.parent
        rows = _csv_rows(path)
    else:  # a glob, or the path of one scan (a glob that matches itself)
        matches = sorted(glob.glob(text))
        if not matches:
            raise InputError(f"No manifest file and no scans match {text}; give a .csv "
                             f"manifest or a glob that matches scan files.")
        base = Path(".")
        rows = [(number, {"path": m}) for number, m in enumerate(matches, 1)]
    if not rows:
        raise InputError(f"The manifest {text} lists no scans.")
    names = unique_folder_names(
        safe_folder_name(row.get("name", ""),
                         fallback=safe_folder_name(_default_name(row.get("path", ""))))
        for _, row in rows)
    entries = []
    for (number, row), name in zip(rows, names):
        where = f"line {number} of {text}"
        raw_path = str(row.get("path", "")).strip()
        if not raw_path:
            raise InputError(f"The path in {where} is empty; give the scan's file or folder.")
        full = raw_path if Path(raw_path).is_absolute() else str(base / raw_path)
        files = {}
        for column in _FILE_COLUMNS:
            given = str(row.get(column, "") or "").strip()
            if given:
                files[column] = given if Path(given).is_absolute() else str(base / given)
        entries.append(ScanEntry(name=name, path=full,
                                 spacing=_spacing_text(row.get("spacing"), where),
                                 unit=(str(row.get("unit") or "").strip() or None),
                                 group=str(row.get("group", "") or ""),
                                 columns={k: v for k, v in row.items() if k != "name"},
                                 load=_load_columns(row, where), files=files))
    return entries


# --- one scan, on a worker -------------------------------------------------------------------
def _load_options(entry: ScanEntry, settings: Settings) -> dict:
    options = {**settings.load, **entry.load}
    if entry.spacing is not None:
        options["spacing"] = entry.spacing
    if entry.unit is not None:
        options["unit"] = entry.unit
    if "shape" in options:
        options["shape"] = tuple(options["shape"])
    if "spacing" in options and isinstance(options["spacing"], list):
        options["spacing"] = tuple(options["spacing"])
    return options


def _read_input(job: str, path: str, load_options: dict):
    """What the job reads: a time-lapse for periodicity, a scan for the others."""
    from .io import load, load_timelapse

    if job == "periodicity":
        options = {k: v for k, v in load_options.items() if k != "timepoint"}
        return load_timelapse(path, **options)
    return load(path, **load_options)


def _run_one(job: str, path: str, out: str, load_options: dict, settings: dict,
             overrides: dict) -> dict:
    """Run one scan's job into ``out`` on a dask worker.

    ``overrides`` are this scan's own job options from the manifest (a pore ``mask``).
    Bad input and unexpected errors alike come back as a failed record with a message,
    so that one broken scan never stops the others."""
    from . import jobs

    start = time.perf_counter()
    # dask gives each task one thread: the engine's second thread would only compete
    # with the worker's other tasks (and with other workers on the same machine)
    os.environ[THREADS_VARIABLE] = "1"
    try:
        module = jobs.get(job)
        options = job_options(job, {**settings[job], **overrides})
        result = module.run(_read_input(job, path, load_options), options)
        module.write(result, out, force=True)
        return {"status": "done", "message": "", "seconds": time.perf_counter() - start}
    except (VoxtopoError, MemoryError) as error:
        message = str(error) or type(error).__name__
    except Exception as error:  # an unexpected failure still must not stop the others
        message = f"unexpected {type(error).__name__}: {' '.join(str(error).split())[:300]}"
    return {"status": "failed", "message": message, "seconds": time.perf_counter() - start}


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
    analyse job makes (loaded, float, prepared); the pores job twice that."""
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
    """Remove what an interrupted run left of one scan; True when something was removed.

    Only voxtopo's own leftovers go: temporary folders of this scan's name, and a result
    folder with voxtopo's marker but no summary. Anything else is left for the scan's run
    to refuse in one sentence."""
    removed = False
    escaped = glob.escape(name)
    for pattern in (f".{escaped}.partial-*", f".{escaped}.old-*"):
        for leftover in scans_dir.glob(pattern):
            shutil.rmtree(leftover, ignore_errors=True)
            removed = removed or pattern.endswith("partial-*")
    target = scans_dir / name
    if target.is_dir() and is_voxtopo_folder(target) and not is_complete(target):
        shutil.rmtree(target, ignore_errors=True)
        removed = True
    return removed


def _count_prefix(summary: dict) -> str:
    """What the per-dimension counts of an analyse summary count, as a column prefix
    (:data:`voxtopo.report.html.COUNT_PREFIXES`): ``significant_dim`` / ``robust_dim``
    when only the features that passed were kept, ``pairs_dim`` when the scan listed
    pairs (all, those above a number, or untested ones)."""
    from .report.html import COUNT_PREFIXES

    significant, robust, listed = COUNT_PREFIXES
    verdict = summary.get("significance") or summary.get("robustness") or {}
    kept_passing = (summary.get("options") or {}).get("min_persistence") == "auto"
    if not kept_passing or verdict.get("method", "not tested") == "not tested":
        return listed
    return significant if "significance" in summary else robust


def _key_numbers(summary: dict) -> dict:
    """The scalar numbers of a scan's summary.json, flattened to table columns.

    An analyse scan's counts per dimension are named for what they count
    (``significant_dim``, ``robust_dim`` or ``pairs_dim``, with the method and level in
    the ``counted`` column) beside
    ``pairs_computed_dimN``, every pair the sweep found."""
    row = {}
    prefix = _count_prefix(summary)
    for key, dim_prefix in (("counts", prefix), ("essential", "essential_dim"),
                            ("pairs_computed", "pairs_computed_dim")):
        for d, n in (summary.get(key) or {}).items():
            # the analyse job counts per dimension; other jobs count their features
            row[f"{dim_prefix}{d}" if str(d).isdigit() else f"{key}_{d}"] = n

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
        row[f"{prefix}{d}"] = row[f"essential_dim{d}"] = None
        row[f"pairs_computed_dim{d}"] = None
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
        if is_complete(folder):
            row["status"] = "done"
            row["result"] = f"scans/{entry.name}"
            for key, value in _key_numbers(read_summary(folder)).items():
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


def _check_out(out, inputs, settings: Settings, force: bool) -> Path:
    """The batch folder, checked before anything runs: new, or a batch folder voxtopo
    wrote (resumed with the same settings, or started anew with ``force``)."""
    resolved = check_output(out, inputs)
    if not resolved.exists() or not any(resolved.iterdir()):
        return resolved
    if not is_voxtopo_folder(resolved, "batch"):
        raise InputError(f"{out} already exists and is not a batch folder voxtopo wrote; name "
                         f"a new folder for the batch.")
    if force:
        return resolved
    saved = [p for p in (resolved / "settings.toml", resolved / "settings.yaml") if p.is_file()]
    if saved:
        before, _, _ = read_settings(saved[0])
        if before.as_dict() != settings.as_dict():
            raise InputError(f"{out} was run with the settings in {saved[0].name}, which differ "
                             f"from these; use the same settings to resume, a new --out, or "
                             f"--force to start it anew.")
    return resolved


def _make_out(out: Path, settings_text: str, kind: str, force: bool) -> None:
    """Create (or, with ``force``, empty) the batch folder checked by _check_out."""
    if force and out.exists() and is_voxtopo_folder(out, "batch"):
        shutil.rmtree(out)
    out.mkdir(parents=True, exist_ok=True)
    if not is_voxtopo_folder(out, "batch"):
        write_marker(out, "batch")
    (out / "scans").mkdir(exist_ok=True)
    if not any((out / f"settings.{k}").is_file() for k in ("toml", "yaml")):
        write_atomically(out / f"settings.{kind}",
                         lambda p: p.write_text(settings_text, encoding="utf-8"))


def _write_manifest(out: Path, entries: list[ScanEntry]) -> None:
    columns = ["name"] + list(dict.fromkeys(k for e in entries for k in e.columns))

    def write(path):
        with open(path, "w", newline="", encoding="utf-8") as handle:
            writer = csv.DictWriter(handle, fieldnames=columns)
            writer.writeheader()
            for entry in entries:
                writer.writerow({"name": entry.name, **entry.columns})

    write_atomically(out / "manifest.csv", write)


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


def _connect(scheduler):
    from distributed import Client

    try:
        return Client(scheduler, timeout="10s")
    except Exception as exc:
        raise InputError(f"Could not reach the dask scheduler at {scheduler} "
                         f"({' '.join(str(exc).split())[:120]}); check the address or leave "
                         f"out --scheduler to use a local cluster.") from None


def _local_cluster(workers, limit, scratch: Path):
    """A local cluster whose workers keep their scratch files in ``scratch``."""
    import dask
    from distributed import Client, LocalCluster

    scratch.mkdir(exist_ok=True)
    with dask.config.set({**_WORKER_CONFIG, "temporary-directory": str(scratch)}):
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               memory_limit=limit, host="127.0.0.1",
                               dashboard_address="127.0.0.1:0", silence_logs=40,
                               local_directory=str(scratch))
    return Client(cluster), cluster


class WorkersLost(VoxtopoError):
    """No dask worker was connected for longer than the batch's worker timeout."""


def run_batch(manifest, out, *, settings_path=None, scheduler=None, workers=None,
              force: bool = False, stream=None) -> pd.DataFrame:
    """Run every scan of ``manifest`` as a dask task and write the batch folder ``out``.

    Parameters
    ----------
    manifest : path or glob
        A CSV manifest or a glob of scan files (see the module docstring).
    out : path
        The batch folder: created, or, when it is a batch folder voxtopo wrote, resumed
        with the same settings. It may not hold the manifest, the settings or any scan.
    settings_path : path, optional
        TOML or YAML settings (see the module docstring); default settings otherwise.
    scheduler : str, optional
        Address of a running dask scheduler; default a new local cluster.
    workers : int, optional
        Workers of the local cluster (wins over the settings file).
    force : bool
        Start an existing batch folder voxtopo wrote anew instead of resuming it.
    stream : file, optional
        Where progress goes (default stderr).

    Returns
    -------
    DataFrame
        The summary table also written to ``out/summary.csv``. The tables and the report
        are written even when the run stops early (Ctrl-C, no workers left); finished
        scans are kept and a rerun resumes.

    Raises
    ------
    WorkersLost
        With ``--scheduler``, when no worker was connected for ``[batch] worker_timeout``
        seconds.
    """
    from .memory import human

    stream = stream or sys.stderr
    settings, text, kind = read_settings(settings_path)
    entries = read_manifest(manifest)
    with_files = [entry for entry in entries if entry.files]
    if with_files and settings.job != "pores":
        column = next(iter(with_files[0].files))
        raise InputError(f"The manifest gives a {column} for {with_files[0].name}, but only "
                         f"the pores job reads masks and this batch runs {settings.job}; set "
                         f"job = \"pores\" or leave the {column} column out.")
    manifest_file = Path(manifest) if Path(manifest).is_file() else None
    inputs = [manifest_file, settings_path, *(entry.path for entry in entries),
              *(path for entry in entries for path in entry.files.values())]
    out = _check_out(out, [i for i in inputs if i is not None], settings, force)
    loads = {e.name: _load_options(e, settings) for e in entries}
    needs = [scan_bytes(*peek, settings.job) for e in entries
             if (peek := _peek(e.path, loads[e.name])) is not None]
    count, limit = plan_workers(
        needs, workers=workers or settings.batch.get("workers"),
        memory_per_worker=_bytes_or_none(settings.batch.get("memory_per_worker")))
    # a scheduler that cannot be reached must leave no folder behind
    client = _connect(scheduler) if scheduler else None
    cluster = None
    records = {}
    try:
        _make_out(out, text, kind, force)
        _write_manifest(out, entries)
        scans_dir = out / "scans"
        todo = []
        for entry in entries:
            if is_complete(scans_dir / entry.name):
                continue
            if _clear_half_made(scans_dir, entry.name):
                stream.write(f"voxtopo batch: {entry.name} was left half-made; redoing it\n")
            todo.append(entry)
        skipped = len(entries) - len(todo)
        stream.write(f"voxtopo batch: {len(entries)} scans, {skipped} already complete, "
                     f"{len(todo)} to run\n")
        if todo:
            if client is None:
                client, cluster = _local_cluster(count, limit, out / _SCRATCH)
                stream.write(f"voxtopo batch: local cluster of {count} worker(s), "
                             f"{human(limit)} each\n")
            stream.write(f"voxtopo batch: dashboard at {client.dashboard_link}\n")
            stream.flush()
            jobs = {e.name: _job_of(e, settings, loads[e.name], limit) for e in todo}
            timeout = float(settings.batch.get("worker_timeout", WORKER_TIMEOUT))
            _submit_all(client, todo, jobs, loads, settings, scans_dir, skipped, stream,
                        records, scheduler, timeout)
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
        shutil.rmtree(out / _SCRATCH, ignore_errors=True)
        if out.is_dir() and is_voxtopo_folder(out, "batch"):
            table = _write_tables(out, entries, records, settings)
    done = int((table["status"] == "done").sum())
    stream.write(f"voxtopo batch: finished: {done} of {len(entries)} scans complete; "
                 f"results in {out}\n")
    stream.flush()
    return table


#: Where the local cluster's workers keep their scratch files, inside the batch folder.
_SCRATCH = ".dask-scratch"


def _submit_all(client, todo, jobs, loads, settings, scans_dir, skipped, stream, records,
                scheduler, timeout) -> None:
    """Run the scans, filling ``records`` as each finishes (so that what finished before an
    interruption is known)."""
    from distributed import wait

    progress = _Progress(len(todo), skipped, stream)
    futures = {}
    in_process = [e for e in todo if jobs[e.name] == "analyse-out-of-core"]
    for entry in todo:
        if jobs[entry.name] == "analyse-out-of-core":
            continue
        overrides = dict(entry.files)
        future = client.submit(_run_one, jobs[entry.name], entry.path,
                               str(scans_dir / entry.name), loads[entry.name],
                               settings.as_dict(), overrides,
                               key=f"voxtopo-scan-{entry.name}", pure=False, retries=0)
        futures[future] = entry
    # the tables' and report's libraries load while the first scans run, not after the last
    import jinja2  # noqa: F401

    from .report import plots  # noqa: F401
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        pass

    pending = set(futures)
    alone_since = None
    while pending:
        try:
            finished, pending = wait(pending, timeout=1.0, return_when="FIRST_COMPLETED")
        except TimeoutError:        # nothing finished within the second
            finished = set()
        for future in finished:
            entry = futures[future]
            records[entry.name] = _record_of(future)
            progress.update(entry.name, records[entry.name])
        if finished or client.scheduler_info().get("workers"):
            alone_since = None
            continue
        alone_since = alone_since or time.monotonic()
        if time.monotonic() - alone_since > timeout:
            for future in pending:
                future.cancel()
            kept = sum(r["status"] == "done" for r in records.values()) + skipped
            raise WorkersLost(
                f"No dask worker has been connected to the scheduler at "
                f"{scheduler or 'the local cluster'} for {timeout:g} s; the {kept} finished "
                f"scan(s) were kept in {scans_dir}, and running the same command again once "
                f"workers are back resumes the rest.")
    for entry in in_process:
        # Out-of-core scans spread their chunk tasks over the whole cluster.
        records[entry.name] = _run_out_of_core(client, entry, loads[entry.name], settings,
                                               scans_dir / entry.name)
        progress.update(entry.name, records[entry.name])


def _record_of(future) -> dict:
    try:
        return future.result()
    except Exception as error:  # the worker itself died (memory limit, kill)
        return {"status": "failed", "seconds": float("nan"),
                "message": f"the dask worker running it failed "
                           f"({type(error).__name__}: {' '.join(str(error).split())[:200]}); "
                           f"it may have run out of memory"}


def _run_out_of_core(client, entry, load_options, settings, out) -> dict:
    from .jobs.analyse import analyse_out_of_core

    start = time.perf_counter()
    try:
        analyse_out_of_core(entry.path, out, job_options("analyse", settings.analyse),
                            load_options=load_options, chunks=settings.batch.get("chunks"),
                            force=True, scheduler=client)
        return {"status": "done", "message": "", "seconds": time.perf_counter() - start}
    except (VoxtopoError, MemoryError) as error:
        return {"status": "failed", "message": str(error),
                "seconds": time.perf_counter() - start}


def _write_tables(out: Path, entries, records, settings: Settings) -> pd.DataFrame:
    """summary.csv (+ .parquet), failures.csv and report.html, each written atomically so
    that a full disk leaves the previous version readable."""
    from .report.html import write_batch_report

    table = summary_table(out, entries, records)
    write_atomically(out / "summary.csv", lambda p: table.to_csv(p, index=False))
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        (out / "summary.parquet").unlink(missing_ok=True)
    else:
        frame = table.astype({c: str for c in table.columns if table[c].dtype == object})
        write_atomically(out / "summary.parquet", lambda p: frame.to_parquet(p, index=False))
    failed = [{"name": e.name, "path": e.path,
               "message": records.get(e.name, {}).get("message", "not run")}
              for e in entries if not is_complete(out / "scans" / e.name)]
    failures = out / "failures.csv"
    if failed:
        write_atomically(failures, lambda p: pd.DataFrame(failed).to_csv(p, index=False))
    else:
        failures.unlink(missing_ok=True)
    write_batch_report(out, settings.as_dict())
    return table
