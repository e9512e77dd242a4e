"""Columns of a few whole-number codes are flagged, still analysed as numbers (issue: class codes).

The thresholds (at most config.CLASS_CODE_MAX_LEVELS codes; two codes at any size, more codes from
config.CLASS_CODE_MIN_ROWS rows) are our own choice; the checks below follow from them.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np

from pairlens import config
from pairlens.core import linear, rank
from pairlens.core.verdict import class_code_levels, classify_pair
from pairlens.ingest import load_bytes


def test_levels_of_codes_and_of_measurements():
    rng = np.random.default_rng(5)
    assert class_code_levels(rng.integers(0, 2, 12).astype(float)) == 2
    assert class_code_levels(rng.integers(1, 4, config.CLASS_CODE_MIN_ROWS).astype(float)) == 3
    # too few rows to call three codes a class code
    assert class_code_levels(np.array([1.0, 2.0, 3.0, 1.0, 2.0])) == 0
    # more levels than a code, or not whole numbers: measurements
    assert class_code_levels(rng.integers(1, 20, 500).astype(float)) == 0
    assert class_code_levels(rng.normal(size=500)) == 0
    assert class_code_levels(np.array([0.0, 0.5, 0.0, 0.5])) == 0
    # missing values are ignored
    assert class_code_levels(np.array([0.0, np.nan, 1.0, 1.0])) == 2


def _codes_csv(n: int = 120) -> bytes:
    rng = np.random.default_rng(3)
    g = rng.integers(1, 4, n)
    x = rng.normal(size=n) + g
    lines = ["treatment,yield_kg"] + [f"{g[i]},{x[i]:.4f}" for i in range(n)]
    return ("\n".join(lines) + "\n").encode()


def test_ingest_notes_the_code_and_keeps_it_numeric():
    table = load_bytes(_codes_csv(), "codes.csv")
    assert table.columns == ["treatment", "yield_kg"]
    assert any("'treatment' looks like a class code (3 distinct whole numbers)" in n for n in table.notes)
    assert not any("yield_kg" in n for n in table.notes)


def test_verdict_says_the_gaussian_picture_does_not_apply():
    table = load_bytes(_codes_csv(), "codes.csv")
    x, y = table.data[:, 0], table.data[:, 1]
    res = {"pearson": linear.pearson(x, y), "spearman": rank.spearman(x, y)}
    pattern = classify_pair(x, y, res, {m: r.p_value for m, r in res.items()})
    text = " ".join(pattern.reasons)
    assert "Column x (3 distinct whole numbers) looks like a class code" in text
    assert "Gaussian picture" in text and "does not apply" in text
    assert "the Gaussian picture fits" not in text


def test_cli_says_the_note_on_stderr(tmp_path):
    path = tmp_path / "codes.csv"
    path.write_bytes(_codes_csv())
    out = subprocess.run([sys.executable, "-m", "pairlens.cli", "pairs", str(path), "--measures", "pearson"],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert "pairlens: note: column 'treatment' looks like a class code" in out.stderr
    assert out.stdout.startswith("x,y,measure,")
