"""Compiled kernels that load numba on first need, and run tiny inputs as plain Python.

Importing numba and loading the first cached kernel cost most of a small
command's run (about half a second on the development machine), while a table
of a few rows needs microseconds of arithmetic. :func:`kernel` replaces
``numba.njit``: the decorated function is a :class:`Kernel` whose call

* runs the function's own Python source (``py_func``, the code numba compiles)
  when every array argument has at most ``python_max_n`` rows, the process has
  not yet compiled anything and its budget of Python calls is not spent;
* else imports numba once, turns every kernel of the package into its numba
  dispatcher (module globals included, so compiled code calls compiled code)
  and calls the compiled function from then on.

Only kernels whose arithmetic is the same in both runs may take the Python
path (``python_max_n > 0``): integer counting, orderings, and float ``+ - * /``
and ``sqrt``, which IEEE 754 rounds the same way wherever they run. Kernels
with library functions (``lgamma``, ``erfc``, ``exp``, ``pow``), whose last
bit may differ between CPython's math module and numba's, keep
``python_max_n=0`` and always compile. Where Python would raise where numba
gives a value (a float overflow or division by zero, integer wrap-around)
the Python run is abandoned, the array arguments are restored and the
compiled kernel runs instead. ``tests/core/test_jit.py`` compares both runs kernel
by kernel and on whole analyses.
"""

from __future__ import annotations

import functools
import sys
import threading

import numpy as np

__all__ = ["Kernel", "kernel", "compile_all", "compiled", "PYTHON_CALLS_MAX"]

# Beyond this many Python runs in one process, numba is loaded anyway: its fixed cost is then
# smaller than the interpreter's (a call on ~10 rows takes tens of microseconds in Python).
PYTHON_CALLS_MAX = 3000

_KERNELS: list["Kernel"] = []
_STATE = {"compiled": False, "python_calls": 0, "force": ""}   # force: "", "python" (tests), "compiled"
_LOCAL = threading.local()   # .inside: this thread is running a kernel as Python


def _as_returned(value):
    # numba hands back Python scalars; the Python run's NumPy scalars are turned into the same
    if isinstance(value, tuple):
        return tuple(_as_returned(v) for v in value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


class Kernel:
    """A numba kernel loaded on first need; see the module docstring."""

    def __init__(self, fn, options: dict, python_max_n: int) -> None:
        functools.update_wrapper(self, fn)
        self.py_func = fn
        self.options = options
        self.python_max_n = python_max_n
        self._dispatcher = None

    def _python_ok(self, args) -> bool:
        if _STATE["compiled"] or self.python_max_n <= 0 or _STATE["force"] == "compiled":
            return False
        if _STATE["force"] != "python" and _STATE["python_calls"] >= PYTHON_CALLS_MAX:
            return False
        return all(a.shape[0] <= self.python_max_n for a in args if isinstance(a, np.ndarray) and a.ndim)

    def __call__(self, *args):
        if not self._python_ok(args):
            return self.dispatcher(*args)
        _STATE["python_calls"] += 1
        if getattr(_LOCAL, "inside", False):  # a kernel called by a kernel: the outermost call handles failures
            return self.py_func(*args)
        saved = [(a, a.copy()) for a in args if isinstance(a, np.ndarray)]
        _LOCAL.inside = True
        try:
            # NumPy scalars then raise (FloatingPointError) where numba would give inf, NaN or wrap
            with np.errstate(all="raise"):
                return _as_returned(self.py_func(*args))
        except Exception:  # noqa: BLE001 - whatever Python objects to, the compiled kernel decides
            for array, copy in saved:   # kernels may write into their arguments
                array[...] = copy
        finally:
            _LOCAL.inside = False
        return self.dispatcher(*args)

    @property
    def dispatcher(self):
        if self._dispatcher is None:
            compile_all()
        return self._dispatcher

    def __repr__(self) -> str:
        return f"<Kernel {self.__module__}.{self.__qualname__}>"


def compile_all() -> None:
    """Import numba and put every kernel's dispatcher in place of its :class:`Kernel` (idempotent)."""
    if _STATE["compiled"]:
        return
    import numba

    for k in _KERNELS:
        if k._dispatcher is None:
            k._dispatcher = numba.njit(**k.options)(k.py_func)
    _STATE["compiled"] = True
    by_function = {id(k): k._dispatcher for k in _KERNELS}
    root = __name__.rsplit(".", 2)[0] + "."
    for name, module in list(sys.modules.items()):
        if module is None or not name.startswith(root):
            continue
        for attr, value in list(vars(module).items()):
            if isinstance(value, Kernel):
                setattr(module, attr, by_function[id(value)])


def compiled() -> bool:
    """True once numba has been loaded in this process."""
    return _STATE["compiled"]


def kernel(*, python_max_n: int = 0, **options):
    """Decorator in place of ``numba.njit(**options)``; ``python_max_n`` rows or fewer may run as Python."""
    def wrap(fn):
        k = Kernel(fn, options, python_max_n)
        _KERNELS.append(k)
        if _STATE["compiled"]:  # a module imported after numba was loaded takes the dispatcher directly
            import numba

            k._dispatcher = numba.njit(**options)(fn)
            return k._dispatcher
        return k
    return wrap
