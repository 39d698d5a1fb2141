"""Every code block of README.md and docs/ that is marked runnable runs (issue 16).

A fenced block runs when its language is ``sh`` (in bash, ``-e -o pipefail``) or ``python``;
the words after the language mark it ``norun`` (shown only: installs, jobs of minutes, files the
reader brings) or ``slow`` (run by ``make test-all`` only).  The blocks of one file run in order in
one temporary folder, the Python blocks in one namespace, as a reader would type them; the folder
has ``grids/`` and ``exported/`` with links to the committed files, so the blocks can read them and
never write into the repository.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DOCS = [ROOT / "README.md", *sorted((ROOT / "docs").rglob("*.md"))]
RUNNABLE = {"sh", "python"}
SHOWN = {"toml", "text", "csv", "json"}
FLAGS = {"norun", "slow"}
_FENCE = re.compile(r"^```(?P<info>[^\n`]*)\n(?P<code>.*?)^```[ \t]*$", re.M | re.S)


@dataclass(frozen=True)
class Block:
    """One fenced code block of a Markdown file."""

    path: Path
    line: int
    language: str
    flags: frozenset
    code: str

    @property
    def where(self) -> str:
        return f"{self.path.relative_to(ROOT)}:{self.line}"


def blocks_of(path: Path) -> list[Block]:
    text = path.read_text(encoding="utf-8")
    out = []
    for m in _FENCE.finditer(text):
        words = m["info"].split()
        language = words[0] if words else ""
        out.append(Block(path, text.count("\n", 0, m.start()) + 1, language, frozenset(words[1:]), m["code"]))
    return out


def _workspace(tmp_path: Path) -> Path:
    for folder in ("grids", "exported"):
        (tmp_path / folder).mkdir()
        for f in (ROOT / folder).iterdir():
            if f.is_file():
                (tmp_path / folder / f.name).symlink_to(f)
    return tmp_path


def _run_file(path: Path, tmp_path: Path, monkeypatch, with_slow: bool) -> int:
    from tovforge.eos import _base as eos_base

    work = _workspace(tmp_path)
    monkeypatch.chdir(work)
    monkeypatch.setattr(sys, "path", list(sys.path))  # a page may add folders (`sys.path.insert(0, "exported")`)
    monkeypatch.syspath_prepend(str(work))
    # what a page's Python leaves behind stays with the page: the families it registers, and the modules it
    # imports from its folder (exported files), which another page may write anew under the same name
    monkeypatch.setattr(eos_base, "_REGISTRY", dict(eos_base._REGISTRY))
    try:
        return _run_blocks(path, work, with_slow)
    finally:
        for name, module in list(sys.modules.items()):
            if str(getattr(module, "__file__", None) or "").startswith(str(work)):
                del sys.modules[name]


def _run_blocks(path: Path, work: Path, with_slow: bool) -> int:
    env = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ.get('PATH', '')}",
           "MPLBACKEND": "Agg"}
    namespace: dict = {"__name__": "__docs__"}
    ran = 0
    for b in blocks_of(path):
        if b.language not in RUNNABLE or "norun" in b.flags or ("slow" in b.flags and not with_slow):
            continue
        if b.language == "sh":
            res = subprocess.run(["bash", "-e", "-o", "pipefail", "-c", b.code], cwd=work, env=env,
                                 capture_output=True, text=True, timeout=600)
            assert res.returncode == 0, f"{b.where}: exit {res.returncode}\n{res.stdout[-2000:]}\n{res.stderr[-2000:]}"
        else:
            exec(compile(b.code, b.where, "exec"), namespace)  # noqa: S102 - the documentation's own code
        ran += 1
    return ran


def _has(path: Path, flag: str) -> bool:
    return any(b.language in RUNNABLE and flag in b.flags and "norun" not in b.flags for b in blocks_of(path))


@pytest.mark.parametrize("path", DOCS, ids=lambda p: str(p.relative_to(ROOT)))
def test_blocks_of_a_file_run(path, tmp_path, monkeypatch):
    _run_file(path, tmp_path, monkeypatch, with_slow=False)


@pytest.mark.slow
@pytest.mark.parametrize("path", [p for p in DOCS if _has(p, "slow")], ids=lambda p: str(p.relative_to(ROOT)))
def test_blocks_of_a_file_run_with_the_slow_ones(path, tmp_path, monkeypatch):
    assert _run_file(path, tmp_path, monkeypatch, with_slow=True) > 0


@pytest.mark.parametrize("path", DOCS, ids=lambda p: str(p.relative_to(ROOT)))
def test_every_block_says_what_it_is(path):
    """A block with a misspelt language or flag would be skipped without a word: refuse it."""
    for b in blocks_of(path):
        assert b.language in RUNNABLE | SHOWN, f"{b.where}: language {b.language!r} not in {RUNNABLE | SHOWN}"
        assert b.flags <= FLAGS, f"{b.where}: flags {sorted(b.flags - FLAGS)} not in {sorted(FLAGS)}"


def test_the_readme_has_runnable_blocks_and_the_parser_finds_them(tmp_path):
    sample = tmp_path / "s.md"
    sample.write_text("text\n```sh\necho a\n```\n\n```python slow\nx = 1\n```\n```toml\na = 1\n```\n")
    found = blocks_of(sample)
    assert [(b.language, sorted(b.flags), b.line) for b in found] == [("sh", [], 2), ("python", ["slow"], 6),
                                                                       ("toml", [], 9)]
    readme = blocks_of(ROOT / "README.md")
    assert any(b.language == "sh" and not b.flags for b in readme)
    assert any(b.language == "python" for b in readme)


_LINK = re.compile(r"\]\((?P<target>[^)\s]+)\)")


@pytest.mark.parametrize("path", DOCS, ids=lambda p: str(p.relative_to(ROOT)))
def test_relative_links_point_to_files_that_exist(path):
    text = _FENCE.sub("", path.read_text(encoding="utf-8"))  # links inside code are code
    for m in _LINK.finditer(text):
        target = m["target"]
        if re.match(r"[a-z]+:", target) or target.startswith("#"):
            continue
        file_part = target.split("#")[0]
        assert (path.parent / file_part).exists(), f"{path.relative_to(ROOT)}: broken link {target}"
