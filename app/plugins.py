"""Measures of the user's own, added to every face through ``PAIRLENS_PLUGINS``.

A plugin is an importable Python module that calls
:func:`pairlens.core.registry.register` when it is imported. Naming it in the
``PAIRLENS_PLUGINS`` environment variable (comma-separated module names, found
on ``sys.path`` / ``PYTHONPATH``) makes the command line, the server, the
server's analysis children (fresh interpreters, which inherit the environment)
and the report offer the measure like a built-in one. Notebook users import
their module themselves.
"""

from __future__ import annotations

import importlib
import os

from . import config

__all__ = ["PluginError", "load_plugins"]

_loaded: set[str] = set()


class PluginError(RuntimeError):
    """A module named in ``PAIRLENS_PLUGINS`` could not be imported; the message says which and why."""


def load_plugins(spec: str | None = None) -> tuple[str, ...]:
    """Import every module named in ``spec`` (default: the ``PAIRLENS_PLUGINS`` variable), once.

    Returns the names imported by this call. Raises :class:`PluginError` with
    the module's name and the import error, so a typo stops the command with
    a message instead of silently dropping the measure.
    """
    if spec is None:
        spec = os.environ.get(config.PLUGINS_ENV, "")
    done: list[str] = []
    for name in (part.strip() for part in spec.split(",")):
        if not name or name in _loaded:
            continue
        try:
            importlib.import_module(name)
        except Exception as exc:  # any failure of the user's module is reported the same way
            raise PluginError(f"{config.PLUGINS_ENV} names {name!r}, which could not be imported: "
                              f"{type(exc).__name__}: {exc}. Check the module name and that its folder "
                              "is on PYTHONPATH.") from exc
        _loaded.add(name)
        done.append(name)
    return tuple(done)
