"""The result-folder contract: where voxtopo may write, and how.

A result folder appears whole or not at all. Everything is written into a hidden
temporary folder beside the target and renamed into place at the end; on any error the
temporary folder is removed and the target is left as it was.

The rules that keep a user's data safe live here, once, for every job and shell:

- a result folder is only ever created new, or replaced (``force=True``) when it is a
  folder voxtopo wrote: it holds the marker file :data:`MARKER`;
- an output is never an input, never contains an input, never lies inside an input
  folder (a zarr store, a folder of slices), and is never the working directory or a
  folder above it;
- an output is never a symbolic link, and its parent must be writable before any
  computation starts;
- the final rename is itself the check against a run that finished first: renaming onto
  a folder that is not empty fails, so one run never silently replaces another's result;
- single files beside a result (batch tables, reports) are written under a temporary
  name and renamed, so a full disk leaves the previous file readable.
"""

from __future__ import annotations

import contextlib
import errno
import glob
import json
import os
import shutil
import tempfile
import unicodedata
from pathlib import Path

from ..errors import InputError

#: The file that marks a folder as written by voxtopo (JSON: kind and version).
MARKER = ".voxtopo-folder"

#: Longest folder name made from a manifest row (bytes stay well under the 255 of most
#: file systems even for non-ASCII names).
_MAX_NAME_LENGTH = 80

_GLOB_CHARACTERS = set("*?[")


# --- what may be written where --------------------------------------------------------------
def input_paths(source) -> list[Path]:
    """The files and folders a source names: the path itself, or every match of a glob.

    Parameters
    ----------
    source : str, Path or None
        A path, or a glob (characters ``*?[`` in a path that does not exist).

    Returns
    -------
    list of Path
        Resolved paths (sorted matches of a glob); empty for None.

    Examples
    --------
    >>> input_paths(None)
    []
    """
    if source is None:
        return []
    text = os.fspath(source) if not isinstance(source, str) else source
    if _GLOB_CHARACTERS & set(text) and not Path(text).exists():
        return [Path(p).resolve() for p in sorted(glob.glob(text))]
    return [Path(text).resolve()]


