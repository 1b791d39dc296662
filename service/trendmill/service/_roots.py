"""Data roots: every SOURCE a job reads must lie inside one of them.

A source is checked twice: its text (no ``..`` component at all, so a path can
never climb out before symlinks are even looked at) and what it resolves to
(the real path of the source, and of every file and link under it or matched
by its glob, must lie inside a root). The job then reads the resolved path.
"""

from __future__ import annotations

import glob
import os
from pathlib import Path, PurePosixPath

from ..engine.errors import AccessError, SourceNotFound

__all__ = ["DataRoots"]

_GLOB_CHARS = set("*?[")


def _inside(path: str, root: str) -> bool:
    return path == root or path.startswith(root.rstrip(os.sep) + os.sep)


class DataRoots:
    """The directories sources may be read from.

    Parameters
    ----------
    roots : sequence of path-like
        Existing directories; their real paths (symlinks resolved) are kept.
    """

    __slots__ = ("roots",)

    def __init__(self, roots) -> None:
        resolved = []
        for r in roots:
            p = os.path.realpath(os.fspath(r))
            if not os.path.isdir(p):
                raise SourceNotFound(f"data root {os.fspath(r)!r} is not a directory",
                                     path=os.fspath(r))
            resolved.append(p)
        if not resolved:
            raise AccessError("no data root is configured")
        self.roots = tuple(resolved)

    def contains(self, path: str) -> bool:
        real = os.path.realpath(path)
        return any(_inside(real, r) for r in self.roots)

    def resolve(self, source: str) -> str:
        """Absolute, symlink-free form of ``source``, checked to lie inside a root.

        Relative sources are tried against each root in order; the first one
        under which something exists is used.

        Raises
        ------
        AccessError
            ``..`` in the source, or the source (or a file or link under it)
            resolves outside every data root.
        SourceNotFound
            Nothing exists at the source under any root.
        """
        if not isinstance(source, str) or not source:
            raise SourceNotFound("source: empty path", path=str(source))
        if ".." in PurePosixPath(source.replace(os.sep, "/")).parts:
            raise AccessError(f"source: {source!r} contains '..'; give a path inside a data root",
                              path=source)
        if os.path.isabs(source):
            candidates = [source]
        else:
            candidates = [os.path.join(r, source) for r in self.roots]
        for cand in candidates:
            if _has_glob(cand):
                matches = sorted(glob.glob(cand))
                if not matches:
                    continue
                self._check_tree(source, _glob_base(cand), matches)
                return os.path.join(os.path.realpath(_glob_base(cand)),
                                    os.path.relpath(cand, _glob_base(cand)))
            if os.path.lexists(cand):
                real = os.path.realpath(cand)
                self._check_tree(source, cand, [cand])
                return real
        if os.path.isabs(source) and not any(_inside(os.path.abspath(source), r) for r in self.roots):
            # Say "outside" rather than "missing": do not reveal what exists elsewhere.
            raise AccessError(f"source: {source!r} is outside every data root", path=source)
        raise SourceNotFound(f"source: nothing at {source!r} under the data roots", path=source)

    def _check_tree(self, source: str, base: str, paths: list[str]) -> None:
        for p in [base, *paths]:
            if not self.contains(p):
                raise AccessError(f"source: {source!r} resolves outside every data root",
                                  path=source)
        for p in paths:
            if os.path.isdir(p):
                for dirpath, dirnames, filenames in os.walk(p, followlinks=False):
                    for name in dirnames + filenames:
                        full = os.path.join(dirpath, name)
                        if os.path.islink(full) and not self.contains(full):
                            raise AccessError(
                                f"source: {source!r} has a link leading outside every data "
                                f"root ({os.path.relpath(full, p)!r})", path=source)


def _has_glob(path: str) -> bool:
    return any(c in _GLOB_CHARS for c in path)


def _glob_base(path: str) -> str:
    """Longest leading directory of ``path`` without glob characters."""
    parts = Path(path).parts
    base = []
    for part in parts:
        if _has_glob(part):
            break
        base.append(part)
    return str(Path(*base)) if base else "."
