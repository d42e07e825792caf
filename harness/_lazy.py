"""Heavy modules loaded on first use: ``special`` stands for :mod:`scipy.special`.

Importing :mod:`scipy.special` costs about 0.4-0.7 s (its array-API layer), which a command
that reads cached results never needs; the statistical modules refer to ``special.ndtr`` and
the like through this stand-in, which imports SciPy the first time an attribute is asked for.
"""

from __future__ import annotations


class _LazyModule:
    def __init__(self, name: str):
        self._name = name

    def __getattr__(self, attr: str):
        import importlib

        module = importlib.import_module(self._name)
        self.__dict__[attr] = value = getattr(module, attr)  # later look-ups skip __getattr__
        return value


special = _LazyModule("scipy.special")
