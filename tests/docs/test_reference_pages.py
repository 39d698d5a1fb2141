"""docs/reference/cli.md and python-api.md are generated from the code (issue 16) and kept up to date."""

from __future__ import annotations

from pathlib import Path

import pytest

from tovforge.cli._reference import API_MODULES, api_reference, cli_reference

REFERENCE = Path(__file__).resolve().parents[2] / "docs" / "reference"


@pytest.mark.parametrize("page, make", [("cli.md", cli_reference), ("python-api.md", api_reference)])
def test_the_generated_page_is_up_to_date(page, make):
    assert (REFERENCE / page).read_text(encoding="utf-8") == make(), (
        f"docs/reference/{page} differs from the code: run `make docs` and commit the page")


def test_the_cli_page_has_every_command_and_its_defaults():
    page = cli_reference()
    for command in ("solve", "grid run", "grid refine", "train", "check", "export", "table samples", "demo"):
        assert f"## `tovforge {command}`" in page, command
    assert "[default: 32]" in page and "<bool>" not in page


def test_the_api_page_has_every_public_name():
    import importlib

    page = api_reference()
    for module_name in API_MODULES:
        for name in importlib.import_module(module_name).__all__:
            assert f"- `{name}" in page, (module_name, name)
    assert "solve_stars(eos, central_pseudo_enthalpy" in page  # the route for uniform density
