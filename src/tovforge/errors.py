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
    "NeedsPermission",
    "OutputExists",
    "ContentMismatch",
    "OutputBusy",
    "ResourceLimit",
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


class NeedsPermission(InputError):
    """Refused unless the caller says so explicitly (a keyword argument of the library, a flag of the CLI).

    The message names the library's keyword (``overwrite=True``); the command
    line shows :meth:`for_flag` instead, with its own flag.

    Parameters
    ----------
    message : str
        What is wrong (one sentence).
    advice : str
        What to do, with ``{how}`` where the keyword or flag goes.
    keyword : str
        The library's keyword argument that grants the permission (``"overwrite"``).
    """

    def __init__(self, message: str, advice: str, keyword: str):
        self.message, self.advice, self.keyword = message, advice, keyword
        super().__init__(f"{message} {advice.format(how=f'{keyword}=True')}")

    def for_flag(self, flag: str | None) -> str:
        """The message with the command-line ``flag`` in place of the keyword (no advice without a flag)."""
        return self.message if flag is None else f"{self.message} {self.advice.format(how=flag)}"


class OutputExists(NeedsPermission):
    """An output file or folder exists and would be replaced (the permission is ``overwrite``)."""

    def __init__(self, path, what: str):
        self.path = path
        super().__init__(f"{path}: the {what} exists already.", "Choose another name, or pass {how} to replace it.",
                         "overwrite")


class ContentMismatch(NeedsPermission):
    """A grid or model whose content no longer matches the hash recorded in it (permission ``allow_mismatch``)."""

    def __init__(self, message: str):
        super().__init__(message, "Do not use it (rebuild it); for forensics only, pass {how} to read it anyway.",
                         "allow_mismatch")


class OutputBusy(InputError):
    """Another running process holds the lock on an output (a grid being written)."""


class ResourceLimit(InputError):
    """A size (points, nodes, rows, workers) asks for more memory or disk than the stated budget."""

