"""The pairlens command as DESIGN.md section 3 specifies it."""

import csv
import io
import json
import subprocess
import sys

import numpy as np
import pytest
import scipy.stats as ss

CONTRACT_FIELDS = ["x", "y", "measure", "estimate", "ci_low", "ci_high", "p_value", "q_value", "n", "note"]


def _run(*args, timeout=120):
    return subprocess.run([sys.executable, "-m", "app.cli", *args], capture_output=True, text=True, timeout=timeout)


@pytest.fixture()
def small_csv(tmp_path):
    rng = np.random.default_rng(0)
    n = 80
    a = rng.normal(size=n)
    rows = ["alpha,=HYPERLINK(1),gamma,label"]
    for i in range(n):
        rows.append(f"{a[i]:.6f},{a[i] * 2 + rng.normal():.6f},{rng.normal():.6f},k{i % 3}")
    path = tmp_path / "small.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_pairs_csv_on_stdout_follows_contract(small_csv):
    out = _run("pairs", str(small_csv), "--measures", "pearson,spearman")
    assert out.returncode == 0, out.stderr
    reader = csv.DictReader(io.StringIO(out.stdout))
    assert reader.fieldnames == CONTRACT_FIELDS
    rows = list(reader)
    assert len(rows) == 3 * 2
    # formula-leading names are neutralised for spreadsheets (OWASP CSV injection guidance)
    assert {r["y"] for r in rows if r["x"] == "alpha"} == {"'=HYPERLINK(1)", "gamma"}
    data = np.genfromtxt(small_csv, delimiter=",", skip_header=1, usecols=(0, 2))
    first = [r for r in rows if r["x"] == "alpha" and r["y"] == "gamma" and r["measure"] == "pearson"][0]
    # reference: scipy.stats.pearsonr
    assert float(first["estimate"]) == pytest.approx(ss.pearsonr(data[:, 0], data[:, 1]).statistic, rel=1e-12)
    assert int(first["n"]) == 80


def test_pairs_json_file_output(small_csv, tmp_path):
    target = tmp_path / "out.json"
    out = _run("pairs", str(small_csv), "-o", str(target), "--measures", "kendall", "--adjust", "holm")
    assert out.returncode == 0, out.stderr
    records = json.loads(target.read_text())
    assert [list(r) for r in records] == [CONTRACT_FIELDS] * 3
    assert records[0]["x"] == "alpha" and records[0]["y"] == "=HYPERLINK(1)"  # JSON keeps names verbatim


def test_inspect_json_contract(small_csv):
    out = _run("inspect", str(small_csv), "--x", "alpha", "--y", "gamma", "--json")
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    assert {"x", "y", "n", "measures", "gaussian", "pattern"} <= set(d)
    assert {"estimate", "ci_low", "ci_high", "p_value"} <= set(d["measures"]["pearson"])
    assert {"mean", "cov", "rho", "conditional", "implied", "normality"} <= set(d["gaussian"])
    assert {"label", "reasons"} <= set(d["pattern"])
    text = _run("inspect", str(small_csv), "--x", "alpha", "--y", "gamma")
    assert text.returncode == 0 and "Verdict" in text.stdout


@pytest.mark.parametrize("args", [
    ["pairs", "missing-file.csv"],
    ["pairs", "{csv}", "--measures", "pearson,unknown"],
    ["pairs", "{csv}", "--columns", "alpha,nope"],
    ["pairs", "{csv}", "--confidence", "abc"],
    ["pairs", "{csv}", "-o", "out.xlsx"],
    ["inspect", "{csv}", "--x", "alpha", "--y", "alpha"],
    ["inspect", "{csv}", "--x", "alpha", "--y", "label"],
    ["pairs"],
])
def test_bad_invocations_exit_2_with_one_line(small_csv, args):
    args = [a.replace("{csv}", str(small_csv)) for a in args]
    out = _run(*args)
    assert out.returncode == 2
    lines = [line for line in out.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, out.stderr
    assert "Traceback" not in out.stderr + out.stdout


def test_a_bad_file_is_reported_before_bad_options(small_csv):
    # the file is read before the options are checked: its problem comes first
    both = _run("pairs", "missing-file.csv", "--measures", "pearson,unknown")
    assert both.returncode == 2 and both.stderr.startswith("missing-file.csv: file not found"), both.stderr
    options = _run("pairs", str(small_csv), "--measures", "pearson,unknown")
    assert options.returncode == 2 and "unknown" in options.stderr and "Traceback" not in options.stderr


def test_test_option_pearson_t_equals_scipy_pearsonr(small_csv):
    out = _run("pairs", str(small_csv), "--measures", "pearson,dcor", "--test", "pearson=t")
    assert out.returncode == 0, out.stderr
    rows = list(csv.DictReader(io.StringIO(out.stdout)))
    data = np.genfromtxt(small_csv, delimiter=",", skip_header=1, usecols=(0, 2))
    first = [r for r in rows if r["x"] == "alpha" and r["y"] == "gamma" and r["measure"] == "pearson"][0]
    # reference: scipy.stats.pearsonr (t-test, n-2 df); the CSV keeps enough digits for 1e-6
    assert float(first["p_value"]) == pytest.approx(ss.pearsonr(data[:, 0], data[:, 1]).pvalue, abs=1e-6)


def test_test_option_with_an_unknown_method_exits_2_with_the_allowed_names(small_csv):
    out = _run("pairs", str(small_csv), "--test", "pearson=bootstrap")
    assert out.returncode == 2
    assert "choose from moments, t, permutation" in out.stderr and "Traceback" not in out.stderr


def test_test_option_survives_the_reproduce_arguments():
    from app.engine import AnalysisSettings

    s = AnalysisSettings.from_options(measures="pearson,dcor", tests=["pearson=t", "dcor=permutation"])
    assert s.to_dict()["tests"] == {"pearson": "t", "dcor": "permutation"}
    args = s.cli_arguments()
    assert args[args.index("--test") + 1] == "pearson=t" and "dcor=permutation" in args
    assert AnalysisSettings.from_dict(s.to_dict()) == s
    assert AnalysisSettings.from_options(tests={"pearson": "t"}).permutations_for("dcor") == 0
