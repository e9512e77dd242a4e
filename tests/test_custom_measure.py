"""A measure defined in this file alone reaches every face with no other change.

The measure is Blomqvist's beta (the medial or quadrant correlation): the mean of
sign(x - median x) * sign(y - median y). This file holds its kernel and one
registry call; it is also the plugin the command line, the server and the
server's analysis children import through ``PAIRLENS_PLUGINS``. Checked: the
``pairlens pairs`` table, the API's pair table, the analysis page's maps, the
pair view and the report all carry it, with the same numbers.
"""

from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import httpx
import numpy as np
import pytest
from scipy.stats import norm

from live_server import LiveServer, wait_for_analysis
from pairlens import cli
from pairlens.core.registry import MEASURES, Measure, register, unregister
from pairlens.core.results import TestResult
from pairlens.library import demo_path

PLUGIN = Path(__file__).stem
TESTS = str(Path(__file__).resolve().parent)
NAME = "blomqvist"


def _blomqvist(x, y, ctx) -> TestResult:
    x, y = np.asarray(x, float), np.asarray(y, float)
    beta = float(np.mean(np.sign(x - np.median(x)) * np.sign(y - np.median(y))))
    # sqrt(n) beta is asymptotically standard normal under independence (Blomqvist 1950; from memory)
    return TestResult(beta, float(2.0 * norm.sf(abs(beta) * math.sqrt(x.size))), "normal approximation")


BLOMQVIST = Measure(
    name=NAME, label="Blomqvist β", family="rank", symmetric=True, signed=True, lower=-1.0, upper=1.0,
    multivariate=False, reflection="flips sign", default_test="normal approximation", tests=("normal",),
    interval="", formula="beta = mean of sign(x - median x) sign(y - median y)",
    reference="Blomqvist, N. (1950) Ann. Math. Statist. 21:593-600, doi:10.1214/aoms/1177729754",
    compute=_blomqvist)

if PLUGIN in os.environ.get("PAIRLENS_PLUGINS", "").split(","):
    register(BLOMQVIST, replace=True)   # imported as a plugin by a command or a server


@pytest.fixture(scope="module")
def registered():
    entry = register(BLOMQVIST, replace=True)
    yield entry
    unregister(NAME)


@pytest.fixture()
def plugin_env(monkeypatch):
    monkeypatch.setenv("PAIRLENS_PLUGINS", PLUGIN)
    monkeypatch.setenv("PYTHONPATH", TESTS + os.pathsep + os.environ.get("PYTHONPATH", ""))


def _pairs_csv(path: Path) -> dict[tuple[str, str], float]:
    import pandas as pd

    table = pd.read_csv(path)
    rows = table[table["measure"] == NAME]
    return {(x, y): float(e) for x, y, e in zip(rows["x"], rows["y"], rows["estimate"])}


def _small_table() -> bytes:
    rng = np.random.default_rng(7)
    z = rng.normal(size=(200, 6))
    z[:, 1] += z[:, 0]
    z[:, 3] = np.exp(z[:, 2]) + 0.2 * z[:, 3]
    names = ["canopy_temp_c", "sugar_brix", "leaf_wetness_h", "disease_score", "acidity_g_l", "noise"]
    return ("\n".join([",".join(names)] + [",".join(f"{v:.5f}" for v in row) for row in z]) + "\n").encode()


def test_the_kernel_meets_the_bivariate_normal_closed_form(registered):
    # Under a bivariate normal with correlation rho, P(X > 0, Y > 0) = 1/4 + asin(rho)/(2 pi)
    # (Sheppard 1899), so beta = 4 P(X > 0, Y > 0) - 1 = (2/pi) asin(rho).
    rng = np.random.default_rng(1950)
    rho, n = 0.6, 40_000
    x = rng.normal(size=n)
    y = rho * x + math.sqrt(1 - rho ** 2) * rng.normal(size=n)
    res = MEASURES[NAME].compute(x, y, None)
    expected = 2.0 / math.pi * math.asin(rho)
    assert abs(res.estimate - expected) < 4.0 * math.sqrt((1 - expected ** 2) / n)
    assert res.n == n   # filled in by the registry for a kernel that leaves it out


