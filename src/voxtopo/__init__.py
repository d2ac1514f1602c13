"""voxtopo: topology of images and volumes with cubical persistent homology.

The flow is one way: ``load`` a Scan, make a filtration (``voxtopo.filtration``),
compute its ``persistence`` (a Diagram with feature locations), analyse, report.
"""

from .diagram import Diagram
from .engine import persistence
from .errors import Cancelled, InputError, TooBigError, VoxtopoError
from .io import load
from .scan import Scan

__version__ = "0.1.0"

__all__ = ["Diagram", "Scan", "load", "persistence", "Cancelled", "InputError",
           "TooBigError", "VoxtopoError", "__version__"]
