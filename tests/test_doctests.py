"""Docstring examples run: every module of the installed package whose docstrings hold `>>>` examples.

The modules are found in the installed `sensemble` package (not the working directory), so the examples a scientist
reads are run against the code they import. A module added with examples is collected at once.
"""
from __future__ import annotations

import doctest
import importlib
import importlib.util
import pkgutil

import pytest

import sensemble


#: The installed packages: the core, and the stage folders mapped under `sensemble` (pyproject's package-dir;
#: an editable install does not list mapped folders in `sensemble.__path__`, so each is walked by name).
PACKAGES = ("sensemble", "sensemble.extractor", "sensemble.emulator", "sensemble.demo")


def modules_with_examples() -> list[str]:
    names = set()
    infos = [info for package in PACKAGES
             for info in pkgutil.walk_packages(importlib.import_module(package).__path__, prefix=f"{package}.")]
    for info in infos:
        spec = importlib.util.find_spec(info.name)
        origin = spec.origin if spec else None
        if origin and origin.endswith(".py"):
            with open(origin, encoding="utf-8") as handle:
                if ">>>" in handle.read():
                    names.add(info.name)
    return sorted(names)


def test_the_public_api_is_collected():
    found = modules_with_examples()
    assert {"sensemble.api", "sensemble.extractor.gregory", "sensemble.demo.generate"} <= set(found)


@pytest.mark.parametrize("name", modules_with_examples())
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False,
                             report=True)
    assert result.attempted > 0, f"{name}: no example found"
    assert result.failed == 0, f"{name}: {result.failed} of {result.attempted} examples failed (printed above)"
