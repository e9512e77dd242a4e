"""Kernels run as Python on tiny inputs give the compiled kernels' numbers, bit for bit.

The compiled (numba) kernels are the oracle: each check runs the same analyses
once with every kernel compiled and once with the eligible kernels as Python
(pairlens.core.jit), in separate processes, and compares the printed results
as exact float reprs. Also: what the command's start-up imports.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from pairlens.core import jit

# Tables of 3 to 40 rows: ties, repeated values, missing cells, a near-constant column.
_ANALYSES = textwrap.dedent("""
    import json, sys
    import numpy as np
    from pairlens.core import jit
    mode = sys.argv[1]
    if mode == "compiled":
        jit.compile_all()
    else:
        jit._STATE["force"] = "python"
    from pairlens.engine import run_analysis
    from pairlens.plan import AnalysisSettings
    out = []
    first_compiled = None   # the first table size at which numba was loaded
    rng = np.random.default_rng(2026)
    for n in (3, 4, 5, 6, 7, 8, 11, 17, 24, 40):
        data = rng.normal(size=(n, 5))
        data[:, 1] = np.round(data[:, 1] * 2)           # ties
        data[:, 2] = data[:, 0] ** 2 + 0.1 * data[:, 2]  # curved
        data[:, 3] = np.round(data[:, 3])                # heavy ties
        if n > 5:
            data[1, 4] = np.nan
            data[n - 2, 0] = np.nan
        # beyond 7 rows Pearson's default p-value uses library functions (compiled kernels only)
        tests = [] if n <= 7 else ["pearson=t"]
        for measures, permutations in ((["pearson", "spearman", "kendall", "dcor"], 0),
                                       (["dcor_bc", "xi", "kendall", "spearman"], 0),
                                       (["dcor", "xi"], 19)):
            settings = AnalysisSettings.from_options(measures=measures, tests=tests, permutations=permutations,
                                                     seed=7)
            table = run_analysis(data, ["a", "b", "c", "d", "e"], settings, workers=1)
            out += [(r.x, r.y, r.measure, repr(r.estimate), repr(r.ci_low), repr(r.ci_high), repr(r.p_value),
                     repr(r.q_value), r.n, r.note) for r in table.rows]
        if first_compiled is None and jit.compiled():
            first_compiled = n
    print(json.dumps({"rows": out, "first_compiled": first_compiled, "compiled": jit.compiled(),
                      "python_calls": jit._STATE["python_calls"]}))
""")


def _run(mode: str) -> dict:
    done = subprocess.run([sys.executable, "-c", _ANALYSES, mode], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_python_kernels_give_the_compiled_numbers():
    compiled, python = _run("compiled"), _run("python")
    assert compiled["compiled"] and compiled["python_calls"] == 0
    # up to 6 rows every kernel ran as Python; from 7 rows Spearman's exact law (a dynamic programme
    # over 2^n subsets) takes the compiled kernel, and numba then serves every later call
    assert python["python_calls"] > 1000 and python["first_compiled"] == 7
    assert len(python["rows"]) == len(compiled["rows"]) > 1000
    for a, b in zip(python["rows"], compiled["rows"]):
        assert a == b


def test_kernel_falls_back_to_compiled_where_python_raises():
    # a float overflow: Python's float arithmetic raises where the compiled kernel gives inf
    from pairlens.core import linear

    big = np.array([1e308, 1e308, 1e308, 3.0])   # their sum overflows in the mean
    other = np.array([1.0, 2.0, 0.5, 4.0])
    kernel = next(k for k in jit._KERNELS if k.__name__ == "_r_kernel")
    assert kernel.python_max_n > 0
    before = big.copy()
    got = kernel(big, other)
    assert np.array_equal(big, before)          # arguments untouched by the abandoned Python run
    assert jit.compiled()
    assert repr(got) == repr(linear._r_kernel(big, other))


def test_kernels_with_library_functions_always_compile():
    # lgamma, erfc, pow: CPython's math module and numba's may differ in the last bit
    from pairlens.core import linear, wide  # noqa: F401 - their kernels are registered on import

    names = {k.__name__ for k in jit._KERNELS if k.python_max_n == 0}
    assert {"_curve_sf", "_beta_sf", "_type_iv_sf", "_joint_log_mult"} <= names


_STARTUP = textwrap.dedent("""
    import io, json, sys, contextlib
    import pairlens.cli
    bare = sorted(m for m in ("numpy", "scipy", "numba", "pandas") if m in sys.modules)
    with contextlib.redirect_stdout(io.StringIO()):
        status = pairlens.cli.main(sys.argv[1:])
    heavy = ("numba", "scipy.stats", "pandas", "plotly", "fastapi", "uvicorn", "matplotlib")
    print(json.dumps({"status": status, "bare": bare, "loaded": [m for m in heavy if m in sys.modules]}))
""")


def _startup(*args) -> dict:
    done = subprocess.run([sys.executable, "-c", _STARTUP, *args], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_startup_imports_stay_light(tmp_path):
    small = tmp_path / "t.csv"
    small.write_text("a,b,c\n0.1,2,3.5\n1.2,0.4,2\n2.5,1.1,0.3\n")
    got = _startup("--help")
    assert got == {"status": 0, "bare": [], "loaded": []}
    # a small pair table: no compiled kernels, no scipy.stats, no pandas (the fast reader), no web stack
    got = _startup("pairs", str(small))
    assert got == {"status": 0, "bare": [], "loaded": []}
    # one pair: its marginal normality tests are scipy.stats' own; still no pandas or web stack
    got = _startup("inspect", str(small), "--x", "a", "--y", "b")
    assert got["status"] == 0 and set(got["loaded"]) == {"scipy.stats"}


def test_subcommand_help_does_not_load_kernels():
    got = _startup("pairs", "--help")
    assert got["status"] == 0 and "numba" not in got["loaded"] and "scipy.stats" not in got["loaded"]
