"""Checks of option values, by key, with one sentence for a wrong one.

Settings files, the CLI and the plugin hand the jobs plain values; a value of the wrong
type must be refused before any work starts, with the key named, instead of running with
a misread value (the string "false" is true in Python) or failing later inside numpy.
Each rule says in words what it accepts, and that text is the message.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from .errors import InputError


@dataclass(frozen=True)
class Rule:
    """What one option accepts: a test and the words for it."""

    accepts: Callable[[object], bool]
    words: str


def _is_int(value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_number(value) -> bool:
    return (isinstance(value, (int, float)) and not isinstance(value, bool)
            and math.isfinite(value))


def _list_of(rule: Rule, words: str) -> Rule:
    return Rule(lambda v: isinstance(v, (list, tuple)) and len(v) > 0
                and all(rule.accepts(x) for x in v), words)


def _either(*rules: Rule, words: str) -> Rule:
    return Rule(lambda v: any(r.accepts(v) for r in rules), words)


def one_of(*choices) -> Rule:
    """A rule accepting exactly these values (booleans never stand in for numbers)."""
    def accepts(value):
        return any(value == c and type(value) is type(c) for c in choices)
    return Rule(accepts, " or ".join(repr(c) if isinstance(c, str) else str(c)
                                     for c in choices))


def optional(rule: Rule) -> Rule:
    """The rule, or nothing (None)."""
    return Rule(lambda v: v is None or rule.accepts(v), rule.words)


BOOLEAN = Rule(lambda v: isinstance(v, bool), "true or false")
TEXT = Rule(lambda v: isinstance(v, str) and v.strip() != "", "a text")
WHOLE = Rule(lambda v: _is_int(v) and v >= 0, "a whole number, 0 or more")
COUNT = Rule(lambda v: _is_int(v) and v >= 1, "a whole number, 1 or more")
NUMBER = Rule(_is_number, "a finite number")
POSITIVE = Rule(lambda v: _is_number(v) and v > 0, "a positive number")
NON_NEGATIVE = Rule(lambda v: _is_number(v) and v >= 0, "a number, 0 or more")
PERCENT = Rule(lambda v: _is_number(v) and 0 < v <= 100, "a percentage above 0, up to 100")
PRIME = Rule(lambda v: _is_int(v) and v >= 2 and all(v % d for d in range(2, int(v ** 0.5) + 1)),
             "a prime number such as 2 or 3")
NEIGHBOURHOOD = one_of(4, 8, 6, 26)
ENGINE = one_of("auto", "voxtopo", "gudhi")
THRESHOLD = _either(one_of("otsu"), NUMBER, words="a number or \"otsu\"")
FILL = _either(one_of("max", "min"), NUMBER, words="\"max\", \"min\" or a number")
SPACING = _either(POSITIVE, _list_of(POSITIVE, ""),
                  words="a positive number or a list of them (z, y, x)")
SHAPE = _list_of(COUNT, "a list of whole numbers, 1 or more, such as [64, 128, 128]")
AXIS = _either(one_of("z", "y", "x"), _list_of(one_of("z", "y", "x"), ""),
               words="\"z\", \"y\", \"x\" or a list of them")


def check(values: dict, rules: dict, where: str) -> None:
    """Refuse the first value that its rule does not accept.

    Parameters
    ----------
    values : dict
        Option name -> value.
    rules : dict
        Option name -> :class:`Rule`; names without a rule are refused as unknown.
    where : str
        Where the values come from, for the message ("[analyse] in settings.toml").

    Examples
    --------
    >>> check({"superlevel": True}, {"superlevel": BOOLEAN}, "the options")
    >>> check({"superlevel": "false"}, {"superlevel": BOOLEAN}, "the options")
    Traceback (most recent call last):
    ...
    voxtopo.errors.InputError: superlevel in the options should be true or false, got 'false'.
    """
    unknown = sorted(set(values) - set(rules))
    if unknown:
        raise InputError(f"{where} has the unknown key(s) {unknown}; it knows "
                         f"{sorted(rules)}.")
    for name, value in values.items():
        if not rules[name].accepts(value):
            raise InputError(f"{name} in {where} should be {rules[name].words}, "
                             f"got {value!r}.")
