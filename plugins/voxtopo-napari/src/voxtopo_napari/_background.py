"""How a dock panel runs one library call in a worker thread: progress, cancel, errors.

Both panels (features, rhythms) share this: the work runs in a napari thread worker, its
progress comes back through a queued Qt signal, Cancel sets a flag that the next progress
report turns into ``voxtopo.Cancelled``, and nothing is added to the viewer unless the
work finished. The mixin makes the panel's run and cancel buttons, progress bar and status
line (:meth:`BackgroundRun._init_background`, placed by :meth:`BackgroundRun._add_run_controls`);
a panel provides a ``WORK`` name for its messages, ``run()`` and ``_on_done(result)``.
"""

from __future__ import annotations

import threading

from napari.qt.threading import create_worker
from napari.utils.notifications import show_error
from qtpy.QtCore import QObject, Signal
from qtpy.QtWidgets import QHBoxLayout, QLabel, QProgressBar, QPushButton

from voxtopo.errors import Cancelled, VoxtopoError

__all__ = ["BackgroundRun"]


class _ProgressRelay(QObject):
    """Carries progress from the worker thread to the panel (queued across threads)."""

    changed = Signal(str, float)


class BackgroundRun:
    """Mixin of a QWidget panel that runs one long call at a time in a worker thread."""

    #: What the panel's work is called in its messages ("The analysis", ...).
    WORK = "The work"

    def _init_background(self, run_text: str, run_tip: str, prompt: str) -> None:
        """Make the run and cancel buttons (``run_text``, its tooltip ``run_tip``), the
        progress bar and the status line (first showing ``prompt``)."""
        self.run_button = QPushButton(run_text)
        self.run_button.setToolTip(run_tip)
        self.run_button.clicked.connect(self.run)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setToolTip(f"Stop {self.WORK.lower()}; nothing is added.")
        self.cancel_button.setEnabled(False)
        self.cancel_button.clicked.connect(self.cancel)
        self.progress_bar = QProgressBar()
        self.progress_bar.setRange(0, 1000)
        self.status = QLabel(prompt)
        self.status.setWordWrap(True)
        self.worker = None
        self.last_error = None
        self._cancel = threading.Event()
        self._relay = _ProgressRelay()
        self._relay.changed.connect(self._show_progress)

    def _add_run_controls(self, layout) -> None:
        """Put the buttons side by side, then the progress bar and the status line, into
        the panel's vertical ``layout``."""
        buttons = QHBoxLayout()
        buttons.addWidget(self.run_button)
        buttons.addWidget(self.cancel_button)
        layout.addLayout(buttons)
        layout.addWidget(self.progress_bar)
        layout.addWidget(self.status)

    @property
    def running(self) -> bool:
        return self.worker is not None

    def _start(self, function, *args, working: str, **kwargs) -> None:
        """Run ``function(*args, progress=..., **kwargs)`` in a worker thread."""
        self._cancel.clear()
        self.last_error = None
        self.worker = create_worker(
            function, *args, progress=self._progress, _start_thread=False,
            _connect={"returned": self._on_done, "errored": self._on_error,
                      "finished": self._on_finished}, **kwargs)
        self.run_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.progress_bar.setValue(0)
        self.status.setText(working)
        self.worker.start()

    def _progress(self, phase: str, fraction: float) -> None:
        # runs in the worker thread: only the signal and the flag are touched here
        if self._cancel.is_set():
            raise Cancelled(f"{self.WORK} was cancelled during {phase}.")
        self._relay.changed.emit(phase, float(fraction))

    def _show_progress(self, phase: str, fraction: float) -> None:
        if self.running:
            self.progress_bar.setValue(int(round(1000 * min(max(fraction, 0.0), 1.0))))
            self.status.setText(f"{phase} …")

    def cancel(self) -> None:
        """Ask the running work to stop; it stops at its next progress report and nothing
        is added."""
        if self.running:
            self._cancel.set()
            self.worker.quit()
            self.status.setText("Cancelling …")

    def _on_error(self, error) -> None:
        self.last_error = error
        if isinstance(error, Cancelled):
            self.status.setText("Cancelled; nothing was added.")
        elif isinstance(error, VoxtopoError):
            self._fail(str(error))
        else:
            self._fail(f"{self.WORK} failed: {error}")

    def _on_finished(self) -> None:
        if self._cancel.is_set() and self.last_error is None:
            self.status.setText("Cancelled; nothing was added.")
        self.worker = None
        self.run_button.setEnabled(True)
        self.cancel_button.setEnabled(False)
        self.progress_bar.setValue(0 if self._cancel.is_set() else 1000)

    def _fail(self, message: str) -> None:
        self.status.setText(message)
        show_error(message)
