"""Exceptions raised for bad user input.

Every error caused by what a user typed or supplied derives from
:class:`InputError` (a :class:`ValueError`), carries a one-line message that
names the offending parameter, its value and the allowed range (or the file
and line), and is turned by the CLI into that one line and exit code 2.
"""

from __future__ import annotations

__all__ = [
    "InputError",
    "InvalidEOSParameter",
    "UnknownFamily",
    "TableFormatError",
    "MissingExtra",
]


class InputError(ValueError):
    """Base class of every error caused by user input."""


class InvalidEOSParameter(InputError):
    """An EOS parameter is missing, unknown, not finite or out of range."""


class UnknownFamily(InputError):
    """The requested EOS family does not exist."""


class TableFormatError(InputError):
    """A tabulated EOS file cannot be read; the message names file and line."""


class MissingExtra(InputError):
    """A feature needs an optional dependency (an extra of the tovforge package) that is not installed."""
