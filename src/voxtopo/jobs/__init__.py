"""The jobs: one module per job, each with the same shape.

==============  ====================================================================
``Options``     a dataclass of the settings in the user's words (checked on creation)
``run``         ``run(input, options, progress=None)`` computes and returns a result
``write``       ``write(result, out, force=False)`` fills a result folder atomically
``describe``    ``describe(result)`` says in one line what was found
==============  ====================================================================

The CLI, the batch runner and the napari plugin only turn their inputs into Options and
call these, so that a job means the same thing in every shell.

>>> from voxtopo import jobs
>>> sorted(JOBS)
['analyse', 'patches', 'periodicity', 'pores']
>>> jobs.get("pores").Options(threshold="otsu").threshold
'otsu'
"""

from __future__ import annotations

from importlib import import_module
from types import ModuleType

from ..errors import InputError

#: Job name -> module (imported when first asked for).
JOBS = {"analyse": ".analyse", "pores": ".pores", "patches": ".patches",
        "periodicity": ".periodicity"}


def get(name: str) -> ModuleType:
    """The module of the job called ``name``.

    Parameters
    ----------
    name : str
        One of :data:`JOBS`: "analyse", "pores", "patches" or "periodicity".

    Returns
    -------
    module
        The job's module, with ``Options``, ``run``, ``write`` and ``describe``.

    Raises
    ------
    InputError
        For a name that is not a job.
    """
    if name not in JOBS:
        raise InputError(f"{name!r} is not a voxtopo job; choose one of {sorted(JOBS)}.")
    return import_module(JOBS[name], __name__)


__all__ = ["JOBS", "get"]
