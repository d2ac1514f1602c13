"""Many scans with one set of settings, as dask.distributed tasks.

`voxtopo batch MANIFEST --out DIR` runs one job (analyse, pores, patches or periodicity)
on every scan of a manifest, one dask task per scan, on a local cluster or on any dask
scheduler, and writes:

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
mask (optional, pores job)
    A binary pore mask of this scan (1 = pore; the scan is then drawn under the plots).
roi (optional, analyse and pores jobs)
    A mask of the region of interest of this scan (1 = inside): for pores, outside it
    voxels are neither pore nor solid; for analyse, outside voxels are not part of the
    complex and the noise is read within the region.
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
    min_persistence = 0.0      # min_persistence, periodic, field, engine, roi

    [pores]                    # the options of `voxtopo pores`: threshold,
    threshold = "otsu"         # pores_bright, label, axis, neighbourhood,
    pores_bright = false       # roi, min_persistence, engine, boundary_tolerance,
                               # out_of_core (true: every scan chunk by chunk on the
                               # batch's cluster, one scan at a time) and chunks

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
    out_of_core = "auto"       # analyse job, zarr scans: "auto" (when a scan would not
                               # fit a worker), true (always) or false (never)
    chunks = [128, 128, 128]   # out-of-core block shape (default: the store's chunks)
    worker_timeout = 120       # seconds with no dask worker before the batch stops

Every key is optional. Unknown keys and values of the wrong type or range are refused
before anything runs, with the key's name.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import pandas as pd

from ..errors import InputError
from ..io.results import is_complete, is_voxtopo_folder
# WORKER_CONFIG and _key_numbers are here for the tests and benchmarks, which start
# their clusters the way a batch does and check how the summary names a scan's counts
from .cluster import (_SCRATCH, WORKER_CONFIG, WORKER_TIMEOUT, WorkersLost,  # noqa: F401
                      connect, local_cluster, _submit_all)
from .manifest import FILE_COLUMNS, ScanEntry, _write_manifest, read_manifest
from .plan import (_check_out, _clear_half_made, _job_of, _load_options, _make_out, _peek,
                   plan_workers, scan_bytes)
from .settings import Settings, _bytes_or_none, job_options, read_settings
from .tables import _key_numbers, _write_tables, summary_table  # noqa: F401

__all__ = ["run_batch", "read_manifest", "read_settings", "Settings", "ScanEntry",
           "job_options", "summary_table", "plan_workers", "scan_bytes", "WorkersLost",
           "WORKER_TIMEOUT"]


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
    InputError
        For a manifest, settings file or batch folder that cannot be used, or a scheduler
        that cannot be reached, before anything is written.
    WorkersLost
        With ``--scheduler``, when no worker was connected for ``[batch] worker_timeout``
        seconds.
    """
    from ..memory import human

    stream = stream or sys.stderr
    settings, text, kind = read_settings(settings_path)
    entries = read_manifest(manifest)
    for entry in entries:
        for column in entry.files:
            readers = FILE_COLUMNS[column]
            if settings.job not in readers:
                raise InputError(f"The manifest gives a {column} for {entry.name}, but only "
                                 f"the {' and '.join(readers)} job{'s' * (len(readers) > 1)} "
                                 f"read{'s' * (len(readers) == 1)} it and this batch runs "
                                 f"{settings.job}; set job = \"{readers[0]}\" or leave the "
                                 f"{column} column out.")
    manifest_file = Path(manifest) if Path(manifest).is_file() else None
    inputs = [manifest_file, settings_path, *(entry.path for entry in entries),
              *(path for entry in entries for path in entry.files.values())]
    out = _check_out(out, [i for i in inputs if i is not None], settings, force)
    loads = {e.name: _load_options(e, settings) for e in entries}
    # an out-of-core pores run holds one chunk per task, not the scan
    whole_scans = not (settings.job == "pores" and settings.pores.get("out_of_core"))
    planned_options = job_options(settings.job, getattr(settings, settings.job))
    needs = [scan_bytes(*peek, settings.job, planned_options, roi="roi" in e.files)
             for e in entries
             if whole_scans and (peek := _peek(e.path, loads[e.name])) is not None]
    count, limit = plan_workers(
        needs, workers=workers or settings.batch.get("workers"),
        memory_per_worker=_bytes_or_none(settings.batch.get("memory_per_worker")))
    # a scheduler that cannot be reached must leave no folder behind
    client = connect(scheduler) if scheduler else None
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
                client, cluster = local_cluster(count, limit, out / _SCRATCH)
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
