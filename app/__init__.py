"""pairlens: exploratory association analysis for every pair of columns.

>>> import pairlens
>>> result = pairlens.analyze(pairlens.read(pairlens.demo_path()), workers=1, progress=False)
>>> sorted(set(result.pairs["measure"]))    # numeric defaults, and those of its categorical columns
['cramer_v', 'dcor', 'eta', 'kendall', 'kruskal', 'pearson', 'spearman']

The names below are loaded on first use, so ``import pairlens`` (and the
``pairlens`` command's start-up) does not pay for NumPy, pandas or SciPy.
"""

__version__ = "0.1.0"

__all__ = ["read", "analyze", "demo_path", "Analysis", "PairView", "__version__"]

_LIBRARY_NAMES = frozenset(["read", "analyze", "demo_path", "Analysis", "PairView"])


def __getattr__(name: str):
    if name in _LIBRARY_NAMES:
        from . import library

        return getattr(library, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | _LIBRARY_NAMES)
