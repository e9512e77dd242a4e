"""The pairlens command as docs/contracts.md specifies it."""

import csv
import io
import json
import os
import subprocess
import sys

import numpy as np
import pytest
import scipy.stats as ss

CONTRACT_FIELDS = ["x", "y", "measure", "estimate", "ci_low", "ci_high", "p_value", "q_value", "n", "note"]


def _run(*args, timeout=120):
    return subprocess.run([sys.executable, "-m", "pairlens.cli", *args], capture_output=True, text=True, timeout=timeout)


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
    # three numeric pairs x 2 measures; the text column "label" (3 levels) is categorical (issue 18):
    # its three pairs get the categorical measures eta and kruskal, added to the run, never pearson
    assert len([r for r in rows if r["measure"] in ("pearson", "spearman")]) == 3 * 2
    assert sorted(r["measure"] for r in rows if "label" in (r["x"], r["y"])) == sorted(["eta", "kruskal"] * 3)
    rows = [r for r in rows if "label" not in (r["x"], r["y"])]
    # formula-leading names are neutralised for spreadsheets (OWASP CSV injection guidance)
    assert {r["y"] for r in rows if r["x"] == "alpha"} == {"'=HYPERLINK(1)", "gamma"}
    data = np.genfromtxt(small_csv, delimiter=",", skip_header=1, usecols=(0, 2))
    first = [r for r in rows if r["x"] == "alpha" and r["y"] == "gamma" and r["measure"] == "pearson"][0]
    # reference: scipy.stats.pearsonr
    assert float(first["estimate"]) == pytest.approx(ss.pearsonr(data[:, 0], data[:, 1]).statistic, rel=1e-12)
    assert int(first["n"]) == 80


def test_pairs_json_file_output(small_csv, tmp_path):
    target = tmp_path / "out.json"
    out = _run("pairs", str(small_csv), "-o", str(target), "--measures", "kendall", "--adjust", "holm",
               "--columns", "alpha,=HYPERLINK(1),gamma")   # the numeric columns (label is categorical)
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
    ["inspect", "{csv}", "--x", "alpha", "--y", "label", "--numeric", "label"],   # text cannot be numeric
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


def test_every_option_of_every_command_has_help_and_shows_its_default():
    import argparse

    from pairlens import config
    from pairlens.cli import build_parser

    parser = build_parser()
    subparsers = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    assert set(subparsers.choices) == {"serve", "pairs", "inspect", "report"}
    for name, sub in subparsers.choices.items():
        text = sub.format_help()
        for action in sub._actions:
            assert action.help, f"pairlens {name}: {action.option_strings or action.dest} has no help text"
        # each non-empty default appears in the help text the user sees
        for action in sub._actions:
            if action.option_strings and action.default not in (None, False, [], argparse.SUPPRESS):
                assert f"(default: {action.default})" in " ".join(text.split()), (name, action.dest)
    pairs_help = " ".join(subparsers.choices["pairs"].format_help().split())
    assert f"(default: {config.DEFAULT_SEED})" in pairs_help and "(default: bh)" in pairs_help


def test_version_and_module_entry_point():
    from pairlens import __version__

    out = subprocess.run([sys.executable, "-m", "pairlens", "--version"], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0 and out.stdout.strip() == f"pairlens {__version__}"


def test_inspect_text_explains_mutual_information(small_csv):
    out = _run("inspect", str(small_csv), "--x", "alpha", "--y", "gamma")
    assert out.returncode == 0, out.stderr
    assert " mi " not in out.stdout and "mutual information in nats" in out.stdout


def test_serve_takes_its_port_from_pairlens_port(tmp_path):
    # a bad PAIRLENS_PORT is a usage error on one line (exit 2), found before anything starts
    env = dict(os.environ, PAIRLENS_PORT="eighty")
    out = subprocess.run([sys.executable, "-m", "pairlens.cli", "serve", "--data-dir", str(tmp_path)],
                         capture_output=True, text=True, timeout=120, env=env)
    assert out.returncode == 2
    assert out.stderr.strip().splitlines() == [
        "pairlens serve: PAIRLENS_PORT must be a port number from 1 to 65535, not 'eighty'"]


def test_default_port_reads_the_environment(monkeypatch):
    from pairlens import config

    monkeypatch.delenv("PAIRLENS_PORT", raising=False)
    assert config.default_port() == config.DEFAULT_PORT == 8000
    monkeypatch.setenv("PAIRLENS_PORT", "18123")
    assert config.default_port() == 18123
    for bad in ("0", "65536", "-1", "80.5"):
        monkeypatch.setenv("PAIRLENS_PORT", bad)
        with pytest.raises(ValueError, match="PAIRLENS_PORT"):
            config.default_port()


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
    from pairlens.engine import AnalysisSettings

    s = AnalysisSettings.from_options(measures="pearson,dcor", tests=["pearson=t", "dcor=permutation"])
    assert s.to_dict()["tests"] == {"pearson": "t", "dcor": "permutation"}
    args = s.cli_arguments()
    assert args[args.index("--test") + 1] == "pearson=t" and "dcor=permutation" in args
    assert AnalysisSettings.from_dict(s.to_dict()) == s
    assert AnalysisSettings.from_options(tests={"pearson": "t"}).permutations_for("dcor") == 0
