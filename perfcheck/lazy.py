"""Modules executed on first use: what keeps a command's start-up short.

A stage that calls a heavy library (scipy's statistics, statsmodels, matplotlib) only in some
of its functions binds it with :func:`lazy_module` at the top, so a command that merely
validates the site file through it, or reads a stored result, does not pay for the import.
"""

from __future__ import annotations

import functools
import importlib
import importlib.abc
import importlib.machinery
import importlib.metadata
import importlib.util
import sys
from collections.abc import Collection
from types import ModuleType


def lazy_module(name: str) -> ModuleType:
    """The module ``name``, executed on first use of one of its attributes (the standard
    library's ``importlib.util.LazyLoader``): the command modules name the stages they call at
    the top, yet a command's ``--help`` and shell completion load none of pandas, DuckDB,
    pvlib or matplotlib; the detectors name scipy's statistics and statsmodels, and the
    report its figures, the same way. A module of a package that is not loaded yet is bound
    through a :class:`_Deferred` stand-in instead: finding its file would run the package's
    ``__init__`` (scipy's takes some 30 ms, which a view of stored results would pay for
    nothing)."""
    if name in sys.modules:
        return sys.modules[name]
    if "." in name and name.partition(".")[0] not in sys.modules:
        return _deferred(name)
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


class _Deferred(ModuleType):
    """Stands for a module of a package not loaded yet (:func:`lazy_module`): the first
    attribute read imports the module the usual way, its packages first (a package whose
    ``__init__`` imports its own modules breaks when one of them runs before it), and every
    read is passed on to it."""

    def __getattr__(self, attr: str) -> object:
        return getattr(importlib.import_module(self.__name__), attr)


@functools.cache
def _deferred(name: str) -> _Deferred:
    return _Deferred(name)


# pvlib's modules that import each other and load only inside the whole package (found by
# loading each module of pvlib 0.16 alone; tests/test_project.py checks the modules perfcheck
# uses load alone)
PVLIB_WITH_INIT = ("modelchain", "pvsystem", "singlediode")


def lazy_package(name: str, with_init: Collection[str]) -> ModuleType:
    """The package ``name`` bound as :func:`lazy_module` binds a module, whose ``__init__``
    runs only when something other than its submodules is used.

    A package's ``__init__`` may import every module of it (pvlib's loads its spectra, model
    chain and file readers, and with them scipy's integration and h5py readers that the
    modules perfcheck uses do not need: about a quarter second of CPU). On first use of one of
    its attributes the package stays without its ``__init__`` (its ``__version__`` is the
    installed distribution's); each submodule then loads, with what it imports itself, when it
    is first named. Naming anything else, or a submodule of ``with_init`` (modules that load
    only in the order the ``__init__`` gives them), runs the package's ``__init__``.
    """
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.find_spec(name)
    spec.loader = importlib.util.LazyLoader(_WithoutInit(spec.loader, frozenset(with_init)))
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


_WITH_INIT: dict[str, frozenset[str]] = {}  # package name -> its with_init submodules


class _WithoutInit(importlib.abc.Loader):
    """Loader of :func:`lazy_package`: makes the package a :class:`_Package`, and keeps the
    package's own loader for its ``__init__``."""

    def __init__(self, package_loader: importlib.abc.Loader, with_init: frozenset[str]
                 ) -> None:
        self.package_loader, self.with_init = package_loader, with_init

    def create_module(self, spec: importlib.machinery.ModuleSpec) -> None:
        return None

    def exec_module(self, module: ModuleType) -> None:
        module.__spec__.loader = module.__loader__ = self.package_loader
        _WITH_INIT[module.__name__] = self.with_init
        module.__class__ = _Package


class _Package(ModuleType):
    """A package whose ``__init__`` has not run (:func:`lazy_package`)."""

    def __getattr__(self, attr: str) -> object:
        if attr == "__version__":
            return importlib.metadata.version(self.__name__)
        if attr.startswith("__"):
            raise AttributeError(f"module {self.__name__!r} has no attribute {attr!r}")
        submodule = f"{self.__name__}.{attr}"
        if attr not in _WITH_INIT[self.__name__] and importlib.util.find_spec(submodule):
            return importlib.import_module(submodule)
        self.__class__ = ModuleType  # the whole package, as its __init__ makes it
        self.__spec__.loader.exec_module(self)
        return getattr(self, attr)
