"""Result folders appear whole or not at all.

Everything is written into a hidden temporary folder beside the target and renamed into
place at the end; on any error the temporary folder is removed and the target is left as
it was. An existing target is replaced only with ``force=True``.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from pathlib import Path

from ..errors import InputError


def check_target(out, force: bool = False) -> Path:
    """Refuse an existing result folder unless ``force``; refuse a file in its place."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} exists and is not a folder; name a new folder for the results.")
    if out.exists() and not force:
        raise InputError(f"Result folder {out} already exists; choose another name or "
                         f"pass --force to replace it.")
    if not out.parent.exists():
        raise InputError(f"The folder {out.parent} that should hold {out.name} does not exist.")
    return out


@contextlib.contextmanager
def result_folder(out, force: bool = False):
    """Context manager yielding a temporary Path to write into; renamed to ``out`` on success.

    Examples
    --------
    >>> with result_folder("results/bead", force=True) as tmp:    # doctest: +SKIP
    ...     (tmp / "summary.json").write_text("{}")
    """
    out = check_target(out, force)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        yield tmp
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
            os.rename(out, old / out.name)
            os.rename(tmp, out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def is_complete(out) -> bool:
    """True when ``out`` is a finished result folder (it has summary.json)."""
    return (Path(out) / "summary.json").is_file()
