"""Modules executed on first use: what keeps a command's start-up short.

A stage that calls a heavy library (scipy's statistics, statsmodels, matplotlib) only in some
of its functions binds it with :func:`lazy_module` at the top, so a command that merely
validates the site file through it, or reads a stored result, does not pay for the import.
"""

from __future__ import annotations

import importlib.util
import sys
from types import ModuleType


def lazy_module(name: str) -> ModuleType:
    """The module ``name``, executed on first use of one of its attributes (the standard
    library's ``importlib.util.LazyLoader``): the command modules name the stages they call at
    the top, yet a command's ``--help`` and shell completion load none of pandas, DuckDB,
    pvlib or matplotlib; the detectors name scipy's statistics and statsmodels, and the
    report its figures, the same way."""
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.find_spec(name)
    loader = importlib.util.LazyLoader(spec.loader)
    spec.loader = loader
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    loader.exec_module(module)
    parent, _, child = name.rpartition(".")
    if parent:
        setattr(sys.modules[parent], child, module)
    return module
