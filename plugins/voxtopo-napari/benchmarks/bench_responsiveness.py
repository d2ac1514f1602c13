"""Does the viewer stay responsive while the panel analyses a large volume?

Opens a smoothed-noise volume (default 256^3, float32), runs the analysis panel on it and,
while the worker thread computes, measures how late a 20 ms timer fires on the GUI thread:
the longest and the 99th-percentile delay are how long the viewer could not react. Prints
the run time, those delays and the peak memory of the process. Run under a display::

    QT_QPA_PLATFORM=xcb xvfb-run -a .venv/bin/python \\
        plugins/voxtopo-napari/benchmarks/bench_responsiveness.py [SIZE] [MODE]

MODE is "sublevel" (default) or "distance" (distance transform of the darker half, with
pore regions and the porosity measures). Not a test: the numbers depend on the machine.
"""

import resource
import sys
import time

import numpy as np
from qtpy.QtCore import QTimer
from qtpy.QtWidgets import QApplication
from scipy import ndimage

import napari
from voxtopo_napari._widget import AnalysisWidget

TICK_MS = 20


def main(size: int = 256, mode: str = "sublevel") -> None:
    rng = np.random.default_rng(0)
    volume = ndimage.gaussian_filter(rng.random((size,) * 3, dtype=np.float32), 3.0)
    viewer = napari.Viewer(show=True)
    viewer.add_image(volume, name="noise")
    widget = AnalysisWidget(viewer)
    viewer.window.add_dock_widget(widget)
    if mode == "distance":
        widget.mode_choice.setCurrentText("distance transform of a mask (pores)")
    app = QApplication.instance()
    delays, last = [], [time.perf_counter()]
    computed = []  # when the worker handed its result to the GUI thread

    def tick():
        now = time.perf_counter()
        delays.append((now, now - last[0] - TICK_MS / 1000))
        last[0] = now

    timer = QTimer()
    timer.timeout.connect(tick)
    timer.start(TICK_MS)
    start = time.perf_counter()
    widget.run()
    phases = []  # (time, phase) as the worker reported them
    widget._relay.changed.connect(
        lambda phase, fraction: phases.append((time.perf_counter(), phase, fraction)))
    widget.worker.returned.connect(lambda _: computed.append(time.perf_counter()))
    while widget.running:
        app.processEvents()
        time.sleep(0.002)
    seconds = time.perf_counter() - start
    timer.stop()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"volume {size}^3 ({mode}): {widget.status.text()}")
    print(f"run {seconds:.1f} s, peak memory {peak:.0f} MB")
    end_of_work = computed[0] if computed else time.perf_counter()
    stamps = np.array([t for t, _ in delays[1:]])
    late = np.array([d for _, d in delays[1:]]) * 1000
    worst = int(np.argmax(late))
    before = [p for p in phases if p[0] <= stamps[worst]]
    print(f"longest delay ended at {stamps[worst] - start:.1f} s into the run, after the "
          f"report {before[-1][1:] if before else None} (work handed over at "
          f"{end_of_work - start:.1f} s)")
    for label, part in (("while the worker computed", stamps <= end_of_work),
                        ("while the layers were added", stamps > end_of_work)):
        if part.any():
            print(f"GUI timer {label}: late by at most {late[part].max():.0f} ms, "
                  f"99th percentile {np.percentile(late[part], 99):.0f} ms, median "
                  f"{np.median(late[part]):.0f} ms over {part.sum()} ticks")
    viewer.close()


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 256,
         sys.argv[2] if len(sys.argv) > 2 else "sublevel")
