"""`tovforge bench` runs an explicit list of sections; each resolves to a function (no import is swallowed)."""

from __future__ import annotations

import inspect

import pytest

from tovforge._bench import SECTIONS, run_benchmarks, section
from tovforge.errors import InputError


@pytest.mark.parametrize("name", list(SECTIONS))
def test_every_section_imports_and_takes_quick_and_echo(name):
    fn = section(name)
    assert list(inspect.signature(fn).parameters)[:2] == ["quick", "echo"]


def test_an_unknown_section_is_refused_before_anything_runs():
    lines = []
    with pytest.raises(InputError, match="unknown benchmark section 'solvers'; choose from solver, grid"):
        run_benchmarks(quick=True, only=["solvers"], echo=lines.append)
    assert lines == []


def test_a_broken_section_module_is_an_error_not_a_skip(monkeypatch):
    monkeypatch.setitem(SECTIONS, "broken", "tovforge.no_such_module:bench")
    with pytest.raises(ModuleNotFoundError):
        run_benchmarks(quick=True, only=["broken"], echo=lambda _: None)
