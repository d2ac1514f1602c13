"""The rhythm panel: where a time-lapse layer oscillates, with what period, how surely.

The panel turns its controls into :class:`voxtopo.periodicity.PeriodicityOptions` and a
:class:`voxtopo.scan.TimeLapse`, runs :func:`voxtopo.jobs.periodicity.run` in a napari thread
worker (progress through voxtopo's callback; Cancel makes the next callback raise
``voxtopo.Cancelled``), then adds the score and period maps as image layers and fills a
table with one row per region (tile, pixel bin). Selecting a row, or clicking a pixel of
the score layer, shows that signal's trace and its H1 barcode below the table. "Save
result folder" writes the folder of `voxtopo periodicity` through the job's ``write``.
"""

from __future__ import annotations

import numpy as np
from napari.layers import Image, Labels
from qtpy.QtWidgets import (QAbstractItemView, QComboBox, QDoubleSpinBox, QFormLayout,
                            QHBoxLayout, QLabel, QSpinBox, QTableWidget, QTableWidgetItem,
                            QVBoxLayout, QWidget)

from voxtopo import jobs
from voxtopo.errors import InputError, VoxtopoError
from voxtopo.jobs.periodicity import PeriodicityOptions, describe, run, signal_bars
from voxtopo.report.periodicity import RHYTHM, plot_bars, plot_trace
from voxtopo.scan import FRAME, TimeLapse

from ._background import BackgroundRun
from ._saving import SavesResultFolder

__all__ = ["SIGNALS", "TABLE_COLUMNS", "RhythmWidget"]

#: Signal choices: label shown -> what a signal averages over.
SIGNALS = {"every pixel (or bin of pixels)": "pixel", "tiles of the frame": "tile",
           "regions of a labels layer": "region"}

#: Columns of the per-region table, as in regions.csv.
TABLE_COLUMNS = ("region", "centre_y", "centre_x", "score", "period", "p_value", "significant")


