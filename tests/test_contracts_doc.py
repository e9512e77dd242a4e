"""docs/contracts.md lists every option of every command, and the README points to it."""

import argparse
from pathlib import Path

from pairlens.cli import build_parser

ROOT = Path(__file__).resolve().parents[1]


def test_every_option_is_documented():
    text = (ROOT / "docs" / "contracts.md").read_text(encoding="utf-8")
    parser = build_parser()
    subparsers = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    missing = []
    for name, sub in subparsers.choices.items():
        assert f"pairlens {name}" in text
        for action in sub._actions:
            for option in action.option_strings:
                if option not in ("-h", "--help") and f"`{option}`" not in text:
                    missing.append(f"{name} {option}")
    assert not missing, missing


def test_readme_points_to_the_repository_document():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "DESIGN.md" not in readme
    assert "docs/contracts.md" in readme
