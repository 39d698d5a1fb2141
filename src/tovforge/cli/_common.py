"""What every command shares: running with one-line errors, logging, choices, argument parsing.

This module imports only the standard library, typer and :mod:`tovforge.errors`
at import time, so that ``tovforge --help`` starts fast; the library is
imported inside the functions that need it.
"""

from __future__ import annotations

import logging
import math
import os
import shlex
import sys
import traceback
import warnings
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer
from typer.core import TyperGroup

from ..errors import InputError, NeedsPermission

__all__ = [
    "AllowMismatchOpt",
    "OverwriteOpt",
    "WRITE_FLAGS",
    "FamilyArg",
    "Kind",
    "Namespace",
    "OneLineErrors",
    "ParametersArg",
    "aligned",
    "command_line",
    "configure_logging",
    "fail",
    "make_eos",
    "parse_assignments",
    "parse_float_list",
    "parse_number",
    "run",
    "show_progress",
]

#: The EOS family named on the command line.
FamilyArg = Annotated[str, typer.Argument(help="EOS family (see `tovforge families`).")]
#: The EOS parameters as NAME=VALUE words.
ParametersArg = Annotated[
    Optional[list[str]], typer.Argument(help="Parameters as NAME=VALUE (for tables: path=FILE).")
]


#: Replace existing outputs (``overwrite=True`` of the library).
OverwriteOpt = Annotated[bool, typer.Option("--overwrite", help="Replace existing output files or folders "
                                                                 "(refused otherwise).")]
#: Read grids or models whose content does not match their recorded hash (``allow_mismatch=True``).
AllowMismatchOpt = Annotated[bool, typer.Option("--allow-mismatch", help="Forensics only: read grids and models "
                                                                         "whose content no longer matches their "
                                                                         "recorded hash.")]
#: The flags of commands that write and read: the permissions ``run`` names in its messages.
WRITE_FLAGS = ("--overwrite", "--allow-mismatch")


class Kind(str, Enum):
    """Surrogate kinds (``tovforge.surrogate.kinds()``, the table of kinds; a test keeps the two equal).

    Written out rather than read from the table: the table imports the fits (SciPy), and the command line
    must start without them."""

    gp = "gp"
    spline = "spline"
    local = "local"


class Namespace(str, Enum):
    """Array namespaces an exported file is run under (``tovforge.export.NAMESPACES``; kept equal by a test)."""

    numpy = "numpy"
    torch = "torch"
    jax = "jax"


# ---------------------------------------------------------------------------
# errors, warnings and library messages
# ---------------------------------------------------------------------------

# typer >= 0.22 bundles its own copy of click: take the exception classes from the copy typer uses
_click_exceptions = sys.modules[typer.BadParameter.__module__]


#: Set to 1 to see the traceback of an internal error (a bug) instead of its one line.
DEBUG_ENV = "TOVFORGE_DEBUG"
#: Exit codes: bad input (and usage errors) 2, an internal error (a bug in tovforge) 3, Ctrl-C 130.
EXIT_INPUT, EXIT_INTERNAL, EXIT_INTERRUPTED = 2, 3, 130


def _one_line(text: str) -> str:
    return " ".join(str(text).split("\n")).strip()


def _internal_error(exc: BaseException) -> None:
    """One line for an exception nobody expected, exit code 3; the traceback with TOVFORGE_DEBUG=1."""
    if os.environ.get(DEBUG_ENV):
        traceback.print_exception(exc)
    detail = _one_line(str(exc))[:300]
    typer.echo(f"error: internal error ({type(exc).__name__}{': ' + detail if detail else ''}); this is a bug in "
               f"tovforge: please report it with the command line ({DEBUG_ENV}=1 shows the traceback).", err=True)
    sys.exit(EXIT_INTERNAL)


class OneLineErrors(TyperGroup):
    """The top-level command group: every failure is one line on stderr.

    A usage error (bad option, missing argument, a value not among the
    choices) is ``error: ...`` with exit code 2, like every other input error
    (:func:`run`); Ctrl-C ends with exit code 130 (typer's); an exception
    nobody expected is one line naming it with exit code 3 (a bug: the
    traceback with ``TOVFORGE_DEBUG=1``).
    """

    def main(self, *args, standalone_mode: bool = True, **kwargs):
        if not standalone_mode:
            return super().main(*args, standalone_mode=False, **kwargs)
        try:
            rv = super().main(*args, standalone_mode=False, **kwargs)
        except _click_exceptions.UsageError as exc:
            if type(exc).__name__ == "NoArgsIsHelpError":  # no arguments: the help text, as before
                exc.show()
            else:
                where = f" (see '{exc.ctx.command_path} --help')" if exc.ctx is not None else ""
                typer.echo(f"error: {_one_line(exc.format_message())}{where}", err=True)
            sys.exit(exc.exit_code)
        except _click_exceptions.ClickException as exc:
            typer.echo(f"error: {_one_line(exc.format_message())}", err=True)
            sys.exit(exc.exit_code)
        except (typer.Abort, KeyboardInterrupt) as exc:
            cause = exc.__cause__ if isinstance(exc, typer.Abort) else exc
            if cause is not None and not isinstance(cause, KeyboardInterrupt):
                _internal_error(cause)  # click turns an EOFError into Abort
            typer.echo("interrupted", err=True)
            sys.exit(EXIT_INTERRUPTED)
        except SystemExit:
            raise
        except Exception as exc:
            _internal_error(exc)
        # typer returns the code of an explicit typer.Exit; a command that finished returns None
        sys.exit(rv if isinstance(rv, int) else 0)


