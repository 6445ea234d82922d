"""The documentation runs: every ```python block of docs/*.md is executed (each file's blocks in order, in one
namespace), and docs/cli.md is what the command line's parser generates (docs/make_cli_reference.py).

The blocks run in a scratch directory that holds ``examples`` and ``docs`` (links to the repository's) and
``DIR`` (a link to the output directory the tutorial wrote), so the docs' relative paths work as they do from the
repository root. Data: the invented demo universe in examples/demo/ (a demo, not a reference).
"""

from __future__ import annotations

import importlib.util
import os
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DOCS = ROOT / "docs"
FENCE = re.compile(r"^```python[ \t]*\n(.*?)^```[ \t]*$", re.S | re.M)


def python_blocks(path: Path) -> list[str]:
    return FENCE.findall(path.read_text(encoding="utf-8"))


def run_blocks(path: Path, cwd: Path) -> dict:
    """Execute the file's python blocks in order in one namespace, from ``cwd``; a failure names the block."""
    ns: dict = {"__name__": f"docs_{path.stem}"}
    old = Path.cwd()
    os.chdir(cwd)
    try:
        for k, code in enumerate(python_blocks(path), 1):
            try:
                exec(compile(code, f"{path.name} (python block {k})", "exec"), ns)
            except Exception as exc:
                raise AssertionError(f"{path.name}, python block {k} failed: {exc!r}\n{code}") from exc
    finally:
        os.chdir(old)
    return ns


@pytest.fixture(scope="module")
def scratch(tmp_path_factory):
    d = tmp_path_factory.mktemp("docs")
    (d / "examples").symlink_to(ROOT / "examples", target_is_directory=True)
    (d / "docs").symlink_to(DOCS, target_is_directory=True)  # committed results the docs quote (docs/calibration/)
    return d


@pytest.fixture(scope="module")
def tutorial(scratch):
    ns = run_blocks(DOCS / "tutorial.md", scratch)
    (scratch / "DIR").symlink_to(scratch / "demo-out", target_is_directory=True)
    return ns


def test_tutorial_runs_and_writes_the_report(tutorial, scratch):
    assert (scratch / "demo-out" / "report.html").is_file()
    assert len(tutorial["distances"]) == 20


@pytest.mark.parametrize("name", sorted(p.name for p in DOCS.glob("*.md")
                                        if p.name != "tutorial.md" and python_blocks(p)))
def test_python_blocks_of_the_docs_run(name, tutorial, scratch):
    run_blocks(DOCS / name, scratch)


def test_cli_reference_is_what_the_parser_generates():
    spec = importlib.util.spec_from_file_location("make_cli_reference", DOCS / "make_cli_reference.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    committed = (DOCS / "cli.md").read_text(encoding="utf-8")
    assert committed == mod.cli_reference(), "docs/cli.md is out of date: run python docs/make_cli_reference.py"
    from ladder.cli import _parser

    sub = next(a for a in _parser()._actions if a.__class__.__name__ == "_SubParsersAction")
    for command in sub.choices:  # every command and option of the parser is in the reference
        assert f"## ladder {command}" in committed
        for action in sub.choices[command]._actions:
            for flag in action.option_strings:
                if flag not in ("-h", "--help"):
                    assert f"`{flag}" in committed or f", {flag}" in committed, (command, flag)
