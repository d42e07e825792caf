"""Resolving model types and reading constructors: the one place that imports user code.

* :func:`constructor_params` — the keyword parameters a class's ``__init__`` accepts (used by
  the spec parser, :func:`harness.models.make_model`, ``BaseModel.params`` and the adapter).
* :func:`load_object` — ``package.module:Attr`` or ``path/to/file.py:Attr``. A spec is code:
  importing a user's model runs that module. Modules are imported from installed packages or
  from the file a spec names, never implicitly from the current working directory.
"""

from __future__ import annotations

import hashlib
import importlib
import importlib.util
import inspect
import os
import sys
from pathlib import Path
from typing import Any

__all__ = ["constructor_params", "load_object"]


def constructor_params(cls) -> set[str] | None:
    """Names of the keyword parameters of ``cls.__init__`` (None when it takes ``**kwargs``)."""
    try:
        sig = inspect.signature(cls.__init__)
    except (TypeError, ValueError):
        return None
    if any(p.kind is p.VAR_KEYWORD for p in sig.parameters.values()):
        return None
    return {p.name for p in sig.parameters.values()
            if p.name != "self" and p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)}


def ordered_constructor_params(cls) -> list[str]:
    """The same names in signature order (``params()`` keeps the constructor's order)."""
    sig = inspect.signature(cls.__init__)
    return [p.name for p in sig.parameters.values()
            if p.name != "self" and p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)]


def _without_cwd():
    """sys.path without the entry Python adds implicitly for the current directory.

    ``python -m``/``-c`` and the interactive interpreter put '' or the working directory first;
    paths the user named explicitly (PYTHONPATH, installed packages) stay.
    """
    path = list(sys.path)
    if path and path[0] in ("", ".", os.getcwd()):
        path = path[1:]
    return path


def _import_module(name: str):
    if name.startswith(".") or not all(part.isidentifier() for part in name.split(".")):
        raise ImportError(f"{name!r} is not an absolute module name")
    if name in sys.modules:
        return sys.modules[name]
    saved = sys.path[:]
    sys.path[:] = _without_cwd()
    try:
        return importlib.import_module(name)
    finally:
        sys.path[:] = saved


def _import_file(path: Path):
    if not path.is_file():
        raise ImportError(f"no such file {path}")
    # one module per file path, named after its digest so two files named alike never collide
    name = f"_harness_user_{path.stem}_{hashlib.sha256(str(path).encode()).hexdigest()[:10]}"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)
    if spec is None or spec.loader is None:
        raise ImportError(f"cannot load {path} as a Python module")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    try:
        spec.loader.exec_module(module)
    except BaseException:
        del sys.modules[name]
        raise
    return module


def load_object(path: str, *, what: str = "object") -> Any:
    """Import ``package.module:Attr`` or ``/abs/or/rel/file.py:Attr`` (``Attr`` may be dotted).

    Raises
    ------
    ImportError
        One line naming the part that failed (module, file or attribute).
    """
    mod_name, sep, attr = path.rpartition(":") if path.count(":") > 1 else path.partition(":")
    if not sep or not mod_name or not attr:
        raise ImportError(f"{what} path {path!r} is malformed; expected 'package.module:Class' or "
                          "'path/to/file.py:Class'")
    try:
        if mod_name.endswith(".py") or "/" in mod_name or os.sep in mod_name:
            module = _import_file(Path(mod_name).resolve())
        else:
            module = _import_module(mod_name)
    except ImportError as exc:
        raise ImportError(f"{what} path {path!r}: cannot import module {mod_name!r} ({exc}); a module must be "
                          "installed or named by its file path") from None
    except Exception as exc:  # the user's module raised while importing
        raise ImportError(f"{what} path {path!r}: importing {mod_name!r} failed with "
                          f"{type(exc).__name__}: {exc}".splitlines()[0]) from None
    obj: Any = module
    for part in attr.split("."):
        try:
            obj = getattr(obj, part)
        except AttributeError:
            raise ImportError(f"{what} path {path!r}: module {mod_name!r} has no attribute {attr!r}") from None
    return obj
