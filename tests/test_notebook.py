"""examples/pairlens_in_a_notebook.ipynb, executed headless with nbclient and ipykernel.

The notebook reads the bundled (invented) demo, analyses it, shows the maps and one
pair inline and writes a report; the checks below read its outputs.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
import pytest
import scipy.stats as ss

nbformat = pytest.importorskip("nbformat", reason="test extra: pip install -e '.[test]'")
nbclient = pytest.importorskip("nbclient", reason="test extra: pip install -e '.[test]'")

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK = ROOT / "examples" / "pairlens_in_a_notebook.ipynb"
pytestmark = pytest.mark.slow


def _text(cell) -> str:
    parts = []
    for out in cell.get("outputs", []):
        if out.get("output_type") == "stream":
            parts.append(out["text"])
        data = out.get("data", {})
        parts.append(data.get("text/plain", ""))
    return "\n".join(parts)


def _html(cell) -> str:
    return "\n".join(out.get("data", {}).get("text/html", "") for out in cell.get("outputs", []))


@pytest.fixture(scope="module")
def executed(tmp_path_factory):
    work = tmp_path_factory.mktemp("notebook")
    nb = nbformat.read(NOTEBOOK, as_version=4)
    client = nbclient.NotebookClient(nb, timeout=900, kernel_name="python3",
                                     resources={"metadata": {"path": str(work)}})
    client.execute()
    cells = [c for c in nb.cells if c.cell_type == "code"]
    return cells, work


def test_every_cell_ran_without_error(executed):
    cells, _ = executed
    assert [c.execution_count for c in cells] == list(range(1, len(cells) + 1))
    assert not [o for c in cells for o in c.outputs if o.output_type == "error"]


def test_reads_the_demo(executed):
    cells, _ = executed
    demo = pd.read_csv(ROOT / "sample_data" / "vineyard_blocks.csv")
    from pairlens import config

    # numeric columns and text columns with few enough levels to be categorical
    kept = [c for c in demo.columns if pd.api.types.is_numeric_dtype(demo[c])
            or demo[c].nunique() <= config.CATEGORICAL_MAX_LEVELS]
    shape = next(_text(c) for c in cells if "df.shape" in c.source)
    assert f"({len(demo)}, {len(kept)})" in shape
    assert "block_id" in shape  # 40 levels: left out, with its reason, in df.attrs


def test_shows_one_map_per_measure_and_the_top_pairs(executed):
    cells, _ = executed
    page = next(_html(c) for c in cells if c.source.rstrip().endswith("\nresult"))
    for measure in ("pearson", "spearman", "kendall", "dcor"):
        assert page.count(f"data-measure='{measure}'") == 1
    assert "Top pairs" in page and "leaf_wetness_h" in page
    assert "not causation" in page


def test_the_printed_estimate_matches_scipy(executed):
    cells, _ = executed
    printed = next(_text(c) for c in cells if "pearson r(leaf_wetness_h" in c.source)
    value = float(re.search(r"= (-?[0-9.]+)", printed).group(1))
    demo = pd.read_csv(ROOT / "sample_data" / "vineyard_blocks.csv")[["leaf_wetness_h", "disease_score"]].dropna()
    # reference: scipy.stats.pearsonr on the rows where both values are present
    assert value == pytest.approx(ss.pearsonr(demo.iloc[:, 0], demo.iloc[:, 1]).statistic, abs=1e-9)


def test_shows_a_pair_with_its_scatter_and_verdict(executed):
    cells, _ = executed
    page = next(_html(c) for c in cells if c.source.rstrip().endswith("\npair"))
    assert "<svg" in page and "<circle" in page and "Verdict:" in page
    assert "leaf_wetness_h vs disease_score" in page


def test_writes_the_report(executed):
    cells, work = executed
    report = work / "vineyard_report.html"
    assert report.is_file()
    text = report.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html")
    assert "vineyard_blocks.csv" in text and "invented" in text.lower()  # the demo is labelled invented
    printed = next(_text(c) for c in cells if "result.report(" in c.source)
    assert f"{report.stat().st_size} bytes" in printed
