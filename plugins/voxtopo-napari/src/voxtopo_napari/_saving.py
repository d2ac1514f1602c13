"""How a dock panel saves its result: the job's own result folder, through the job layer.

The folder is what the command writes for the same settings (the job's ``write``,
report.html included), made whole or not at all; an existing folder is never replaced
silently. A panel provides ``result``, ``status``, ``_fail(message)`` (as
:class:`BackgroundRun` does) and ``_write_result(folder, force)``, which hands its result
to the job's ``write``.
"""

from __future__ import annotations

from pathlib import Path

from napari.utils.notifications import show_info
from qtpy.QtWidgets import QFileDialog, QPushButton

from voxtopo.errors import VoxtopoError

__all__ = ["SavesResultFolder"]


class SavesResultFolder:
    """Mixin of a panel whose result a voxtopo job made."""

    def _init_saving(self, commands: str) -> None:
        """Make the save button (enabled once there is a result); ``commands`` names the
        command whose folder it writes, for its tooltip."""
        self.export_button = QPushButton("Save result folder…")
        self.export_button.setToolTip(f"Write the result folder as the command does: "
                                      f"{commands}.")
        self.export_button.setEnabled(False)
        self.export_button.clicked.connect(self._ask_export)

    def _ask_export(self) -> None:
        folder, _ = QFileDialog.getSaveFileName(self, "Name a new result folder",
                                                str(Path.home() / "voxtopo-result"))
        if folder:
            self.export(folder)

    def export(self, folder, force: bool = False):
        """Write the current result as the job's result folder; returns its path (None,
        with the reason in the status line, when nothing was written)."""
        if self.result is None:
            self._fail(f"There is no result to save yet; press {self.run_button.text()} "
                       f"first.")
            return None
        try:
            out = self._write_result(folder, force)
        except VoxtopoError as error:
            self._fail(str(error))
            return None
        show_info(f"Saved the result in {out}.")
        self.status.setText(f"Saved the result in {out}.")
        return out
