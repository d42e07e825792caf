"""Contributed models: worked examples of bringing your own model, outside the built-in registry.

They are reached by path in a spec (``type = "harness.contrib.gp:GaussianProcessAR"``) and are
not registered under a short name, so the built-in list stays the same whatever was imported.
:data:`MODELS` lists their paths; the model contract test checks each of them like a built-in.

* :class:`harness.contrib.gp.GaussianProcessAR`: Gaussian-process autoregression.
"""

from __future__ import annotations

__all__ = ["MODELS"]

#: import paths of the contributed model classes (checked by the model contract test)
MODELS: tuple[str, ...] = ("harness.contrib.gp:GaussianProcessAR",)
