"""The jobs: one module per job, each with the same shape.

==============  ====================================================================
``Options``     a dataclass of the settings in the user's words (checked on creation)
``run``         ``run(input, options, progress=None)`` computes and returns a result
``write``       ``write(result, out, force=False)`` fills a result folder atomically
``describe``    ``describe(result)`` says in one line what was found
==============  ====================================================================

What a job reads from a file (a time-lapse for periodicity, a scan for the others) is
:func:`read_input`. The CLI, the batch runner and the napari plugin only turn their inputs
into Options and call these, so that a job means the same thing in every shell.

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


def read_input(name: str, path, load_options: dict | None = None):
    """What the job called ``name`` reads from ``path``.

    Parameters
    ----------
    name : str
        One of :data:`JOBS`.
    path : str or Path
        A file, folder or store in any format voxtopo reads.
    load_options : dict, optional
        Keyword arguments of :func:`voxtopo.io.load_timelapse` for the periodicity job
        (which reads every frame, so it takes no ``timepoint``), of
        :func:`voxtopo.io.load` for the others. The pores job maps its scan from the file
        where the file allows it (``mapped=True``).

    Returns
    -------
    TimeLapse or Scan

    Raises
    ------
    InputError
        For a name that is not a job, a time point given to the periodicity job, or what
        the reader refuses.
    """
    from ..io import load, load_timelapse

    get(name)
    options = dict(load_options or {})
    if name == "pores":
        # a gray scan is read once to segment it, then only for the slice plot: mapped
        # from its file, its memory is given back once the pores are segmented
        options["mapped"] = True
    if name != "periodicity":
        return load(path, **options)
    if options.pop("timepoint", None) is not None:
        raise InputError(f"A time point picks one frame, but the periodicity job measures "
                         f"every frame of {path}; leave the timepoint out.")
    return load_timelapse(path, **options)


__all__ = ["JOBS", "get", "read_input"]
