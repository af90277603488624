"""Outputs written all or nothing: first under a temporary name beside the target, renamed onto
it once complete. A write that fails (an unwritable folder, a full disk) leaves no partial
output behind and raises OutputError: one line naming the target and the reason."""

from __future__ import annotations

import contextlib
import os
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from perfcheck.errors import OutputError


def _error(target: Path, exc: OSError) -> OutputError:
    detail = exc.strerror or str(exc)
    if exc.filename:
        detail += f": {exc.filename}"
    return OutputError(f"{target}: cannot write ({detail}); nothing was written")


def _partial(target: Path) -> Path:
    return target.with_name(f".{target.name}.partial")


@contextmanager
def replacing_file(target: str | Path) -> Iterator[Path]:
    """A temporary path to write instead of ``target``; renamed onto ``target`` when the block
    ends without error, removed otherwise."""
    target = Path(target)
    tmp = _partial(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        yield tmp
        os.replace(tmp, target)
    except OSError as exc:
        raise _error(target, exc) from None
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink(missing_ok=True)


@contextmanager
def replacing_dir(target: str | Path, replace: bool = False) -> Iterator[Path]:
    """A fresh temporary folder to write instead of ``target``. When the block ends without
    error, its files are moved into ``target`` (other files there are kept), or, with
    ``replace``, it takes the place of ``target`` as a whole; otherwise it is removed."""
    target = Path(target)
    tmp, old = _partial(target), target.with_name(f".{target.name}.old")
    try:
        shutil.rmtree(tmp, ignore_errors=True)
        tmp.mkdir(parents=True)
        yield tmp
        if replace and target.exists():
            shutil.rmtree(old, ignore_errors=True)
            target.rename(old)
        if not target.exists():
            tmp.rename(target)
        else:
            for src in sorted(p for p in tmp.rglob("*") if p.is_file()):
                dst = target / src.relative_to(tmp)
                dst.parent.mkdir(parents=True, exist_ok=True)
                os.replace(src, dst)
    except OSError as exc:
        if old.exists() and not target.exists():
            old.rename(target)  # the earlier output stays as it was
        raise _error(target, exc) from None
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
        shutil.rmtree(old, ignore_errors=True)


__all__ = ["replacing_dir", "replacing_file"]
