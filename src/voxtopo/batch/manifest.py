"""The manifest of a batch: one row per scan, its result folder name, and the files and
read choices that belong to it."""

from __future__ import annotations

import csv
import glob
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..io.results import safe_folder_name, unique_folder_names, write_atomically

__all__ = ["ScanEntry", "read_manifest"]

#: Manifest columns that choose how one scan is read.
_LOAD_COLUMNS = ("channel", "timepoint", "level")
#: Manifest columns naming files of one scan that its job reads (the job options of the
#: same names), and the jobs that read each.
FILE_COLUMNS = {"mask": ("pores",), "roi": ("analyse", "pores")}


@dataclass
class ScanEntry:
    """One row of the manifest.

    Attributes
    ----------
    name : str
        The scan's result folder name under ``scans/``, made safe and unique.
    path : str
        The scan, relative paths resolved against the manifest's folder.
    spacing : tuple of float or None
        The row's voxel size (z, y, x, or one number), None when the row gives none.
    unit : str or None
        The unit of the row's spacing.
    group : str
        The row's comparison label ("" when none).
    columns : dict
        Every column of the row as written except ``name``, copied into summary.csv.
    load : dict
        The row's channel, timepoint and level (whole numbers).
    files : dict
        The row's mask and roi files, paths resolved like ``path``.
    """

    name: str
    path: str
    spacing: tuple | None
    unit: str | None
    group: str
    columns: dict
    load: dict = field(default_factory=dict)
    files: dict = field(default_factory=dict)


def _spacing_text(text, where) -> tuple | None:
    if text is None or str(text).strip() == "":
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

    Parameters
    ----------
    manifest : str or Path
        A ``.csv`` manifest with a ``path`` column (see the batch help for the others), or
        a glob of scan files, one row each, in sorted order.

    Returns
    -------
    list of ScanEntry
        One entry per row, paths resolved against the manifest's folder.

    Raises
    ------
    InputError
        When the manifest cannot be read, lists no scans, has no ``path`` column, or a
        row's spacing, channel, timepoint or level is not a number (the line is named).

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
        safe_folder_name(row.get("name", ""), fallback=safe_folder_name(_default_name(row["path"])))
        for _, row in rows)
    entries = []
    for (number, row), name in zip(rows, names):
        where = f"line {number} of {text}"
        raw_path = row["path"].strip()
        if not raw_path:
            raise InputError(f"The path in {where} is empty; give the scan's file or folder.")
        full = raw_path if Path(raw_path).is_absolute() else str(base / raw_path)
        files = {}
        for column in FILE_COLUMNS:
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


def _write_manifest(out: Path, entries: list[ScanEntry]) -> None:
    """``out/manifest.csv``: the manifest as read, with each scan's result folder name."""
    columns = ["name"] + list(dict.fromkeys(k for e in entries for k in e.columns))

    def write(path):
        with open(path, "w", newline="", encoding="utf-8") as handle:
            writer = csv.DictWriter(handle, fieldnames=columns)
            writer.writeheader()
            for entry in entries:
                writer.writerow({"name": entry.name, **entry.columns})

    write_atomically(out / "manifest.csv", write)
