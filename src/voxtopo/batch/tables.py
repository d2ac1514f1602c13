"""The batch's own tables: summary.csv (+ .parquet) with one row per scan, failures.csv,
and the batch report, each written atomically."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..io.results import is_complete, read_summary, write_atomically
from .manifest import ScanEntry
from .settings import Settings

__all__ = ["summary_table"]

#: Keys of a scan's summary.json that are not key numbers for the table.
_NOT_KEY_NUMBERS = {"most_persistent", "software", "cautions", "plots", "files", "options",
                    "diagram", "created", "voxtopo_version", "preparation", "counts",
                    "essential", "notes", "pairs_computed", "columns", "column_meanings"}


def _count_prefix(summary: dict) -> str:
    """What the per-dimension counts of an analyse summary count, as a column prefix
    (:data:`voxtopo.report.html.COUNT_PREFIXES`): ``significant_dim`` / ``robust_dim``
    when only the features that passed were kept, ``pairs_dim`` when the scan listed
    pairs (all, those above a number, or untested ones)."""
    from ..report.html import COUNT_PREFIXES

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
    """One row per scan: manifest columns, name, status, result folder, key numbers.

    Parameters
    ----------
    out : str or Path
        The batch folder; each scan's result is read from ``out/scans/<name>``.
    entries : list of ScanEntry
        The manifest's rows (:func:`voxtopo.batch.read_manifest`).
    records : dict, optional
        Scan name -> the record of its run (``status``, ``message``, ``seconds``); the
        message of a scan whose folder is not complete comes from here ("not run"
        without one).

    Returns
    -------
    DataFrame
        One row per entry, in manifest order: the manifest's columns as written, ``name``,
        ``status`` ("done" or "failed"), ``result`` (the folder relative to ``out``), then
        the key numbers of the scan's summary.json (a number whose key is also a manifest
        column is named ``result_<key>``), or ``message`` for a failed scan. Columns of
        whole numbers are nullable integers.
    """
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


def _write_tables(out: Path, entries, records, settings: Settings) -> pd.DataFrame:
    """summary.csv (+ .parquet), failures.csv and report.html, each written atomically so
    that a full disk leaves the previous version readable."""
    from ..report.html import write_batch_report

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
