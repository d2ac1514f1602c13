"""voxtopo: topology of images and volumes with cubical persistent homology.

The flow is one way: ``load`` a Scan, make a filtration (``voxtopo.filtration``),
compute its ``persistence`` (a Diagram with feature locations), analyse, report.

The public names are imported on first use, so that ``voxtopo --help`` starts at once and
a Ctrl-C during start-up meets the command's own handler instead of a half-done import.
"""

from importlib import import_module

from .errors import Cancelled, InputError, TooBigError, VoxtopoError

__version__ = "0.1.0"

_LAZY = {"Diagram": ".diagram", "persistence": ".engine", "load": ".io", "Scan": ".scan"}

__all__ = ["Diagram", "Scan", "load", "persistence", "Cancelled", "InputError",
           "TooBigError", "VoxtopoError", "__version__"]


def __getattr__(name):
    if name in _LAZY:
        value = getattr(import_module(_LAZY[name], __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'voxtopo' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
