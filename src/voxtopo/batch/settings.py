"""The settings file of a batch: read, checked key by key through each job's Options."""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, field, fields
from pathlib import Path

from .. import jobs
from ..errors import InputError
from ..options import COUNT, POSITIVE, SHAPE, SPACING, TEXT, WHOLE, Rule, check, one_of

__all__ = ["Settings", "read_settings", "job_options", "LOAD_RULES", "BATCH_RULES"]

#: The jobs a batch runs, in the registry's order.
JOBS = tuple(jobs.JOBS)

#: How every scan is read ([load]); the manifest's columns of the same names win.
LOAD_RULES = {
    "spacing": SPACING, "unit": TEXT, "channel": WHOLE, "timepoint": WHOLE, "level": WHOLE,
    "shape": SHAPE, "dtype": TEXT, "byte_order": one_of("little", "big"), "offset": WHOLE,
    "axes": TEXT, "frame_interval": POSITIVE,
}
#: [load] keys that only a time-lapse job reads.
_TIME_KEYS = ("axes", "frame_interval")
#: How the batch itself runs ([batch]).
BATCH_RULES = {
    "workers": COUNT,
    "memory_per_worker": Rule(lambda v: _bytes_or_none(v) is not False,
                              "a number of bytes, \"auto\" or a size like \"8GB\""),
    "out_of_core": one_of("auto", True, False),
    "chunks": SHAPE,
    "worker_timeout": POSITIVE,
}


@dataclass
class Settings:
    """The content of a settings file, checked.

    Attributes
    ----------
    job : str
        The job every scan runs: "analyse", "pores", "patches" or "periodicity".
    load : dict
        How every scan is read ([load], checked against :data:`LOAD_RULES`).
    analyse, pores, patches, periodicity : dict
        Each job's options table, as written (the keys of that job's ``Options``).
    batch : dict
        How the batch runs ([batch], checked against :data:`BATCH_RULES`).
    """

    job: str = "analyse"
    load: dict = field(default_factory=dict)
    analyse: dict = field(default_factory=dict)
    pores: dict = field(default_factory=dict)
    patches: dict = field(default_factory=dict)
    periodicity: dict = field(default_factory=dict)
    batch: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        """The settings as plain tables, in the order of a settings file.

        Returns
        -------
        dict
            ``{"job": ..., "load": {...}, <one table per job>, "batch": {...}}``, with
            copies of the tables.

        Examples
        --------
        >>> list(Settings(job="pores").as_dict())
        ['job', 'load', 'analyse', 'pores', 'patches', 'periodicity', 'batch']
        """
        return {"job": self.job, "load": dict(self.load),
                **{name: dict(getattr(self, name)) for name in JOBS},
                "batch": dict(self.batch)}


def read_settings(path=None) -> tuple[Settings, str, str]:
    """Read and check a TOML or YAML settings file.

    Parameters
    ----------
    path : str or Path, optional
        A ``.toml``, ``.yaml`` or ``.yml`` file with the keys of the batch help; without
        one, the default settings.

    Returns
    -------
    settings : Settings
        The checked settings.
    text : str
        The file's text (without a path, the defaults written as TOML), saved beside the
        results so that a rerun can tell whether the settings changed.
    kind : str
        "toml" or "yaml", the suffix the text is saved under.

    Raises
    ------
    InputError
        When the file is missing, not TOML/YAML, or holds an unknown key or a value of the
        wrong type or range (named in the message).

    Examples
    --------
    >>> settings, text, kind = read_settings()
    >>> settings.job, kind
    ('analyse', 'toml')
    """
    if path is None:
        settings = Settings()
        return settings, _to_toml(settings.as_dict()), "toml"
    path = Path(path)
    if not path.is_file():
        raise InputError(f"No settings file at {path}; give a .toml or .yaml file.")
    text = path.read_text(encoding="utf-8", errors="replace")
    suffix = path.suffix.lower()
    if suffix not in (".toml", ".yaml", ".yml"):
        raise InputError(f"{path} should be a .toml or .yaml settings file, not "
                         f"{suffix or 'a file without extension'}.")
    try:
        if suffix == ".toml":
            try:
                import tomllib
            except ModuleNotFoundError:  # Python 3.10: the same parser, packaged as tomli
                import tomli as tomllib

            raw = tomllib.loads(text)
            kind = "toml"
        else:
            import yaml

            raw = yaml.safe_load(text) or {}
            kind = "yaml"
    except Exception as exc:
        raise InputError(f"{path} is not valid {suffix[1:].upper()} "
                         f"({' '.join(str(exc).split())[:120]}).") from None
    if not isinstance(raw, dict):
        raise InputError(f"{path} should hold keys and tables, got a {type(raw).__name__}.")
    return _check_settings(raw, path), text, kind


