"""What a batch will do before it starts: the batch folder (new, resumed or started anew),
which scans are left to run, how each is read and which job runs it, and the workers' size."""

from __future__ import annotations

import glob
import os
import shutil
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..io.results import (check_output, is_complete, is_voxtopo_folder, write_atomically,
                          write_marker)
from .manifest import ScanEntry
from .settings import Settings, job_options, read_settings

__all__ = ["scan_bytes", "plan_workers"]

#: Working memory of a patch-space or periodicity scan beyond the persistence engine's own
#: estimate: the loaded array, its float copy and the prepared data, 8 bytes a voxel each.
_COPIES_PER_SCAN = 3

#: Smallest memory limit given to a worker: the interpreter with numpy, numba, gudhi and
#: matplotlib loaded takes about half of it before any scan is read.
_MIN_WORKER_BYTES = 2 * 2**30


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


def _load_options(entry: ScanEntry, settings: Settings) -> dict:
    """How one scan is read: [load], then the manifest row's own columns."""
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


def _peek(path: str, load_options: dict):
    """(shape, dtype) of a scan from its header alone, or None when it cannot be told."""
    from ..io import read_header

    try:
        return read_header(path, shape=load_options.get("shape"),
                           dtype=load_options.get("dtype"),
                           byte_order=load_options.get("byte_order", "little"),
                           offset=load_options.get("offset", 0),
                           level=load_options.get("level", 0))
    except Exception:
        return None


def _job_of(entry: ScanEntry, settings: Settings, load_options: dict, worker_bytes) -> str:
    """The job that runs one scan: the settings' job, "analyse-out-of-core" for a zarr
    scan that ``[batch] out_of_core`` sends there (always, or when it would not fit a
    worker of ``worker_bytes``), or "pores-out-of-core" for every scan when
    ``[pores] out_of_core = true``."""
    if settings.job == "pores" and settings.pores.get("out_of_core"):
        return "pores-out-of-core"
    if settings.job != "analyse":
        return settings.job
    choice = settings.batch.get("out_of_core", "auto")
    from ..io._zarr import is_zarr

    path = Path(entry.path)
    if choice is False or not path.is_dir() or not is_zarr(path):
        return "analyse"
    if choice is True:
        return "analyse-out-of-core"
    peek = _peek(entry.path, load_options)
    if peek is not None and worker_bytes and scan_bytes(
            *peek, "analyse", job_options("analyse", settings.analyse)) > worker_bytes:
        return "analyse-out-of-core"
    return "analyse"


def scan_bytes(shape, dtype, job: str = "analyse", options=None, *, roi: bool = False) -> int:
    """Planned peak memory of one scan's job in a dask worker.

    The analyse and pores jobs use their own plans, the ones their runs check before
    they start: for analyse the scan, the largest step of
    :func:`voxtopo.jobs.analyse.preparation_plan` (persistence, or testing and writing the
    pairs) and the worker's own baseline; for pores :func:`voxtopo.porosity.estimate`
    (the interpreter included). The patch-space and periodicity jobs are planned at the
    engine's float64 estimate and three float64 copies of the scan.

    Parameters
    ----------
    shape : tuple of int
        The scan's shape.
    dtype : numpy dtype
        The scan's stored type.
    job : str
        The job that runs the scan.
    options : optional
        The job's Options (default the job's defaults).
    roi : bool
        A region of interest is given for this scan (pores).

    Returns
    -------
    int
        Bytes.

    Examples
    --------
    >>> from voxtopo import porosity
    >>> scan_bytes((64, 64, 64), "uint8", "pores") == porosity.estimate((64, 64, 64), "uint8")
    True
    """
    from ..engine import estimate
    from ..engine.chunked import WORKER_BASELINE_BYTES

    voxels = int(np.prod(shape, dtype=np.int64))
    dtype = np.dtype(dtype)
    if job == "pores":
        from .. import porosity
        from ..jobs.pores import PoresOptions

        options = options or PoresOptions()
        return porosity.estimate(shape, dtype, neighbourhood=options.neighbourhood,
                                 engine=options.engine,
                                 roi=roi or options.roi is not None)
    if job == "analyse":
        from ..jobs.analyse import AnalysisOptions, preparation_plan
        from ..scan import Scan

        probe = Scan(np.broadcast_to(np.zeros((), dtype), tuple(shape)))
        steps = preparation_plan(probe, options or AnalysisOptions())
        return int(WORKER_BASELINE_BYTES + voxels * dtype.itemsize
                   + max(needed for _, needed in steps))
    return int(estimate(shape, np.float64) + _COPIES_PER_SCAN * 8 * voxels)


def plan_workers(needs: list[int], *, workers=None, memory_per_worker=None,
                 available=None, cores=None) -> tuple[int, int]:
    """(number of workers, memory limit per worker in bytes) for a local cluster.

    Each worker gets room for the largest scan (plus a quarter for the interpreter and
    libraries, at least 2 GiB); there are as many workers as cores (or ``workers``),
    fewer when the machine's memory cannot give each of them that much.

    Parameters
    ----------
    needs : list of int
        Planned bytes of each scan (:func:`scan_bytes`); may be empty.
    workers : int, optional
        Workers wanted; default one per core.
    memory_per_worker : int, optional
        Bytes per worker, instead of the plan from ``needs``.
    available : int, optional
        Bytes of memory available; default what the machine has free now.
    cores : int, optional
        Cores of the machine; default ``os.cpu_count()``.

    Returns
    -------
    count : int
        Number of workers, at least 1.
    limit : int
        Memory limit of each worker in bytes.

    Examples
    --------
    >>> plan_workers([2 * 10**9], available=5 * 10**9, cores=4)
    (1, 2500000000)
    """
    from ..memory import BUDGET_FRACTION, available_bytes

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