class RhythmWidget(BackgroundRun, SavesResultFolder, QWidget):
    """Dock panel measuring rhythms in a time-lapse image layer (t, y, x) or (t, z, y, x)."""

    WORK = "The rhythm search"

    def __init__(self, napari_viewer, parent=None):
        super().__init__(parent)
        self.viewer = napari_viewer
        self.result = None
        self.shown_row = None
        self._init_background("Find rhythms", "Measure the rhythms of the chosen time-lapse "
                              "in the background.", "Pick a time-lapse layer.")
        self._init_saving("`voxtopo periodicity`")

        self.layer_choice = QComboBox()
        self.layer_choice.setToolTip("The time-lapse: an image layer whose first axis is time.")
        self.interval_box = QDoubleSpinBox()
        self.interval_box.setDecimals(4)
        self.interval_box.setRange(0.0, 1e6)
        self.interval_box.setToolTip("Seconds between frames; 0 counts time in frames.")
        self.shortest_box, self.longest_box = QDoubleSpinBox(), QDoubleSpinBox()
        for box in (self.shortest_box, self.longest_box):
            box.setDecimals(3)
            box.setRange(0.0, 1e6)
            box.setToolTip("Period range searched, in seconds (frames without an interval); "
                           "0 and 0: from 2 frames to half the duration.")
        self.signal_choice = QComboBox()
        self.signal_choice.addItems(list(SIGNALS))
        self.signal_choice.setToolTip("What one signal averages over.")
        self.size_box = QSpinBox()
        self.size_box.setRange(1, 4096)
        self.size_box.setValue(1)
        self.size_box.setToolTip("Pixels: side of the bins (1 = every pixel). Tiles: parts "
                                 "along each axis.")
        self.regions_choice = QComboBox()
        self.regions_choice.setToolTip("Labels layer of the frame's shape (0 = background).")
        self.surrogates_box = QSpinBox()
        self.surrogates_box.setRange(0, 9999)
        self.surrogates_box.setValue(PeriodicityOptions().surrogates)
        self.surrogates_box.setToolTip("Surrogates per p-value (random phases, smoothed spectrum).")
        self.alpha_box = QDoubleSpinBox()
        self.alpha_box.setDecimals(3)
        self.alpha_box.setRange(0.001, 0.5)
        self.alpha_box.setValue(PeriodicityOptions().significance)
        self.alpha_box.setToolTip("Level of significance.")

        self.table = QTableWidget(0, len(TABLE_COLUMNS))
        self.table.setHorizontalHeaderLabels(list(TABLE_COLUMNS))
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.itemSelectionChanged.connect(self._on_row_selected)

        from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
        from matplotlib.figure import Figure

        self.figure = Figure(figsize=(4.0, 4.2), constrained_layout=True)
        self.trace_axes, self.barcode_axes = self.figure.subplots(2, 1)
        self.canvas = FigureCanvasQTAgg(self.figure)

        form = QFormLayout()
        form.addRow("time-lapse", self.layer_choice)
        form.addRow("frame interval (s)", self.interval_box)
        periods = QHBoxLayout()
        periods.addWidget(self.shortest_box)
        periods.addWidget(QLabel("to"))
        periods.addWidget(self.longest_box)
        form.addRow("periods", periods)
        form.addRow("signals", self.signal_choice)
        form.addRow("bin / tiles", self.size_box)
        form.addRow("regions", self.regions_choice)
        form.addRow("surrogates", self.surrogates_box)
        form.addRow("significance", self.alpha_box)
        layout = QVBoxLayout(self)
        layout.addLayout(form)
        self._add_run_controls(layout)
        layout.addWidget(self.export_button)
        layout.addWidget(self.table)
        layout.addWidget(self.canvas)

        self.viewer.layers.events.inserted.connect(self._refresh_layers)
        self.viewer.layers.events.removed.connect(self._refresh_layers)
        self._refresh_layers()

    # layers -------------------------------------------------------------------------------
    def _refresh_layers(self, event=None) -> None:
        lapses = [layer.name for layer in self.viewer.layers
                  if isinstance(layer, Image) and layer.ndim in (3, 4)
                  and not getattr(layer, "rgb", False)]
        labels = [layer.name for layer in self.viewer.layers if isinstance(layer, Labels)]
        for box, names in ((self.layer_choice, lapses), (self.regions_choice, labels)):
            current = box.currentText()
            box.blockSignals(True)
            box.clear()
            box.addItems(names)
            if current in names:
                box.setCurrentText(current)
            box.blockSignals(False)

    def options(self) -> PeriodicityOptions:
        """The settings of the panel as the job's options."""
        kind = SIGNALS[self.signal_choice.currentText()]
        shortest, longest = self.shortest_box.value(), self.longest_box.value()
        periods = (shortest, longest) if (shortest, longest) != (0.0, 0.0) else None
        regions = None
        if kind == "region":
            name = self.regions_choice.currentText()
            if not name:
                raise InputError("Regions were chosen but there is no labels layer; add one "
                                 "or choose pixels or tiles.")
            regions = np.asarray(self.viewer.layers[name].data)
        return PeriodicityOptions(
            periods=periods, bin=self.size_box.value() if kind == "pixel" else 1,
            tiles=self.size_box.value() if kind == "tile" else None, regions=regions,
            surrogates=self.surrogates_box.value(), significance=self.alpha_box.value())

    def lapse(self) -> TimeLapse:
        name = self.layer_choice.currentText()
        if not name:
            raise InputError("There is no time-lapse layer (an image with time as its first "
                             "axis); open one first.")
        layer = self.viewer.layers[name]
        interval = self.interval_box.value()
        return TimeLapse(np.asarray(layer.data), frame_interval=interval or 1.0,
                         time_unit="s" if interval else FRAME,
                         spacing=tuple(float(s) for s in layer.scale[1:]),
                         source=f"napari layer {name}")

    # running ------------------------------------------------------------------------------
    def run(self) -> None:
        """Measure the rhythms of the chosen layer in a worker thread."""
        if self.running:
            return
        try:
            lapse, options = self.lapse(), self.options()
        except VoxtopoError as error:
            self._fail(str(error))
            return
        self._source = self.layer_choice.currentText()
        self._start(run, lapse, options, working=f"Measuring rhythms in {self._source} …")

    def _on_done(self, result) -> None:
        if self._cancel.is_set():
            return
        source = self.viewer.layers[self._source]
        scale, translate = tuple(source.scale[1:]), tuple(source.translate[1:])
        signals, table = result.signals, result.table
        score = self.viewer.add_image(
            signals.paint(table["score"].to_numpy()), name=f"score · {self._source}",
            colormap="inferno", contrast_limits=(0.0, 1.0), opacity=0.7, blending="additive",
            scale=scale, translate=translate,
            metadata={"voxtopo_periodicity": {"column": "score"}})
        period = self.viewer.add_image(
            signals.paint(table["period"].to_numpy()), name=f"period · {self._source}",
            colormap="viridis", visible=False, scale=scale, translate=translate,
            metadata={"voxtopo_periodicity": {"column": "period",
                                              "unit": result.time_unit}})
        score.mouse_drag_callbacks.append(self._on_map_click)
        self.result = result
        self.export_button.setEnabled(True)
        self.score_layer, self.period_layer = score, period
        self._fill_table(table)
        # the job's own line: the same counts and words as `voxtopo periodicity`
        self.status.setText(describe(result))

    # table and the signal view ------------------------------------------------------------
    def _fill_table(self, table) -> None:
        """Rows by score, highest first (at most 500; regions.csv of the job holds all)."""
        order = table["score"].fillna(-1).to_numpy().argsort(kind="stable")[::-1][:500]
        self._table_rows = [int(i) for i in order]
        self.table.blockSignals(True)
        self.table.setRowCount(len(order))
        for r, i in enumerate(order):
            for c, column in enumerate(TABLE_COLUMNS):
                value = table[column].iloc[i]
                text = (("yes" if value else "no") if column == "significant"
                        else f"{value:.4g}" if isinstance(value, (float, np.floating))
                        else str(value))
                self.table.setItem(r, c, QTableWidgetItem(text))
        self.table.blockSignals(False)

    def _on_row_selected(self) -> None:
        rows = self.table.selectionModel().selectedRows()
        if rows:
            self.show_signal(self._table_rows[rows[0].row()])

    def _on_map_click(self, layer, event) -> None:
        position = np.round(layer.world_to_data(event.position)).astype(int)
        owner = self.result.signals.owner
        if np.any(position < 0) or np.any(position >= owner.shape):
            return
        row = int(owner[tuple(position)])
        if row >= 0:
            self.show_signal(row)

    def show_signal(self, row: int) -> None:
        """Draw the trace and the H1 barcode (Z/2) of signal ``row`` of the result table."""
        result = self.result
        table = result.table
        self.trace_axes.clear()
        plot_trace(result.signals.traces[row], result.frame_interval, result.time_unit,
                   self.trace_axes, f"{result.signals.kind} {table['region'].iloc[row]}: "
                                    f"score {table['score'].iloc[row]:.3f}, period "
                                    f"{table['period'].iloc[row]:.3g} {result.time_unit}")
        self.barcode_axes.clear()
        bars = signal_bars(result, row)
        plot_bars(bars, self.barcode_axes, "H1 barcode over Z/2", colour=RHYTHM)
        self.canvas.draw_idle()
        self.shown_row = row
        self.shown_bars = bars

    def _write_result(self, folder, force: bool):
        return jobs.get("periodicity").write(self.result, folder, force)
