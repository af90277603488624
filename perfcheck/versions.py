"""The versions of the code behind a result: the tool, Python and the libraries it runs on."""

from __future__ import annotations

import functools
import importlib.metadata
import platform

from perfcheck import __version__

DEPENDENCIES = ("pandas", "numpy", "pvlib", "duckdb", "statsmodels", "scipy", "matplotlib",
                "jinja2", "click", "jsonschema")


def versions() -> dict[str, str]:
    """Tool, Python and dependency versions."""
    return dict(_versions())


@functools.cache
def _versions() -> dict[str, str]:
    """Looked up once per process: each lookup reads the installed packages' metadata."""
    out = {"perfcheck": __version__, "python": platform.python_version()}
    for name in DEPENDENCIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out
