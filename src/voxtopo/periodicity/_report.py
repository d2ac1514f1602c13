"""report.html of a periodicity result, drawn with the house templates."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..report.html import Table, render
from ._plots import CAPTIONS


def write_report(folder, summary: dict) -> Path:
    """Write ``report.html`` into ``folder`` from the summary and the PNG plots in it."""
    import base64

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
