"""report.html of a periodicity result, drawn with the house templates."""

from __future__ import annotations

import base64
from pathlib import Path

import pandas as pd

from .html import Table, render

__all__ = ["write_periodicity_report"]

#: What each plot of a periodicity folder shows, under it in the report.
CAPTIONS = {
    "score_map.png": "Score (0: no loop, 1: a round loop) over the mean frame; bright = "
                     "strongly periodic.",
    "period_histogram.png": "Periods of all measured signals (light) and of the significant "
                            "ones (dark).",
    "top_regions.png": "The highest-scoring signals: trace over time, sliding-window cloud "
                       "projected on its first two principal axes, and H1 barcode over Z/2.",
    "whole_field.png": "Whole-field rhythm: H1 and H2 barcodes of the sliding windows of the "
                       "frames after PCA.",
}


def write_periodicity_report(folder, summary: dict) -> Path:
    """Write ``report.html`` into a periodicity result folder.

    Parameters
    ----------
    folder : str or Path
        The folder being filled (or a finished one): it holds ``regions.csv`` and the PNG
        plots named in ``summary["plots"]``.
    summary : dict
        The folder's summary (what ``voxtopo.jobs.periodicity.write`` puts in
        summary.json): ``scan``, ``counts`` with its ``statement``, ``plots``,
        ``columns``, ``column_meanings``, ``method``, ``options``, ``timings_seconds``,
        ``notes``, ``cautions``, ``software``, ``created`` and, optionally, ``whole_field``.

    Returns
    -------
    Path
        The report: the 20 highest-scoring regions, every plot with its caption, the
        counts, settings, units, notes and cautions.
    """
    folder = Path(folder)
    images = [{"data": base64.b64encode((folder / name).read_bytes()).decode("ascii"),
               "caption": CAPTIONS.get(name, name)} for name in summary["plots"]]
    table = pd.read_csv(folder / "regions.csv")
    highest = table.sort_values("score", ascending=False, na_position="last").head(20)
    counts = dict(summary["counts"])
    statement = counts.pop("statement")
    source = Path(str(summary["scan"].get("source") or "time-lapse")).name
    units = summary["columns"]["regions.csv"]
    columns = {name: f"{meaning} (unit: {units[name]})" if units.get(name) else meaning
               for name, meaning in summary["column_meanings"]["regions.csv"].items()}
    html = render("periodicity.html", title=f"Rhythms in {source}",
                  subtitle="Sliding-window persistence (SW1PerS score) of mean-intensity "
                           "signals", scan=summary["scan"], statement=statement,
                  counts=counts, images=images, highest=Table.of(highest),
                  whole_field=summary.get("whole_field"), columns=columns,
                  method=summary["method"], settings=summary["options"],
                  timings=summary["timings_seconds"], notes=summary["notes"],
                  cautions=summary["cautions"], software=summary["software"],
                  created=summary["created"])
    target = folder / "report.html"
    target.write_text(html, encoding="utf-8")
    return target
