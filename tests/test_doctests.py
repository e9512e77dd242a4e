"""The API examples in the README and in the library's docstrings run as written (doctest)."""

from __future__ import annotations

import doctest
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FLAGS = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE


@pytest.mark.parametrize("module_name", ["pairlens", "pairlens.library"])
def test_docstring_examples(module_name):
    import importlib

    module = importlib.import_module(module_name)
    result = doctest.testmod(module, optionflags=FLAGS, report=True)
    assert result.attempted > 0, f"{module_name} has no examples"
    assert result.failed == 0


def test_readme_examples(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # the examples write a report into the working folder
    result = doctest.testfile(str(ROOT / "README.md"), module_relative=False, optionflags=FLAGS, report=True)
    assert result.attempted > 0, "README.md has no >>> examples"
    assert result.failed == 0
