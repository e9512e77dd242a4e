"""Column kinds (issue 18): detection with a reason, --categorical / --numeric, measures per pair kind.

The thresholds (config.CATEGORICAL_MAX_LEVELS, the class-code rule of
pairlens.core.verdict.class_code_levels) are our own choice; the checks follow from them.
Values are checked against scipy.stats where a number is asserted.
"""

import subprocess
import sys

import numpy as np
import pytest
import scipy.stats

from pairlens import config
from pairlens.engine import run_analysis
from pairlens.errors import SettingsError
from pairlens.ingest import load_bytes
from pairlens.kinds import detect, levels_of, resolve, settle
from pairlens.plan import AnalysisSettings


def _mixed_csv(n=150, levels=("north", "south", "east")) -> bytes:
    rng = np.random.default_rng(4)
    site = rng.integers(0, len(levels), n)
    dose = rng.integers(1, 4, n)                 # a class code: 3 whole numbers over 150 rows
    growth = rng.normal(size=n) + 0.8 * site
    height = growth + rng.normal(size=n)
    lines = ["site,dose,growth,height,many"] + [
        f"{levels[site[i]]},{dose[i]},{growth[i]:.4f},{height[i]:.4f},L{i % 30}" for i in range(n)]
    return ("\n".join(lines) + "\n").encode()


@pytest.fixture(scope="module")
def table():
    return load_bytes(_mixed_csv(), "mixed.csv")


def test_detection_with_reasons(table):
    kinds = detect(table)
    assert (kinds["site"].kind, kinds["site"].reason) == ("categorical", "text with 3 levels")
    assert kinds["dose"].kind == "categorical" and "class code" in kinds["dose"].reason
    assert kinds["growth"].kind == "numeric" and kinds["height"].kind == "numeric"
    # 30 levels: more than config.CATEGORICAL_MAX_LEVELS (20), left out with the fix
    assert "many" not in kinds
    assert "more than 20 levels" in dict(table.excluded)["many"]
    assert table.levels("site") == ("east", "north", "south")


def test_level_limit_is_a_setting(monkeypatch):
    monkeypatch.setattr(config, "CATEGORICAL_MAX_LEVELS", 40)
    t = load_bytes(_mixed_csv(), "mixed.csv")
    assert "many" in t.columns and detect(t)["many"].reason == "text with 30 levels"
    monkeypatch.setattr(config, "CATEGORICAL_MAX_LEVELS", 2)
    t = load_bytes(_mixed_csv(), "mixed.csv")
    assert "site" not in t.columns
    assert "PAIRLENS_CATEGORICAL_MAX_LEVELS" in dict(t.excluded)["site"]


def test_overrides(table):
    kinds = resolve(table, categorical=(), numeric=("dose",))
    assert kinds["dose"].kind == "numeric" and kinds["dose"].overridden
    with pytest.raises(SettingsError, match="holds text"):
        resolve(table, numeric=("site",))
    with pytest.raises(SettingsError, match="distinct values"):
        resolve(table, categorical=("growth",))            # 150 distinct values
    with pytest.raises(SettingsError, match="unknown column"):
        resolve(table, categorical=("nope",))
    with pytest.raises(SettingsError, match="both categorical and numeric"):
        AnalysisSettings.from_options(categorical="dose", numeric="dose")


def test_settle_is_idempotent_and_reproducible(table):
    s = settle(table, AnalysisSettings.from_options(numeric="dose"))
    assert s.categorical == ("site",) and s.numeric == ("dose",)
    assert settle(table, s) == s
    args = s.cli_arguments()
    assert args[args.index("--categorical") + 1] == "site" and args[args.index("--numeric") + 1] == "dose"
    assert AnalysisSettings.from_dict(s.to_dict()) == s
    assert levels_of(table, s)["site"] == ["east", "north", "south"]


