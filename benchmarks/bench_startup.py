"""Whole-process start-up of the ``pairlens`` command on small jobs: medians of repeated runs.

    python benchmarks/bench_startup.py                 # 7 runs of each command after one warm-up
    python benchmarks/bench_startup.py --repeats 15 --json benchmarks/results/startup.json

Three commands, each timed as a new process from start to exit, as a user meets them:

* ``pairlens --help``                                 (goal: under 0.5 s)
* ``pairlens inspect`` for one pair at 10^4 rows      (goal: under 1.5 s)
* ``pairlens pairs`` on a 3 x 3 file                  (goal: under 1 s)

The command is the ``pairlens`` script installed beside this interpreter (a venv's bin/), or else
``python -m pairlens``; shims of version managers (pyenv) add their own start-up and are not used.
One untimed warm-up run of each command comes first: the first run after an install compiles
the numba kernels into their on-disk cache, which every later run loads. Before that the package's
sources are compiled to .pyc, as pip does for an installed package: an editable checkout under
PYTHONDONTWRITEBYTECODE (as on the development machine) would otherwise recompile every module in
every timed run. This is a benchmark, not a test: it prints numbers and asserts nothing.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

GOALS = {"python_bare": float("nan"), "help": 0.5, "inspect_1e4": 1.5, "pairs_3x3": 1.0}


def _command() -> list[str]:
    script = Path(sys.executable).with_name("pairlens")
    return [str(script)] if script.exists() else [sys.executable, "-m", "pairlens"]


def _files(folder: Path) -> tuple[Path, Path]:
    rng = np.random.default_rng(20261202)
    n = 10_000
    x = rng.normal(size=n)
    y = np.sin(x) + 0.5 * rng.normal(size=n)
    inspect_file = folder / "pair_1e4.csv"
    np.savetxt(inspect_file, np.column_stack([x, y]), delimiter=",", header="x,y", comments="", fmt="%.6f")
    small = folder / "table_3x3.csv"
    np.savetxt(small, rng.normal(size=(3, 3)), delimiter=",", header="a,b,c", comments="", fmt="%.6f")
    return inspect_file, small


def _compile_sources() -> str:
    import compileall

    import pairlens

    folder = Path(pairlens.__file__).parent
    ok = compileall.compile_dir(str(folder), quiet=1)
    return f"compiled {folder} to .pyc" + ("" if ok else " (some files failed)")


def _time(cmd: list[str]) -> float:
    started = time.perf_counter()
    done = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} failed: {done.stderr.decode()[-500:]}")
    return seconds


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeats", type=int, default=7, help="timed runs of each command (default: 7)")
    parser.add_argument("--json", default=None, help="also write every time to this JSON file")
    args = parser.parse_args()
    base = _command()
    compiled = _compile_sources()
    with tempfile.TemporaryDirectory() as tmp:
        inspect_file, small = _files(Path(tmp))
        commands = {
            # the interpreter alone, for scale: what no change to pairlens can remove
            "python_bare": [sys.executable, "-c", "pass"],
            "help": base + ["--help"],
            "inspect_1e4": base + ["inspect", str(inspect_file), "--x", "x", "--y", "y"],
            "pairs_3x3": base + ["pairs", str(small)],
        }
        for cmd in commands.values():  # warm-up: numba's cache, the OS file cache
            _time(cmd)
        times: dict[str, list[float]] = {k: [] for k in commands}
        for _ in range(args.repeats):  # interleaved, so a busy moment touches every command alike
            for name, cmd in commands.items():
                times[name].append(_time(cmd))
    print(f"command: {' '.join(base)}; {args.repeats} runs each; {os.cpu_count()} cores; "
          f"1-minute load average at the end: {os.getloadavg()[0]:.2f}; {compiled}")
    print(f"{'run':<14}{'median s':>10}{'min s':>8}{'max s':>8}{'goal s':>8}")
    for name, values in times.items():
        goal = "-" if GOALS[name] != GOALS[name] else f"{GOALS[name]:.1f}"
        print(f"{name:<14}{statistics.median(values):>10.3f}{min(values):>8.3f}{max(values):>8.3f}{goal:>8}")
    if args.json:
        Path(args.json).write_text(json.dumps({
            "when": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "machine": {"cpus": os.cpu_count(), "platform": platform.platform(), "python": platform.python_version(),
                        "processor": platform.processor()},
            "command": base, "sources": compiled, "goals_seconds": {k: v for k, v in GOALS.items() if v == v}, "seconds": times,
            "medians": {k: statistics.median(v) for k, v in times.items()},
            "load_average_at_end": os.getloadavg()[0],
        }, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