def _check_settings(raw: dict, path) -> Settings:
    allowed = {"job", "load", *JOBS, "batch"}
    unknown = set(raw) - allowed
    if unknown:
        raise InputError(f"{path} has the unknown key(s) {sorted(unknown)}; the settings "
                         f"file knows {sorted(allowed)}.")
    job = raw.get("job", "analyse")
    if job not in JOBS:
        raise InputError(f"job = {job!r} in {path} is not a job voxtopo batch runs; choose "
                         f"one of {list(JOBS)}.")
    checked = {}
    for table in ("load", *JOBS, "batch"):
        value = raw.get(table, {}) or {}
        if not isinstance(value, dict):
            raise InputError(f"[{table}] in {path} should be a table of keys, got {value!r}.")
        checked[table] = dict(value)
    where = {table: f"[{table}] in {Path(path).name}" for table in checked}
    check(checked["load"], LOAD_RULES, where["load"])
    check(checked["batch"], BATCH_RULES, where["batch"])
    time_keys = sorted(set(_TIME_KEYS) & set(checked["load"]))
    if time_keys and job != "periodicity":
        raise InputError(f"{', '.join(time_keys)} in {where['load']} only matter to the "
                         f"periodicity job, not to {job}; leave them out.")
    for name in JOBS:
        job_options(name, checked[name], where[name])
    return Settings(job=job, **checked)


def job_options(name: str, values: dict, where: str = "the settings"):
    """The Options of job ``name`` from a settings table, checked key by key.

    Parameters
    ----------
    name : str
        The job: "analyse", "pores", "patches" or "periodicity".
    values : dict
        The table's keys and values; TOML/YAML lists become the tuples the options hold.
    where : str
        Where the table comes from, for the message ("[pores] in settings.toml").

    Returns
    -------
    Options
        The job's own Options dataclass (``voxtopo.jobs.get(name).Options``).

    Raises
    ------
    InputError
        For a key the job's Options do not have, or a value they refuse.

    Examples
    --------
    >>> job_options("pores", {"threshold": "otsu"}).threshold
    'otsu'
    """
    options = jobs.get(name).Options
    known = {f.name for f in fields(options)}
    unknown = sorted(set(values) - known)
    if unknown:
        raise InputError(f"{where} has the unknown key(s) {unknown}; it knows {sorted(known)}.")
    try:
        return options(**{k: tuple(v) if isinstance(v, list) else v for k, v in values.items()})
    except InputError as error:
        raise InputError(f"{where}: {error}") from None


def _bytes_or_none(value):
    """Bytes of a memory size, None for "auto", False when it is not a size."""
    if value in (None, "auto"):
        return None
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return int(value) if math.isfinite(value) and value > 0 else False
    match = re.fullmatch(r"\s*([\d.]+)\s*([kMGT]?i?B)\s*", str(value))
    units = {"B": 1, "kB": 1e3, "MB": 1e6, "GB": 1e9, "TB": 1e12, "kiB": 2**10,
             "MiB": 2**20, "GiB": 2**30, "TiB": 2**40}
    if not match or match.group(2) not in units:
        return False
    try:
        return int(float(match.group(1)) * units[match.group(2)])
    except ValueError:
        return False


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return json.dumps(str(value))


def _to_toml(settings: dict) -> str:
    """TOML text of a settings dict (scalars, lists, one level of tables)."""
    lines = ["# voxtopo batch settings (see `voxtopo batch --help` for every key)"]
    for key, value in settings.items():
        if not isinstance(value, dict):
            lines.append(f"{key} = {_toml_value(value)}")
    for key, value in settings.items():
        if isinstance(value, dict):
            lines.append(f"\n[{key}]")
            lines.extend(f"{k} = {_toml_value(v)}" for k, v in value.items() if v is not None)
    return "\n".join(lines) + "\n"
