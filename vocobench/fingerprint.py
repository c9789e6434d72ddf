"""Code and file fingerprints: short content hashes that change when a user's code or model files do.

``code_fingerprint(target)`` hashes the source behind an importable object (class, function,
instance or module) or a module name: the file of its module and, when that module belongs to a
package, the Python files of the package's top-level folder, walked in sorted order with bounded
count and size. Paths enter the hash relative to the package folder, so two checkouts of the same
code in different places give the same fingerprint. ``files_fingerprint(paths)`` hashes named files
(e.g. model weights), and ``option_files_fingerprint(options)`` does so for the option values that
name existing files.

File digests are cached per process by (path, size, modification time), so fingerprinting the same
multi-gigabyte weights twice costs one hash; the content, never the time stamp, enters the result.
Used for user metrics (recorded in their ``variant()``, hence in the job cache key and the
manifest) and meant for vocoders as well.
"""
from __future__ import annotations

import hashlib
import importlib
import os
import sys
import types
from pathlib import Path
from typing import Any, Iterable, Mapping

from .errors import InputError

DIGEST_CHARS = 16                       # hex characters kept (64 bits): enough to tell versions apart
MAX_PACKAGE_FILES = 256                 # package files hashed by content; more are hashed by name and size
MAX_PACKAGE_BYTES = 8 * 1024 * 1024     # total bytes of package source hashed by content
CHUNK_BYTES = 1024 * 1024
SKIPPED_DIRS = {"__pycache__", ".git", ".hg", ".svn", ".tox", ".venv", "node_modules"}

# (resolved path) -> (size, mtime_ns, sha256 hex); the size/mtime shortcut of the module docstring.
_FILE_CACHE: dict[str, tuple[int, int, str]] = {}


def file_digest(path: str | Path) -> str:
    """sha256 (hex) of a file's content, reused while its size and modification time are unchanged."""
    p = Path(path).resolve()
    try:
        st = p.stat()
    except OSError as e:
        raise InputError(f"cannot read file for fingerprinting: {e.strerror}", field="fingerprint",
                         value=str(path)) from None
    return _digest(str(p), st)


def _digest(path: str, st: os.stat_result) -> str:
    """sha256 of ``path`` whose ``stat`` the caller took, through the size/mtime cache."""
    hit = _FILE_CACHE.get(path)
    if hit and hit[0] == st.st_size and hit[1] == st.st_mtime_ns:
        return hit[2]
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(CHUNK_BYTES), b""):
            h.update(block)
    digest = h.hexdigest()
    _FILE_CACHE[path] = (st.st_size, st.st_mtime_ns, digest)
    return digest


def files_fingerprint(paths: Iterable[str | Path]) -> str:
    """Fingerprint of the contents of ``paths`` (order-independent; names do not enter)."""
    digests = sorted(file_digest(p) for p in paths)
    return _short("\n".join(digests))


def option_files_fingerprint(options: Mapping[str, Any]) -> dict[str, str]:
    """``{option: fingerprint}`` for each option whose value (a string, or a list of strings)
    names existing files, e.g. a checkpoint path; other options are left out."""
    out = {}
    for key, value in options.items():
        values = value if isinstance(value, (list, tuple)) else [value]
        if values and all(isinstance(v, (str, os.PathLike)) and Path(v).is_file() for v in values):
            out[key] = files_fingerprint(values)
    return out


def code_fingerprint(target: Any) -> str:
    """Fingerprint of the code behind ``target``: an object or a module name ('package.module')."""
    module = _module_of(target)
    files = _source_files(module)
    if not files:
        raise InputError("cannot locate the source of this object to fingerprint it",
                         field="fingerprint", value=getattr(module, "__name__", repr(target)))
    root, paths = files
    h = hashlib.sha256()
    budget = MAX_PACKAGE_BYTES
    for i, path in enumerate(paths):        # one stat per file, no resolve (walked paths)
        try:
            rel = path.relative_to(root).as_posix()
        except ValueError:
            rel = path.name
        st = path.stat()
        size = st.st_size
        if i < MAX_PACKAGE_FILES and size <= budget:
            budget -= size
            h.update(f"{rel}\0{_digest(str(path), st)}\n".encode())
        else:                           # past the bounds: name and size only
            h.update(f"{rel}\0size {size}\n".encode())
    return h.hexdigest()[:DIGEST_CHARS]


def _short(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()[:DIGEST_CHARS]


def _module_of(target: Any) -> types.ModuleType:
    if isinstance(target, types.ModuleType):
        return target
    if isinstance(target, str):
        try:
            return importlib.import_module(target)
        except Exception as e:
            raise InputError(f"cannot import '{target}': {type(e).__name__}: {e}",
                             field="fingerprint", value=target) from None
    name = getattr(target, "__module__", None) or type(target).__module__   # class, function
    module = sys.modules.get(name) if name else None
    if module is None:
        raise InputError("the object's module is not loaded", field="fingerprint",
                         value=repr(target))
    return module


def _source_files(module: types.ModuleType) -> tuple[Path, list[Path]] | None:
    """(root folder, files to hash): the module's own file, plus its top-level package's .py files."""
    file = getattr(module, "__file__", None)
    if not file:
        return None
    own = Path(file).resolve()
    package = sys.modules.get((module.__name__ or "").split(".")[0])
    pkg_file = getattr(package, "__file__", None)
    if not pkg_file or Path(pkg_file).name != "__init__.py":
        return own.parent, [own]
    root = Path(pkg_file).resolve().parent
    paths = {own}
    for folder, dirs, names in os.walk(root):
        dirs[:] = sorted(d for d in dirs if d not in SKIPPED_DIRS)
        paths.update(Path(folder, n) for n in names if n.endswith(".py"))
    return root.parent, sorted(paths)