def test_pairs_command_in_process_and_as_a_fresh_command(registered, plugin_env, tmp_path):
    data, inside, fresh = tmp_path / "six.csv", tmp_path / "inside.csv", tmp_path / "fresh.csv"
    data.write_bytes(_small_table())
    assert cli.main(["pairs", str(data), "--measures", f"pearson,{NAME}", "-o", str(inside)]) == 0
    proc = subprocess.run([sys.executable, "-m", "pairlens", "pairs", str(data), "--measures",
                           f"pearson,{NAME}", "-o", str(fresh)], capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    a, b = _pairs_csv(inside), _pairs_csv(fresh)
    assert len(a) == 15 and a == b
    # one pair against the kernel on the pair's rows
    z = np.loadtxt(data, delimiter=",", skiprows=1)
    assert a[("canopy_temp_c", "sugar_brix")] == pytest.approx(_blomqvist(z[:, 0], z[:, 1], None).estimate,
                                                               abs=1e-15)


def test_a_misspelt_plugin_stops_the_command_with_one_line(monkeypatch, tmp_path):
    monkeypatch.setenv("PAIRLENS_PLUGINS", "no_such_plugin_module")
    proc = subprocess.run([sys.executable, "-m", "pairlens", "pairs", str(demo_path())],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 2
    assert "no_such_plugin_module" in proc.stderr and len(proc.stderr.strip().splitlines()) == 1


def test_server_api_maps_pair_view_and_report_carry_the_measure(registered, plugin_env, tmp_path):
    srv = LiveServer(tmp_path / "data")
    try:
        with httpx.Client(base_url=srv.base, timeout=120) as c:
            ds = c.post("/api/datasets", files={"file": ("six.csv", _small_table(), "text/csv")}).json()
            aid = c.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["pearson", NAME]}).json()["id"]
            assert wait_for_analysis(c, aid, timeout=600, poll=0.3)["status"] == "done"

            # the API's pair table
            rows = [r for r in c.get(f"/api/analyses/{aid}/pairs").json() if r["measure"] == NAME]
            assert len(rows) == 15
            api = {(r["x"], r["y"]): r["estimate"] for r in rows}
            assert all(0.0 <= r["q_value"] <= 1.0 for r in rows)
            grid = c.get(f"/api/analyses/{aid}/pair-table").json()
            assert {"key": NAME, "measure": NAME, "label": "Blomqvist β", "direction": ""} in grid["columns"]

            # the analysis page's maps: one map of this measure, its values those of the pair table
            page = c.get(f"/analyses/{aid}").text
            maps = json.loads(re.search(r'id="heatmap-data">(.*?)</script>', page, re.S).group(1))
            ours = next(m for m in maps["maps"] if m["measure"] == NAME)
            assert ours["label"] == "Blomqvist β"
            names = maps["variables"]
            k = len(names)
            upper = list(zip(*np.triu_indices(k, 1)))   # a symmetric measure's cells: i < j, row by row
            assert len(ours["est"]) == len(upper) == 15
            for (x, y), estimate in api.items():
                i, j = sorted((names.index(x), names.index(y)))
                cell = ours["est"][upper.index((i, j))]
                assert abs(cell - estimate) <= 5e-4 + 1e-12, (x, y)   # shown to 3 decimals (half a unit)

            # the pair view: a row of this measure with the pair's estimate
            x, y = "canopy_temp_c", "sugar_brix"
            assert x in names and y in names
            view = c.get(f"/analyses/{aid}/pair", params={"x": x, "y": y}).text
            row = re.search(r'<tr data-measure="blomqvist">(.*?)</tr>', view, re.S).group(1)
            assert "Blomqvist β" in row
            shown = float(re.search(r'data-field="estimate" data-value="([^"]+)"', row).group(1))
            assert shown == pytest.approx(api[(x, y)], abs=1e-12)

            # the report: the measure's map and its line in the pair cards
            report = c.get(f"/api/analyses/{aid}/report.html").text
            assert report.count("Blomqvist β") >= 3
            assert "Blomqvist, N. (1950)" in report   # the methods section names its reference
    finally:
        srv.stop()
