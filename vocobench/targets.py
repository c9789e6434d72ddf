"""Importing a user's object named as ``package.module:object`` or ``path/to/file.py:object``.

Shared by the plug-in contracts (vocoders, denoisers) and by users' metrics. A config naming a
target is code: importing it runs the module, as running a Python script would.
"""
from __future__ import annotations

import hashlib
import importlib
import importlib.util
import sys
from pathlib import Path
from typing import Any, Sequence

from .errors import InputError


def resolve(target: str, search_path: Sequence[str | Path] = (), field: str = "vocoder.target") -> Any:
    """Import ``package.module:object`` (or ``path/to/file.py:object``; ``object`` may be dotted)."""
    if not isinstance(target, str) or ":" not in target:
        raise InputError("target must look like 'package.module:object'", field=field,
                         value=target)
    mod_name, _, attr = target.rpartition(":")
    if not mod_name or not attr:
        raise InputError("target must look like 'package.module:object'", field=field,
                         value=target)
    for p in reversed([str(Path(p).resolve()) for p in search_path]):
        if p not in sys.path:
            sys.path.insert(0, p)
    try:
        if mod_name.endswith(".py"):
            path = Path(mod_name)
            if not path.is_file():
                raise InputError("file not found", field=field, value=mod_name)
            tag = hashlib.sha256(str(path.resolve()).encode()).hexdigest()[:8]
            spec = importlib.util.spec_from_file_location(f"vocobench_user_{path.stem}_{tag}", path)
            module = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
            sys.modules[spec.name] = module  # type: ignore[union-attr]
            spec.loader.exec_module(module)  # type: ignore[union-attr]
        else:
            module = importlib.import_module(mod_name)
    except InputError:
        raise
    except Exception as e:  # the user's import failed: report its cause
        raise InputError(f"cannot import '{mod_name}': {type(e).__name__}: {e}",
                         field=field, value=target) from None
    obj: Any = module
    for part in attr.split("."):
        if not hasattr(obj, part):
            raise InputError(f"'{mod_name}' has no attribute '{attr}'", field=field,
                             value=target)
        obj = getattr(obj, part)
    return obj
