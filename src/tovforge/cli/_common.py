"""What every command shares: running with one-line errors, logging, choices, argument parsing.

This module imports only the standard library, typer and :mod:`tovforge.errors`
at import time, so that ``tovforge --help`` starts fast; the library is
imported inside the functions that need it.
"""

from __future__ import annotations

import logging
import math
import shlex
import sys
import warnings
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer
from typer.core import TyperGroup

from ..errors import InputError

__all__ = [
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


class Kind(str, Enum):
    """Surrogate kinds (``tovforge.surrogate.kinds()``, the table of kinds; a test keeps the two equal).

    Written out rather than read from the table: the table imports the fits (SciPy), and the command line
    must start without them."""

    gp = "gp"
    spline = "spline"


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


class OneLineErrors(TyperGroup):
    """The top-level command group: a usage error (bad option, missing argument, a value not among the
    choices) is one line on stderr, ``error: ...``, with exit code 2, like every other input error."""

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
                typer.echo(f"error: {exc.format_message()}{where}", err=True)
            sys.exit(exc.exit_code)
        except _click_exceptions.ClickException as exc:
            typer.echo(f"error: {exc.format_message()}", err=True)
            sys.exit(exc.exit_code)
        except typer.Abort:
            typer.echo("aborted", err=True)
            sys.exit(1)
        # typer returns the code of an explicit typer.Exit; a command that finished returns None
        sys.exit(rv if isinstance(rv, int) else 0)


def fail(message: str) -> None:
    """Print ``error: message`` on stderr and exit with code 2."""
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(code=2)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    typer.echo(f"warning: {message}", err=True)


def run(fn):
    """Call ``fn()``: input errors become one line and exit code 2, warnings one line each.

    User warnings are shown every time they happen (not once per place in the
    code), each as ``warning: ...`` on stderr without the source line.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("always", UserWarning)
        warnings.showwarning = _show_warning
        try:
            return fn()
        except InputError as exc:
            fail(str(exc))


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
