"""Layering contract: nothing outside reviewer.tui imports textual, and lower layers never import
higher ones. Each module is imported in a fresh interpreter and sys.modules inspected."""

from __future__ import annotations

import json
import pkgutil
import subprocess
import sys

import pytest

import reviewer

LAYERS = ["movie", "detect", "store", "kinetics"]  # bottom to top


def _modules() -> list[str]:
    names = []
    for info in pkgutil.walk_packages(reviewer.__path__, "reviewer."):
        if info.name.startswith("reviewer.tui") or info.name == "reviewer.__main__":
            continue
        names.append(info.name)
    return sorted(names)


def _imported_by(module: str) -> set[str]:
    code = (f"import importlib, json, sys; importlib.import_module({module!r}); "
            "print(json.dumps(sorted(sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return set(json.loads(out.stdout))


HEADLESS = _modules()


def test_there_are_headless_modules():
    assert "reviewer.cli" in HEADLESS and "reviewer.movie.base" in HEADLESS


@pytest.mark.parametrize("module", HEADLESS)
def test_headless_module_never_imports_textual(module):
    loaded = _imported_by(module)
    assert not any(m == "textual" or m.startswith("textual.") for m in loaded), module
    assert not any(m.startswith("reviewer.tui") for m in loaded), module


@pytest.mark.parametrize("module", [m for m in HEADLESS if m.split(".")[1] in LAYERS])
def test_layers_import_only_downwards(module):
    level = LAYERS.index(module.split(".")[1])
    loaded = _imported_by(module)
    above = {f"reviewer.{name}" for name in LAYERS[level + 1:]} | {"reviewer.commands",
                                                                   "reviewer.cli"}
    bad = sorted(m for m in loaded if any(m == a or m.startswith(a + ".") for a in above))
    assert not bad, f"{module} imports higher layers: {bad}"
