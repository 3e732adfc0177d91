"""The one exception family for problems a user can fix (bad files, bad options, bad data).

The CLI turns any :class:`IdentError` into a single line on stderr and exit status 2.
Numerical trouble that the user must know about (rank deficiency, solver failure) is also an
:class:`IdentError` subclass so it is never silently swallowed.
"""

from __future__ import annotations


class IdentError(Exception):
    """A user-facing problem: the message names the offending file, element, column or option."""


class ModelError(IdentError):
    """The robot description is malformed or unsupported."""


class DataError(IdentError):
    """A log or data array is malformed (NaN, wrong shape, unknown joint, ...)."""


class NumericalError(IdentError):
    """A computation could not be carried out reliably (rank deficiency, solver failure)."""


def first_line(exc: BaseException) -> str:
    """The first line of an exception's message (its type name when empty), for one-line errors."""
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__
