"""The rhythm panel in a real (headless) viewer: maps, table, clicking a region.

Needs a display (Xvfb); see conftest.py.
"""

import numpy as np
import pandas as pd
import pytest

from voxtopo.jobs.periodicity import PeriodicityOptions, run, write
from voxtopo.scan import TimeLapse
from voxtopo_napari._rhythm_panel import SIGNALS, RhythmWidget

pytestmark = pytest.mark.viewer

WAIT_MS = 120_000


def _beating_disc(frames=100, interval=0.1, shape=(20, 20), seed=0):
    """Noise around 100 and a disc beating at 1.5 s (our own scenario)."""
    rng = np.random.default_rng(seed)
    time = np.arange(frames) * interval
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    disc = (yy - 7) ** 2 + (xx - 7) ** 2 < 25
    stack = 100 + 4 * rng.standard_normal((frames,) + shape)
    stack += 20 * np.cos(2 * np.pi * time / 1.5)[:, None, None] * disc
    return stack.astype(np.float32), disc


def test_rhythm_panel_adds_maps_table_and_shows_a_clicked_region(make_napari_viewer, qtbot,
                                                                   tmp_path):
    """The panel's maps and table must be the library's result on the same array (the
    job is the reference: the panel holds no logic of its own); the disc region, clicked,
    shows its own trace and the barcode whose longest bar is its score times sqrt(3)
    (SW1PerS score, Perea, Deckard, Haase & Harer 2015)."""
    stack, disc = _beating_disc()
    labels = disc.astype(np.int32) * 3
    labels[15:, 15:] = 5
    viewer = make_napari_viewer()
    viewer.add_image(stack, name="beats", scale=(0.1, 0.5, 0.5))
    viewer.add_labels(labels, name="cells", scale=(0.5, 0.5))
    widget = RhythmWidget(viewer)
    viewer.window.add_dock_widget(widget, name="voxtopo rhythms")
    widget.layer_choice.setCurrentText("beats")
    widget.interval_box.setValue(0.1)
    widget.signal_choice.setCurrentText("regions of a labels layer")
    widget.regions_choice.setCurrentText("cells")
    widget.surrogates_box.setValue(19)
    widget.run()
    qtbot.waitUntil(lambda: not widget.running, timeout=WAIT_MS)
    assert widget.last_error is None

    expected = run(TimeLapse(stack, frame_interval=0.1, time_unit="s", spacing=(0.5, 0.5)),
                   PeriodicityOptions(regions=labels, surrogates=19))
    score = viewer.layers["score · beats"]
    period = viewer.layers["period · beats"]
    np.testing.assert_allclose(score.data, expected.signals.paint(expected.table["score"]))
    assert period.metadata["voxtopo_periodicity"]["unit"] == "s"
    assert tuple(score.scale) == (0.5, 0.5)
    assert widget.table.rowCount() == 2
    assert widget.table.item(0, 0).text() == "3"           # the disc scores highest
    assert "of 2 regions at alpha 0.05" in widget.status.text()

    class Click:
        position = (7 * 0.5, 7 * 0.5)                      # world coordinates of the disc

    widget._on_map_click(score, Click())
    row = widget.shown_row
    assert expected.table["region"].iloc[row] == 3
    line = widget.trace_axes.get_lines()[0]
    np.testing.assert_allclose(line.get_ydata(), expected.signals.traces[row])
    longest = widget.shown_bars[0, 1] - widget.shown_bars[0, 0]
    assert longest / np.sqrt(3) == pytest.approx(expected.table["score"].iloc[row], rel=1e-9)

    widget.table.selectRow(1)
    assert expected.table["region"].iloc[widget.shown_row] == 5

    # saved through the job: the files of `voxtopo periodicity`, report.html included,
    # and the same regions table as the job's own folder
    saved = widget.export(tmp_path / "from-panel")
    write(expected, tmp_path / "from-job")
    assert sorted(p.name for p in saved.iterdir()) == \
        sorted(p.name for p in (tmp_path / "from-job").iterdir())
    assert "report.html" in {p.name for p in saved.iterdir()}
    pd.testing.assert_frame_equal(pd.read_csv(saved / "regions.csv"),
                                  pd.read_csv(tmp_path / "from-job" / "regions.csv"))
    assert widget.export(tmp_path / "from-panel") is None   # never overwritten silently
    assert "already exists" in widget.status.text()
    viewer.screenshot(str(tmp_path / "rhythm_panel.png"), canvas_only=False)
    assert (tmp_path / "rhythm_panel.png").stat().st_size > 0


def test_rhythm_panel_refuses_a_regions_layer_of_another_shape(make_napari_viewer, qtbot):
    """House rule (no source): one sentence, nothing added."""
    stack, _ = _beating_disc(frames=40)
    viewer = make_napari_viewer()
    viewer.add_image(stack, name="beats")
    viewer.add_labels(np.ones((8, 9), dtype=np.int32), name="wrong")
    widget = RhythmWidget(viewer)
    widget.layer_choice.setCurrentText("beats")
    widget.signal_choice.setCurrentText(next(k for k, v in SIGNALS.items() if v == "region"))
    widget.regions_choice.setCurrentText("wrong")
    layers = len(viewer.layers)
    widget.run()
    qtbot.waitUntil(lambda: not widget.running, timeout=WAIT_MS)
    assert "shape (8, 9)" in widget.status.text()
    assert len(viewer.layers) == layers
