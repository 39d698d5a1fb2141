"""The reference pages generated from the code: docs/reference/cli.md and docs/reference/python-api.md.

``python -m tovforge.cli._reference cli|api`` prints one (``make docs`` writes both); a test
regenerates them and compares, so the pages cannot drift from the code.  The CLI page is the
plain ``--help`` of every command at a fixed width, independent of the terminal; the API page
lists the public names (``__all__``) of every stage with their signatures and the first
paragraph of their numpydoc docstrings.
"""

from __future__ import annotations

import inspect
import sys

import typer

__all__ = ["api_reference", "cli_reference"]

#: The modules of the Python API page, in the order of the stages.
API_MODULES = ("tovforge.eos", "tovforge.solve", "tovforge.grid", "tovforge.surrogate", "tovforge.export",
               "tovforge.tables", "tovforge.workflows.demo", "tovforge.quantities", "tovforge.status",
               "tovforge.errors", "tovforge.units")

_WIDTH = 100


def _context(cmd, name: str, parent=None):
    # typer brings its own copy of click: the command's own context class, not click's
    return cmd.context_class(cmd, info_name=name, parent=parent, terminal_width=_WIDTH, max_content_width=_WIDTH)


def _commands(group, ctx):
    """Yield ``(context, command)`` for ``group`` and every command below it, depth first, sorted by name."""
    yield ctx, group
    if hasattr(group, "list_commands"):
        for name in sorted(group.list_commands(ctx)):
            sub = group.get_command(ctx, name)
            if sub is not None and not sub.hidden:
                yield from _commands(sub, _context(sub, name, ctx))


def cli_reference() -> str:
    """The Markdown page: one section per command with its plain ``--help`` text."""
    from . import app

    root = typer.main.get_command(app)
    ctx = _context(root, "tovforge")
    parts = ["# Command-line reference", "",
             "Generated from the code by `make docs` (`python -m tovforge.cli._reference`); a test checks that",
             "it is up to date.  Each section is the command's `--help`.", ""]
    for sub_ctx, cmd in _commands(root, ctx):
        path = sub_ctx.command_path
        parts += [f"## `{path}`", "", "```text", cmd.get_help(sub_ctx).rstrip(), "```", ""]
    return "\n".join(parts)


def _summary(obj) -> str:
    """The first paragraph of a docstring, on one line."""
    doc = inspect.getdoc(obj) or ""
    return " ".join(doc.split("\n\n")[0].split())


def _signature(obj) -> str:
    try:
        return str(inspect.signature(obj))
    except (TypeError, ValueError):
        return ""


def api_reference() -> str:
    """The Markdown page of the public Python API, module by module."""
    import importlib

    parts = ["# Python API reference", "",
             "Generated from the code by `make docs` (`python -m tovforge.cli._reference api`); a test checks",
             "that it is up to date.  Every public name (`__all__`) of each stage, with its signature and the",
             "first paragraph of its docstring; `help(name)` in Python shows the whole numpydoc docstring",
             "(parameters with units and shapes, returns, references).  Recipes: [how-to](../how-to/).", ""]
    for module_name in API_MODULES:
        module = importlib.import_module(module_name)
        parts += [f"## `{module_name}`", "", _summary(module), ""]
        for name in module.__all__:
            obj = getattr(module, name)
            if inspect.isclass(obj) or inspect.isfunction(obj):
                kind = "class" if inspect.isclass(obj) else "function"
                parts.append(f"- `{name}{_signature(obj)}` ({kind}): {_summary(obj)}".rstrip(": "))
            else:
                parts.append(f"- `{name}`: {type(obj).__name__} constant")
        parts.append("")
    return "\n".join(parts)


if __name__ == "__main__":  # pragma: no cover
    which = sys.argv[1] if len(sys.argv) > 1 else "cli"
    sys.stdout.write({"cli": cli_reference, "api": api_reference}[which]())