def test_each_pair_gets_the_measures_of_its_kinds(table):
    settings = settle(table, AnalysisSettings.from_options(columns="site,dose,growth,height"))
    pt = run_analysis(table.data, table.columns, settings, workers=1, verdicts=True)
    by_pair = {}
    for r in pt.rows:
        by_pair.setdefault(frozenset((r.x, r.y)), set()).add(r.measure)
    assert by_pair[frozenset(("growth", "height"))] == {"pearson", "spearman", "kendall", "dcor"}
    assert by_pair[frozenset(("site", "growth"))] == {"eta", "kruskal", "dcor"}
    assert by_pair[frozenset(("site", "dose"))] == {"cramer_v", "dcor"}
    # the numeric measures never run on a categorical column
    cat = {"site", "dose"}
    assert not any(r.measure in ("pearson", "spearman", "kendall", "xi") and {r.x, r.y} & cat for r in pt.rows)
    # eta's p-value is the one-way ANOVA of growth by site (scipy.stats.f_oneway)
    j, g = table.columns.index("growth"), table.columns.index("site")
    groups = [table.data[table.data[:, g] == k, j] for k in range(3)]
    row = next(r for r in pt.rows if r.measure == "eta" and {r.x, r.y} == {"site", "growth"})
    assert row.p_value == pytest.approx(scipy.stats.f_oneway(*groups).pvalue, rel=1e-9)
    assert pt.verdicts[("site", "growth")] == "groups differ"
    assert pt.verdicts[("site", "dose")] in ("no evidence of dependence", "levels associated")


def test_cli_pairs_and_inspect_on_a_mixed_table(tmp_path):
    path = tmp_path / "mixed.csv"
    path.write_bytes(_mixed_csv())
    out = subprocess.run([sys.executable, "-m", "pairlens.cli", "pairs", str(path), "--columns", "site,dose,growth",
                          "--numeric", "dose", "--workers", "1"], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    rows = [line.split(",")[:3] for line in out.stdout.splitlines()[1:]]
    assert ["site", "dose", "eta"] in rows and ["dose", "growth", "pearson"] in rows
    bad = subprocess.run([sys.executable, "-m", "pairlens.cli", "pairs", str(path), "--numeric", "site"],
                         capture_output=True, text=True, timeout=300)
    assert bad.returncode == 2 and "holds text" in bad.stderr and "Traceback" not in bad.stderr
    shown = subprocess.run([sys.executable, "-m", "pairlens.cli", "inspect", str(path), "--x", "site", "--y", "growth"],
                           capture_output=True, text=True, timeout=300)
    assert shown.returncode == 0, shown.stderr
    assert "growth by site: eta" in shown.stdout and "Verdict: groups differ" in shown.stdout
    table = subprocess.run([sys.executable, "-m", "pairlens.cli", "inspect", str(path), "--x", "site", "--y", "dose"],
                           capture_output=True, text=True, timeout=300)
    assert table.returncode == 0 and "adjusted standardised residuals" in table.stdout


def test_a_named_column_the_reader_left_out_fails_with_its_reason(tmp_path):
    # A date column and a 30-level text column are read but left out (app/ingest.py); naming one
    # in an option says why, not "unknown column" (the column is in the user's file).
    lines = _mixed_csv().decode().splitlines()
    dated = [lines[0] + ",when"] + [f"{line},2026-01-{1 + i % 28:02d}" for i, line in enumerate(lines[1:])]
    path = tmp_path / "dated.csv"
    path.write_text("\n".join(dated) + "\n")
    t = load_bytes(path.read_bytes(), "dated.csv")
    assert "when" not in t.columns and "many" not in t.columns
    with pytest.raises(SettingsError, match=r"'when' \(datetime column\) was left out .* use --ordered when"):
        settle(t, AnalysisSettings(columns=("when", "growth", "height")))
    with pytest.raises(SettingsError, match=r"'many' \(.*more than 20 levels.*\) was left out"):
        settle(t, AnalysisSettings(given=("many",)))
    with pytest.raises(SettingsError, match=r"'when' .*, 'many' .* were left out"):
        settle(t, AnalysisSettings(groups=(("g", ("when", "many")),)))
    with pytest.raises(SettingsError, match="unknown column"):             # not in the file at all
        run_analysis(t.data, t.columns, settle(t, AnalysisSettings(columns=("nowhere", "growth"))), workers=1)
    out = subprocess.run([sys.executable, "-m", "pairlens.cli", "pairs", str(path), "--columns", "when,growth"],
                         capture_output=True, text=True, timeout=300)
    assert out.returncode == 2 and "Traceback" not in out.stderr
    assert out.stderr.strip().count("\n") == 0 and "--ordered when" in out.stderr
