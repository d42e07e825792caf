"""Process-level plumbing of a run: start-up cost, signals, and workers that outlive their driver.

* :func:`defer_dask_probe` - xarray asks, on the first DataArray it builds, whether the data is a
  dask array, and to answer imports ``dask.array`` (about 0.5 s) whenever dask is installed,
  although no dask array exists in the process. The probe is replaced by an exact lazy one: an
  object can only be a dask array (or collection) once dask is imported, so until then the
  answer is "no" without importing anything, and afterwards xarray's own check answers. Applied
  in processes the harness owns (the command line, task workers), never behind a library call.
  :func:`defer_dask_probe_on_import` applies it as soon as xarray is imported (the command line
  installs it at start, loky workers in their initializer, before any task is unpickled).
* :func:`interrupt_signals` - SIGTERM and SIGINT in the driver become :class:`RunInterrupted`, so
  the dispatch shuts its pool down (killing the workers) before the driver exits.
* :func:`watch_parent` - a task worker whose driver died (SIGKILL, out of memory) exits within
  about a second instead of computing on, holding the caller's pipes, for the rest of its task
  and its idle timeout.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
import time

from harness.backtest.errors import RunInterrupted

_DEFERRED = False
_WATCHING: int | None = None
#: seconds between two looks of a worker at its parent
WATCH_INTERVAL = 0.5


def defer_dask_probe() -> bool:
    """Make xarray's dask detection lazy (see the module docstring); True when applied.

    A no-op (False) when xarray's internals are not the ones this was written for, so an xarray
    upgrade can cost start-up time but never change results.
    """
    global _DEFERRED
    if _DEFERRED:
        return True
    if "dask.array" in sys.modules:  # the import is paid already: nothing to save
        return False
    try:
        from xarray.core import utils as core_utils
        from xarray.namedarray import pycompat
        from xarray.namedarray import utils as na_utils
    except ImportError:
        return False
    original = getattr(na_utils, "is_dask_collection", None)
    cache = getattr(pycompat, "_cached_duck_array_modules", None)
    base = getattr(pycompat, "DuckArrayModule", None)
    if original is None or not isinstance(cache, dict) or base is None or "dask" in cache:
        return False

    class _LazyDaskType(type):
        def __instancecheck__(cls, obj) -> bool:
            mod = sys.modules.get("dask.array")
            return mod is not None and isinstance(obj, mod.Array)

        def __subclasscheck__(cls, sub) -> bool:
            mod = sys.modules.get("dask.array")
            return mod is not None and issubclass(sub, mod.Array)

    class DaskArrayType(metaclass=_LazyDaskType):
        """Stands for ``dask.array.Array`` until dask is imported."""

    class LazyDaskModule(base):
        def __init__(self):  # noqa: D107 - the parent's __init__ would import dask
            self.type = (DaskArrayType,)

        @property
        def module(self):
            import dask

            return dask

        @property
        def version(self):
            from importlib.metadata import version

            from packaging.version import Version

            return Version(version("dask"))

        @property
        def available(self) -> bool:
            import importlib.util

            return importlib.util.find_spec("dask") is not None

    def is_dask_collection(x) -> bool:
        return "dask" in sys.modules and original(x)

    cache["dask"] = LazyDaskModule()
    na_utils.is_dask_collection = is_dask_collection
    if getattr(core_utils, "is_dask_collection", None) is original:
        core_utils.is_dask_collection = is_dask_collection
    _DEFERRED = True
    return True


class _AfterXarrayImport:
    """A meta-path finder that runs :func:`defer_dask_probe` right after ``import xarray`` completes."""

    def find_spec(self, name, path=None, target=None):
        if name != "xarray":
            return None
        import importlib.util

        with contextlib.suppress(ValueError):
            sys.meta_path.remove(self)
        spec = importlib.util.find_spec(name)
        loader = getattr(spec, "loader", None)
        if loader is None or not hasattr(loader, "exec_module"):
            return spec
        original = loader.exec_module

        def exec_module(module):
            original(module)
            defer_dask_probe()

        loader.exec_module = exec_module  # this loader instance serves this one import only
        return spec


def defer_dask_probe_on_import() -> None:
    """Apply :func:`defer_dask_probe` now if xarray is loaded, else right after it is imported."""
    if "xarray" in sys.modules:
        defer_dask_probe()
    elif not any(isinstance(f, _AfterXarrayImport) for f in sys.meta_path):
        sys.meta_path.insert(0, _AfterXarrayImport())


def worker_init(driver_pid: int) -> None:
    """Initializer of a loky worker: lazy dask probe, and leave when the driver is gone."""
    defer_dask_probe_on_import()
    watch_parent(driver_pid)


@contextlib.contextmanager
def interrupt_signals():
    """SIGTERM/SIGINT raise :class:`RunInterrupted` inside the block (main thread only; else a no-op)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise RunInterrupted(signum)

    previous = {}
    for sig in (signal.SIGTERM, signal.SIGINT):
        try:
            previous[sig] = signal.signal(sig, handler)
        except (ValueError, OSError):  # not allowed here (embedded interpreter)
            pass
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)


def watch_parent(driver_pid: int) -> bool:
    """In a worker process started by the driver ``driver_pid``: exit once that driver is gone.

    Only a direct child of the driver watches (loky workers; not the driver itself when it runs
    tasks inline, nor dask workers, whose nanny does this). A daemon thread looks at the parent
    pid every :data:`WATCH_INTERVAL` seconds; when the driver has died the worker is re-parented
    and leaves with ``os._exit`` (its task files are written atomically, so nothing half-written
    is left; a temporary file at most, which ``vintage-harness cache clean`` removes).
    """
    global _WATCHING
    if _WATCHING is not None or os.getpid() == driver_pid or os.getppid() != driver_pid:
        return False
    _WATCHING = driver_pid

    def loop():
        while True:
            time.sleep(WATCH_INTERVAL)
            if os.getppid() != driver_pid:
                os._exit(0)

    threading.Thread(target=loop, name="harness-parent-watch", daemon=True).start()
    return True
