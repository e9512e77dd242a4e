"""A wheel built from this checkout works on its own, outside the repository.

The wheel goes into a fresh virtual environment made with ``--system-site-packages``
and installed with ``--no-deps``: the dependencies are already on the machine, and
the test is about what the wheel itself carries. The venv's own site-packages must
then hold one ``pairlens`` folder and no top-level ``app``, ``templates`` or
``static``; the installed command must serve the demo (including an analysis in its
child process) and compute the pair table of the bundled demo.
"""

from __future__ import annotations

import csv
import io
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pandas as pd
import pytest
import scipy.stats as ss

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.slow


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _clean_env(tmp: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTHON", "PAIRLENS_", "VIRTUAL_ENV"))}
    env["PAIRLENS_DATA_DIR"] = str(tmp / "workspace")
    return env


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("wheel")
    # Build from a copy: the build writes build/ and *.egg-info beside the sources, and the
    # checkout's __pycache__ folders (numba caches among them) must not ride along.
    src = tmp / "src"
    skip = shutil.ignore_patterns("__pycache__", "*.pyc", "*.nbi", "*.nbc", "*.partial")
    for folder in ("app", "templates", "static", "sample_data"):
        shutil.copytree(ROOT / folder, src / folder, ignore=skip)
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, src / name)
    dist = tmp / "dist"
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(dist), str(src)],
                   check=True, timeout=600, cwd=tmp)
    wheels = list(dist.glob("pairlens-*.whl"))
    assert len(wheels) == 1, wheels
    venv = tmp / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--system-site-packages", str(venv)], check=True, timeout=300)
    py = venv / "bin" / "python"
    subprocess.run([str(py), "-m", "pip", "install", "-q", "--no-deps", str(wheels[0])], check=True,
                   timeout=300, cwd=tmp, env=_clean_env(tmp))
    site = Path(subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                               capture_output=True, text=True, check=True, cwd=tmp).stdout.strip())
    return {"tmp": tmp, "venv": venv, "py": py, "site": site, "env": _clean_env(tmp)}


def test_site_packages_holds_one_pairlens_folder(installed):
    site = installed["site"]
    top = {p.name for p in site.iterdir()}
    assert "pairlens" in top
    assert not top & {"app", "templates", "static", "sample_data"}, sorted(top)
    # every module of the checkout is in the wheel, under the pairlens name
    ours = {p.relative_to(ROOT / "app").as_posix() for p in (ROOT / "app").rglob("*.py")}
    theirs = {p.relative_to(site / "pairlens").as_posix() for p in (site / "pairlens").rglob("*.py")}
    assert ours <= theirs, sorted(ours - theirs)
    for folder in ("templates", "static"):
        expected = {p.name for p in (ROOT / folder).iterdir() if p.is_file()}
        assert {p.name for p in (site / "pairlens" / folder).iterdir()} >= expected
    assert (site / "pairlens" / "sample_data" / "vineyard_blocks.csv").is_file()


def test_import_and_version_come_from_the_wheel(installed):
    out = subprocess.run([str(installed["py"]), "-c", "import pairlens, sys; print(pairlens.__file__); "
                          "print(pairlens.__version__); print('numpy' in sys.modules)"],
                         capture_output=True, text=True, cwd=installed["tmp"], env=installed["env"], timeout=120)
    assert out.returncode == 0, out.stderr
    where, version, numpy_loaded = out.stdout.split()
    assert Path(where) == installed["site"] / "pairlens" / "__init__.py"
    assert numpy_loaded == "False"  # the package import stays light
    command = subprocess.run([str(installed["venv"] / "bin" / "pairlens"), "--version"], capture_output=True,
                             text=True, cwd=installed["tmp"], env=installed["env"], timeout=120)
    assert command.stdout.strip() == f"pairlens {version}"


def test_pairs_on_the_bundled_demo(installed):
    demo = installed["site"] / "pairlens" / "sample_data" / "vineyard_blocks.csv"
    out = subprocess.run([str(installed["venv"] / "bin" / "pairlens"), "pairs", str(demo), "--measures", "pearson",
                          "--workers", "1"], capture_output=True, text=True, cwd=installed["tmp"],
                         env=installed["env"], timeout=600)
    assert out.returncode == 0, out.stderr[-2000:]
    rows = list(csv.DictReader(io.StringIO(out.stdout)))
    frame = pd.read_csv(demo)
    numeric = [c for c in frame.columns if pd.api.types.is_numeric_dtype(frame[c])]
    # one Pearson row per pair of numeric columns (the categorical columns' pairs take their own measures)
    assert len([r for r in rows if r["measure"] == "pearson"]) == len(numeric) * (len(numeric) - 1) // 2
    row = next(r for r in rows if r["x"] == "leaf_wetness_h" and r["y"] == "disease_score")
    both = frame[["leaf_wetness_h", "disease_score"]].dropna()
    # reference: scipy.stats.pearsonr on the rows where both values are present
    assert float(row["estimate"]) == pytest.approx(ss.pearsonr(both.iloc[:, 0], both.iloc[:, 1]).statistic,
                                                   rel=1e-9)


def test_serve_demo_answers_on_a_free_port_and_runs_an_analysis(installed):
    port = _free_port()
    env = dict(installed["env"], PAIRLENS_PORT=str(port))  # the port comes from the environment variable
    log = open(installed["tmp"] / "serve.log", "wb")
    proc = subprocess.Popen([str(installed["venv"] / "bin" / "pairlens"), "serve", "--demo", "--data-dir",
                             str(installed["tmp"] / "ws")], cwd=installed["tmp"], env=env, stdout=log,
                            stderr=subprocess.STDOUT, start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 180
        datasets = None
        while time.monotonic() < deadline and datasets is None:
            assert proc.poll() is None, (installed["tmp"] / "serve.log").read_text()
            try:
                resp = httpx.get(base + "/api/datasets", timeout=5)
                if resp.status_code == 200:
                    datasets = resp.json()
            except httpx.HTTPError:
                time.sleep(0.3)
        assert datasets is not None, "the server did not answer"
        assert "vineyard_blocks" in str(datasets)
        page = httpx.get(base + "/", timeout=10)
        assert page.status_code == 200 and "pairlens" in page.text
        css = httpx.get(base + "/static/pairlens.css", timeout=10)
        assert css.status_code == 200 and css.text == (ROOT / "static" / "pairlens.css").read_text(encoding="utf-8")
        items = datasets if isinstance(datasets, list) else datasets.get("datasets", [])
        demo_id = next(d["id"] for d in items if "vineyard_blocks" in str(d))
        started = httpx.post(f"{base}/api/datasets/{demo_id}/analyses", timeout=30,
                             json={"measures": ["pearson"], "columns": ["leaf_wetness_h", "disease_score"]})
        assert started.status_code == 202, started.text
        analysis = started.json()["id"]
        status = {}
        while time.monotonic() < deadline + 300:  # the analysis runs in a child process of the wheel
            status = httpx.get(f"{base}/api/analyses/{analysis}", timeout=10).json()
            if status["status"] in ("done", "failed", "cancelled", "interrupted"):
                break
            time.sleep(0.3)
        assert status["status"] == "done", status
        pairs = httpx.get(f"{base}/api/analyses/{analysis}/pairs", timeout=30).json()
        assert "leaf_wetness_h" in str(pairs)
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=20)
        log.close()
