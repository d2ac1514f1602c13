"""Viewer tests need a display that can give OpenGL (Xvfb with Mesa on a server).

`make test` provides one (it installs Xvfb and Mesa and runs pytest under xvfb-run). Where
none can be had the viewer tests fail with the reason: they never pass by not running.
"""

import os

import pytest


def display_problem() -> str | None:
    """Why napari cannot draw here, or None when it can."""
    platform = os.environ.get("QT_QPA_PLATFORM", "")
    if platform in ("offscreen", "minimal"):
        return (f"QT_QPA_PLATFORM={platform} gives no OpenGL context for napari's canvas; "
                f"run under Xvfb with QT_QPA_PLATFORM=xcb")
    if not os.environ.get("DISPLAY") and not os.environ.get("WAYLAND_DISPLAY"):
        return "no display (DISPLAY is unset); run the tests under xvfb-run -a"
    return None


def pytest_runtest_setup(item):
    # a hook, not a fixture: it must run before pytest-qt makes its QApplication, which
    # aborts the whole process when Qt cannot reach a display
    if item.get_closest_marker("viewer") is None:
        return
    problem = display_problem()
    if problem is None:
        return
    pytest.fail(f"Viewer tests need a display, but {problem} (`make test` does that).")