def _within(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def _nearest_existing(path: Path) -> Path:
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def is_voxtopo_folder(path, kind: str | None = None) -> bool:
    """True when ``path`` is a folder voxtopo wrote (of ``kind`` when given).

    Parameters
    ----------
    path : str or Path
        The folder.
    kind : str, optional
        "result" or "batch"; any kind when not given.

    Returns
    -------
    bool
        Whether the folder holds voxtopo's marker file (of that kind).
    """
    marker = Path(path) / MARKER
    if not marker.is_file():
        return False
    if kind is None:
        return True
    try:
        return json.loads(marker.read_text(encoding="utf-8")).get("kind") == kind
    except (OSError, ValueError, AttributeError):
        return False


def write_marker(folder, kind: str) -> None:
    """Mark ``folder`` as a voxtopo folder of ``kind`` ("result", "batch").

    Parameters
    ----------
    folder : str or Path
        An existing folder voxtopo is filling.
    kind : str
        "result" or "batch".
    """
    from .. import __version__

    (Path(folder) / MARKER).write_text(
        json.dumps({"written_by": "voxtopo", "kind": kind, "voxtopo_version": __version__}),
        encoding="utf-8")


def check_output(out, inputs=(), *, option: str = "--out") -> Path:
    """Refuse an output path that could touch the user's data; return it resolved.

    Checks everything that does not depend on whether the folder exists: not a link,
    not the working directory or above it, not an input nor around one nor inside an
    input folder, and a parent that exists or can be made, and can be written.

    Parameters
    ----------
    out : str or Path
        The output folder the user named.
    inputs : iterable of paths or globs
        What the output is made from (None entries are skipped).
    option : str
        The option that named ``out``, for the messages.

    Returns
    -------
    Path
        ``out`` resolved.

    Raises
    ------
    InputError
        In one sentence, for each of the cases above.
    """
    given = Path(out)
    if given.is_symlink():
        raise InputError(f"{option} {out} is a symbolic link; name a real folder for the "
                         f"results.")
    resolved = given.resolve()
    here = Path.cwd().resolve()
    if _within(here, resolved):
        raise InputError(f"{option} {out} is the working folder or a folder above it; name a "
                         f"new folder for the results, such as results/scan.")
    for source in inputs:
        for path in input_paths(source):
            if _within(path, resolved):
                raise InputError(f"{option} {out} holds the input {path}; name a folder of "
                                 f"its own for the results, outside the inputs.")
            if path.is_dir() and _within(resolved, path):
                raise InputError(f"{option} {out} lies inside the input folder {path}, which "
                                 f"voxtopo never writes into; name a folder outside it.")
    if resolved.exists() and not resolved.is_dir():
        raise InputError(f"{out} exists and is not a folder; name a new folder for the "
                         f"results.")
    base = _nearest_existing(resolved.parent)
    if not base.is_dir():
        raise InputError(f"{base} is a file, so {out} cannot be made; name a folder whose "
                         f"parents are folders.")
    _check_writable(base, out)
    return resolved


def _check_writable(folder: Path, out) -> None:
    """Try to make (and remove) a folder in ``folder``: permissions, read-only mounts and
    quotas all show here, before any computation."""
    try:
        probe = tempfile.mkdtemp(prefix=".voxtopo-probe-", dir=folder)
    except OSError as exc:
        raise InputError(f"Cannot write into {folder} to make {out} "
                         f"({exc.strerror or exc}); choose a folder you can write to.") from None
    os.rmdir(probe)


def check_target(out, force: bool = False, inputs=()) -> Path:
    """Refuse an output that exists, unless ``force`` and it is voxtopo's own result folder.

    See :func:`check_output` for the checks made on every output. An existing empty
    folder counts as new: nothing in it can be lost.

    Parameters
    ----------
    out : str or Path
        The result folder the user named.
    force : bool
        Allow replacing an existing result folder voxtopo wrote.
    inputs : iterable of paths or globs
        What the result is made from.

    Returns
    -------
    Path
        ``out`` resolved.

    Raises
    ------
    InputError
        When ``out`` exists (without ``force``, or not written by voxtopo) or fails
        :func:`check_output`.
    """
    resolved = check_output(out, inputs)
    if resolved.exists() and any(resolved.iterdir()):
        if not force:
            raise InputError(f"Result folder {out} already exists; choose another name or "
                             f"pass --force to replace it.")
        if not is_voxtopo_folder(resolved):
            raise InputError(f"{out} is not a folder voxtopo wrote (it has no {MARKER} "
                             f"file), so --force will not replace it; choose another --out.")
    return resolved


@contextlib.contextmanager
def result_folder(out, force: bool = False, inputs=(), kind: str = "result"):
    """Context manager yielding a temporary Path to write into; renamed to ``out`` on success.

    Missing parent folders are made; the folder gets the user's usual permissions.

    Parameters
    ----------
    out : str or Path
        The folder to create (checked by :func:`check_target` before anything is made).
    force : bool
        Replace ``out`` when it is a folder voxtopo wrote.
    inputs : iterable of paths or globs
        What the result is made from; ``out`` may not be nor hold them.
    kind : str
        The marker's kind, "result" or "batch".

    Yields
    ------
    Path
        A hidden temporary folder beside ``out``: removed on any error, renamed to ``out``
        when the block ends. A result another run finished meanwhile is never replaced.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "results" / "bead"
    >>> with result_folder(out) as tmp:
    ...     _ = (tmp / "summary.json").write_text("{}")
    >>> sorted(p.name for p in out.iterdir())
    ['.voxtopo-folder', 'summary.json']
    """
    target = check_target(out, force, inputs)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.partial-", dir=target.parent))
    try:
        _usual_permissions(tmp)
        write_marker(tmp, kind)
        yield tmp
        _move_into_place(tmp, target, out, force)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def _usual_permissions(folder: Path) -> None:
    """mkdtemp makes folders 0700; a result folder gets what the umask allows."""
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(folder, 0o777 & ~mask)


def _move_into_place(tmp: Path, target: Path, out, force: bool) -> None:
    if force and target.exists() and any(target.iterdir()):
        if not is_voxtopo_folder(target):
            raise InputError(f"{out} was replaced by a folder voxtopo did not write while "
                             f"this run was computing; it was left as it is.")
        old = Path(tempfile.mkdtemp(prefix=f".{target.name}.old-", dir=target.parent))
        with contextlib.suppress(FileNotFoundError):   # another run may have moved it
            os.rename(target, old / target.name)
        try:
            _rename_new(tmp, target, out)
        finally:
            shutil.rmtree(old, ignore_errors=True)
    else:
        _rename_new(tmp, target, out)


def _rename_new(tmp: Path, target: Path, out) -> None:
    try:
        # rename(2) replaces an empty folder but never one that holds files: if another
        # run finished first, this fails instead of replacing its result
        os.rename(tmp, target)
    except OSError as exc:
        if exc.errno in (errno.ENOTEMPTY, errno.EEXIST, errno.EISDIR, errno.ENOTDIR):
            raise InputError(f"{out} was written by another run while this one was computing; "
                             f"it was kept and this run's results were not written.") from None
        raise


def is_complete(out) -> bool:
    """True when ``out`` is a finished voxtopo result folder (marker and summary.json).

    Parameters
    ----------
    out : str or Path
        The folder.

    Returns
    -------
    bool
    """
    out = Path(out)
    return is_voxtopo_folder(out) and (out / "summary.json").is_file()


# --- summary.json ----------------------------------------------------------------------------
#: How a number that is not finite is written in summary.json (JSON has no infinity): a
#: class that never dies has death "inf" (superlevel "-inf"); an unknown number is null.
INFINITY = "inf"


def json_ready(value):
    """``value`` as plain JSON values, written one way everywhere: numpy scalars and
    arrays become numbers and lists, tuples become lists, paths become text, +-infinity
    becomes "inf" / "-inf" and NaN becomes null.

    Parameters
    ----------
    value : object
        A summary or any part of it (dicts, lists, numbers, arrays, paths, text).

    Returns
    -------
    object
        The same structure in plain JSON values (dict keys as text).

    Examples
    --------
    >>> import numpy as np
    >>> json_ready({"death": np.inf, "birth": np.float32(2.5), "at": (1, 2), "p": np.nan})
    {'death': 'inf', 'birth': 2.5, 'at': [1, 2], 'p': None}
    """
    import numpy as np

    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [json_ready(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if value != value:
            return None
        if value in (float("inf"), float("-inf")):
            return INFINITY if value > 0 else f"-{INFINITY}"
        return value
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return value


def _numbers_back(value):
    if isinstance(value, dict):
        return {k: _numbers_back(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_numbers_back(v) for v in value]
    if value in (INFINITY, f"-{INFINITY}"):
        return float(value)
    return value


def software_versions() -> dict:
    """Versions of voxtopo, Python and the libraries behind the numbers and the pages."""
    import importlib.metadata as md
    import platform

    from .. import __version__

    versions = {"voxtopo": __version__, "python": platform.python_version()}
    for name in ("numpy", "scipy", "scikit-image", "gudhi", "numba", "tifffile", "pandas",
                 "dask", "distributed", "zarr", "scikit-learn", "pot", "matplotlib",
                 "jinja2"):
        try:
            versions[name] = md.version(name)
        except md.PackageNotFoundError:
            versions[name] = None
    return versions


def write_summary(folder, summary: dict) -> Path:
    """Write ``summary.json`` into ``folder``: plain JSON (see :func:`json_ready`), with the
    software versions the numbers came from.

    Parameters
    ----------
    folder : str or Path
        The result folder (or the temporary folder a job is filling).
    summary : dict
        The job's summary; ``voxtopo_version`` is put first and ``software`` added when
        absent. Infinities are written as the strings "inf" and "-inf".

    Returns
    -------
    Path
        The summary.json written (atomically: an existing one stays whole on an error).
    """
    from .. import __version__

    summary = {"voxtopo_version": __version__, **summary}
    summary.setdefault("software", software_versions())
    text = json.dumps(json_ready(summary), indent=2, allow_nan=False)
    return write_atomically(Path(folder) / "summary.json",
                            lambda path: path.write_text(text, encoding="utf-8"))


def read_summary(folder) -> dict:
    """Read ``summary.json`` of a result folder; "inf" and "-inf" come back as numbers.

    Parameters
    ----------
    folder : str or Path
        A result folder voxtopo wrote.

    Returns
    -------
    dict
        The summary, with infinities as floats.

    Raises
    ------
    InputError
        In one sentence, when summary.json is missing, not valid JSON or not an object.
    """
    path = Path(folder) / "summary.json"
    if not path.is_file():
        raise InputError(f"{folder} has no summary.json; give a result folder written by "
                         f"voxtopo.")
    try:
        summary = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"{path} is not valid JSON ({' '.join(str(exc).split())[:80]}; "
                         f"truncated or edited?); write the folder again with voxtopo.") from None
    if not isinstance(summary, dict):
        raise InputError(f"{path} should hold an object of keys, not a "
                         f"{type(summary).__name__}; write the folder again with voxtopo.")
    return _numbers_back(summary)


# --- single files ----------------------------------------------------------------------------
def write_atomically(path, write) -> Path:
    """Call ``write(temporary_path)`` and rename the file to ``path`` when it succeeded.

    On any error (a full disk included) the temporary file is removed and an existing
    ``path`` stays as it was.

    Parameters
    ----------
    path : str or Path
        The file to write; its folder must exist.
    write : callable
        ``write(temporary_path)`` writes the whole file at the temporary path (beside
        ``path``, hidden, so that the rename is atomic).

    Returns
    -------
    Path
        ``path``, with the user's usual permissions (umask).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "table.csv"
    >>> write_atomically(path, lambda p: p.write_text("a,b\\n")).read_text()
    'a,b\\n'
    """
    path = Path(path)
    handle, name = tempfile.mkstemp(prefix=f".{path.name}.partial-", dir=path.parent)
    os.close(handle)
    tmp = Path(name)
    try:
        write(tmp)
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


# --- folder names from user text ------------------------------------------------------------
def safe_folder_name(text, fallback: str = "scan") -> str:
    """A folder name made from user text that cannot leave its parent folder.

    Letters and digits of any script, ``-``, ``_`` and inner dots are kept; separators and
    everything else become ``_``; leading dots (``.``, ``..``, hidden names) go; an empty
    result becomes ``fallback``.

    Parameters
    ----------
    text : str
        What the user wrote (a manifest's name, a file name); anything ``str`` accepts.
    fallback : str
        The name when nothing of ``text`` is left.

    Returns
    -------
    str
        The name, at most 80 characters.

    Examples
    --------
    >>> [safe_folder_name(t) for t in ("..", "a/../b", ".hidden", "Probe 3 (wet)", "é")]
    ['scan', 'a_._b', 'hidden', 'Probe_3_wet', 'é']
    """
    text = unicodedata.normalize("NFC", str(text))
    kept = "".join(c if (c.isalnum() or c in "-_.") else "_" for c in text)
    for run, single in (("__", "_"), ("..", ".")):
        while run in kept:
            kept = kept.replace(run, single)
    kept = kept.strip("._ ")[:_MAX_NAME_LENGTH].rstrip("._ ")
    return kept or fallback


def unique_folder_names(names) -> list[str]:
    """Make safe names distinct (case-insensitively, as some file systems compare them)
    by adding -2, -3, ... in order.

    Parameters
    ----------
    names : iterable of str
        Names in order; each is made safe with :func:`safe_folder_name` first.

    Returns
    -------
    list of str
        One distinct name per input, in the same order; the first of equal names keeps it.

    Examples
    --------
    >>> unique_folder_names(["a", "A", "a-2", "..", ""])
    ['a', 'A-2', 'a-2-2', 'scan', 'scan-2']
    """
    taken, result = set(), []
    for name in names:
        base = safe_folder_name(name)
        candidate, number = base, 1
        while candidate.casefold() in taken:
            number += 1
            candidate = f"{base}-{number}"
        taken.add(candidate.casefold())
        result.append(candidate)
    return result
