"""docs/reference/cli.md is the commands' own --help (issue 16: a CLI reference generated from the code)."""

from __future__ import annotations

from pathlib import Path

from tovforge.cli._reference import cli_reference

PAGE = Path(__file__).resolve().parents[2] / "docs" / "reference" / "cli.md"


def test_the_cli_reference_is_up_to_date():
    assert PAGE.read_text(encoding="utf-8") == cli_reference(), (
        "docs/reference/cli.md differs from the commands' --help: run `make docs` and commit the page")


def test_the_reference_has_every_command_and_its_defaults():
    page = cli_reference()
    for command in ("solve", "grid run", "grid refine", "train", "check", "export", "table samples", "demo"):
        assert f"## `tovforge {command}`" in page, command
    assert "[default: 32]" in page and "<bool>" not in page
