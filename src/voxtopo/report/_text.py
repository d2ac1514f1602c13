"""Text a person typed (units, scan names, groups), made safe for matplotlib labels."""

from __future__ import annotations


def literal(text) -> str:
    r"""``text`` as matplotlib should show it, character for character.

    A user's words (a unit such as ``$\mu$m``) must not be read as mathtext: with two
    dollar signs matplotlib would parse them, and fail on a command it does not know.
    An escaped dollar sign is drawn as a dollar sign.

    Parameters
    ----------
    text : object
        What the user wrote; anything ``str`` accepts.

    Returns
    -------
    str
        The text with every ``$`` escaped.

    Examples
    --------
    >>> print(literal("$x$ um"))
    \$x\$ um
    """
    return str(text).replace("$", r"\$")
