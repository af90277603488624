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


def package_parts(name: str) -> ModuleType:
    """The package ``name`` with its ``__init__`` left unrun: ``package.part`` imports the
    submodule ``name.part`` on first use (a module ``__getattr__``, PEP 562), and a name that
    is no submodule is an ``AttributeError``. For a package whose ``__init__`` imports every
    submodule when a command calls a few of them: pvlib's loads its spectral models (with
    scipy's integration routines), its readers of web services (requests) and the rest, about
    a third of its import time, which the solar position, the transposition and the clear sky
    perfcheck calls do not need. Registered where the package is named, so every
    ``import name`` of the process then shares it (an ``__init__`` already run is kept)."""
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.find_spec(name)
    package = importlib.util.module_from_spec(spec)

    def part(attr: str) -> ModuleType:
        try:
            return importlib.import_module(f"{name}.{attr}")
        except ModuleNotFoundError as exc:
            if exc.name != f"{name}.{attr}":
                raise
            raise AttributeError(f"module {name!r} has no attribute {attr!r}") from None

    package.__getattr__ = part
    sys.modules[name] = package
    return package
