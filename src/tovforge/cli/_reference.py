"""The command-line reference, docs/reference/cli.md, generated from the commands themselves.

``python -m tovforge.cli._reference > docs/reference/cli.md`` (``make docs``) writes it; a test
regenerates it and compares, so the page cannot drift from the code.  The text is the plain
``--help`` of every command at a fixed width, independent of the terminal.
"""

from __future__ import annotations

import sys

import typer

__all__ = ["cli_reference"]

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


if __name__ == "__main__":  # pragma: no cover
    sys.stdout.write(cli_reference())
