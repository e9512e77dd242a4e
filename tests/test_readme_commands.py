"""The README's quick start works in a fresh virtual environment.

The first command is taken verbatim from README.md and run in a new venv (which
sees the machine's installed packages, see below). The second command is the one .ci/run executes, which is
checked here to be the README's text exactly; running it inside the suite would
recurse, and CI runs it on a fresh machine.
"""

import os
import re
import signal
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from live_server import free_port

ROOT = Path(__file__).resolve().parent.parent


def _quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [block.strip() for block in re.findall(r"```\n(.*?)```", section, flags=re.S)]


def test_readme_has_exactly_two_quick_start_commands_and_ci_runs_the_second():
    commands = _quick_start_commands()
    assert len(commands) == 2 and all("\n" not in c for c in commands)
    ci_lines = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert commands[1] in [line.strip() for line in ci_lines]


def _wait_for(url: str, proc: subprocess.Popen, timeout: float) -> int:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"the command exited early with status {proc.returncode}")
        try:
            with urllib.request.urlopen(url, timeout=2) as resp:
                return resp.status
        except OSError:
            time.sleep(0.5)
    raise AssertionError(f"nothing answered at {url} within {timeout} s")


@pytest.mark.slow
def test_first_command_in_a_fresh_virtual_environment(tmp_path):
    first = _quick_start_commands()[0]
    venv = tmp_path / "venv"
    # The venv sees the packages already installed by the test command, so pip resolves the
    # first command's dependencies against them instead of unpacking NumPy, SciPy, pandas,
    # numba and pyarrow again (about 3.5 minutes of a loaded CI run). Resolving from nothing is
    # what CI's own run of the second command does on a fresh machine.
    subprocess.run([sys.executable, "-m", "venv", "--system-site-packages", str(venv)], check=True, timeout=120)
    env = dict(os.environ)
    env["PATH"] = f"{venv / 'bin'}:{env['PATH']}"
    env["VIRTUAL_ENV"] = str(venv)
    env.pop("PYTHONPATH", None)
    env["PAIRLENS_DATA_DIR"] = str(tmp_path / "workspace")
    # The command runs verbatim; PAIRLENS_PORT (read by `pairlens serve` when --port is not
    # given) moves it off 8000, which a user's own dashboard may hold.
    port = free_port()
    env["PAIRLENS_PORT"] = str(port)
    # The same known-good versions as the test command, so a new release elsewhere cannot
    # silently change what this test installs (pip reads PIP_CONSTRAINT like -c).
    env["PIP_CONSTRAINT"] = str(ROOT / "constraints.txt")
    proc = subprocess.Popen(first, shell=True, cwd=ROOT, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, start_new_session=True, text=True)
    try:
        if " serve" in first:
            assert "--port" not in first  # otherwise PAIRLENS_PORT would not apply
            assert _wait_for(f"http://127.0.0.1:{port}/", proc, timeout=900) == 200
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/datasets", timeout=10) as resp:
                assert b"vineyard_blocks" in resp.read()
        else:
            out, _ = proc.communicate(timeout=900)
            assert proc.returncode == 0, out[-2000:]
            assert "x,y,measure,estimate,ci_low,ci_high,p_value,q_value,n,note" in out
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)
            try:
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
    # the package in the venv is this checkout, not something already on the machine
    where = subprocess.run([str(venv / "bin" / "python"), "-c", "import pairlens; print(pairlens.__file__)"],
                           capture_output=True, text=True, cwd=tmp_path, timeout=60)
    assert where.stdout.strip() == str(ROOT / "app" / "__init__.py")