def fail(message: str) -> None:
    """Print ``error: message`` (one line) on stderr and exit with code 2."""
    typer.echo(f"error: {_one_line(message)}", err=True)
    raise typer.Exit(code=EXIT_INPUT)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    if issubclass(category, RuntimeWarning) and not issubclass(category, UserWarning):
        # floating-point noise of NumPy (overflow, invalid value): the results carry statuses and NaN
        logging.getLogger("tovforge").debug(f"{category.__name__}: {message}")
        return
    typer.echo(f"warning: {_one_line(message)}", err=True)


def run(fn, flags: tuple = ()):
    """Call ``fn()``: input errors become one line and exit code 2, warnings one line each.

    User warnings are shown every time they happen (not once per place in the
    code), each as ``warning: ...`` on stderr without the source line;
    NumPy's floating-point RuntimeWarnings go to the debug log.  Bad input,
    an output that cannot be written, a file that cannot be read, and work
    that does not fit in memory end the command with one line and exit code 2.

    Parameters
    ----------
    fn : callable
    flags : tuple of str
        The command's flags that grant the library's keyword permissions
        (``--overwrite`` for ``overwrite=True``, ``--allow-mismatch`` for
        ``allow_mismatch=True``): a refusal then names the flag.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("always", UserWarning)
        warnings.showwarning = _show_warning
        try:
            return fn()
        except NeedsPermission as exc:
            flag = "--" + exc.keyword.replace("_", "-")
            fail(exc.for_flag(flag if flag in flags else None))
        except InputError as exc:
            fail(str(exc))
        except MemoryError:
            fail("out of memory: the work does not fit in this machine's memory; use smaller sizes (points, nodes, "
                 "rows, batches) or a machine with more memory.")
        except OSError as exc:  # the environment: a full disk, a file removed or locked while in use
            where = f"{exc.filename}: " if exc.filename else ""
            fail(f"{where}{exc.strerror or exc} ({type(exc).__name__}); nothing was replaced: free the resource "
                 "and run the command again.")


class _EchoHandler(logging.Handler):
    """Library messages as clean lines: INFO on stdout, WARNING and above on stderr."""

    def emit(self, record: logging.LogRecord) -> None:
        try:
            msg = record.getMessage()
            if record.levelno >= logging.WARNING:
                typer.echo(f"{record.levelname.lower()}: {msg}", err=True)
            else:
                typer.echo(msg)
        except Exception:  # pragma: no cover - logging must never break a run
            self.handleError(record)


def configure_logging(quiet: bool) -> None:
    """Print the library's ``tovforge.*`` log messages: INFO and above, or WARNING and above when ``quiet``."""
    log = logging.getLogger("tovforge")
    for h in [h for h in log.handlers if isinstance(h, _EchoHandler)]:
        log.removeHandler(h)
    log.addHandler(_EchoHandler())
    log.setLevel(logging.WARNING if quiet else logging.INFO)
    log.propagate = False  # printed once, here, not again by a handler on the root logger


def show_progress(quiet: bool = False) -> bool:
    """Whether a command shows progress: not with its own ``--quiet`` nor with ``tovforge --quiet``."""
    return not quiet and logging.getLogger("tovforge").isEnabledFor(logging.INFO)


def aligned(heads: list[str], rows: list[list[str]]) -> str:
    """Text columns right-aligned under their headings (rows of already formatted cells)."""
    widths = [max([len(h)] + [len(r[j]) for r in rows]) for j, h in enumerate(heads)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(heads, widths))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in rows]
    return "\n".join(lines)


def command_line() -> str:
    """The command line of this run, for provenance."""
    return shlex.join([Path(sys.argv[0]).name, *sys.argv[1:]])


# ---------------------------------------------------------------------------
# argument parsing
# ---------------------------------------------------------------------------


def parse_assignments(items: list[str], what: str = "parameter") -> dict[str, str]:
    """Turn ``["a=1", "b=2"]`` into ``{"a": "1", "b": "2"}`` with clear errors."""
    out: dict[str, str] = {}
    for item in items:
        if "=" not in item:
            raise InputError(f"expected {what} as NAME=VALUE, got {item!r}.")
        name, value = item.split("=", 1)
        name = name.strip()
        if not name:
            raise InputError(f"expected {what} as NAME=VALUE, got {item!r}.")
        if name in out:
            raise InputError(f"{what} {name!r} is given twice.")
        out[name] = value.strip()
    return out


def parse_float_list(text: str, option: str) -> list[float]:
    """Parse ``"1.4,2.0"``; names the option in errors."""
    vals = []
    for tok in text.split(","):
        tok = tok.strip()
        if not tok:
            continue
        try:
            v = float(tok)
        except ValueError:
            raise InputError(f"{option} expects comma-separated numbers, got {tok!r}.") from None
        if not math.isfinite(v):
            raise InputError(f"{option} values must be finite numbers, got {tok!r}.")
        vals.append(v)
    if not vals:
        raise InputError(f"{option} needs at least one number.")
    return vals


def parse_number(text: str, what: str) -> float:
    """One finite number; ``what`` names it in the error."""
    try:
        values = parse_float_list(text, what)
    except InputError:
        values = []
    if len(values) != 1:
        raise InputError(f"{what}: expected one finite number, got {text!r}.")
    return values[0]


def make_eos(family: str, assignments: list[str]):
    """Build an EOS from a family name and NAME=VALUE strings."""
    from .. import eos

    fam = eos.get_family(family)
    values = parse_assignments(assignments)
    if fam.numeric:
        parsed = {}
        for name, raw in values.items():
            try:
                parsed[name] = float(raw)
            except ValueError:
                if name in fam.parameter_names:
                    p = fam.parameter(name)
                    raise InputError(
                        f"The {name!r} parameter of {fam.name} must be a number in {p.range_text()}. Got {raw!r}."
                    ) from None
                parsed[name] = raw  # let the family report the unknown name
        return fam(**parsed)
    return fam(**values)
