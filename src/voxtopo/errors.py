"""Errors that voxtopo raises for bad input.

Every message is one sentence that says what was wrong, where, and what would work.
The CLI prints it without a traceback and exits with code 2.
"""


class VoxtopoError(Exception):
    """Base class for problems with the user's input or request."""


class InputError(VoxtopoError, ValueError):
    """The input (file, array, option) cannot be used as given."""


class TooBigError(VoxtopoError, MemoryError):
    """The run would need more memory than this machine has available."""


class Cancelled(VoxtopoError):
    """Raised by a progress callback to stop a long computation cleanly."""
