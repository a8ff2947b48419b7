"""Packaging: every sub-package on disk is listed in pyproject.toml (setuptools' explicit list), and the
console script points at `reviewer.cli:main`."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _pyproject() -> dict:
    return tomllib.loads((ROOT / "pyproject.toml").read_text())


def test_every_subpackage_is_listed():
    listed = set(_pyproject()["tool"]["setuptools"]["packages"])
    on_disk = {".".join(p.parent.relative_to(ROOT).parts)
               for p in (ROOT / "reviewer").rglob("__init__.py")}
    on_disk |= {"sample_movies", "reviewer.keymaps"}
    assert on_disk <= listed, f"not listed in pyproject.toml: {sorted(on_disk - listed)}"


def test_console_script_and_main_signature():
    from reviewer.cli import main

    assert _pyproject()["project"]["scripts"]["reviewer"] == "reviewer.cli:main"
    assert main([]) == 2  # no command: help text and exit 2
