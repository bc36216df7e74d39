"""Lazy public names for packages: ``import aspectus`` stays fast and light.

A package lists its public names and the module each comes from; the module
is imported the first time the name is used (PEP 562 module ``__getattr__``).
So ``import aspectus.events`` does not load the face mesh, and
``aspectus.process_clip`` loads it only when called for.
"""
from __future__ import annotations

import importlib


def attach(package: str, exports: dict[str, str]):
    """``(__getattr__, __dir__, __all__)`` for ``package`` exporting ``{name: module}`` lazily."""
    names = sorted(exports)

    def __getattr__(name: str):
        mod = exports.get(name)
        if mod is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(mod), name)
        globals_ = importlib.import_module(package).__dict__
        globals_[name] = value  # later look-ups skip this function
        return value

    def __dir__():
        return sorted(set(names) | set(importlib.import_module(package).__dict__))

    return __getattr__, __dir__, names
