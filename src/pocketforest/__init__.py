"""pocketforest: make random forests transportable.

Kept light on purpose: importing the package loads no fitting library, so scoring a bundle runs
in a slim environment. ``fit`` and ``load_bundle`` are loaded on first use.
"""
from __future__ import annotations

__version__ = "0.1.0"
__all__ = ["fit", "load_bundle", "Bundle", "__version__"]


def __getattr__(name: str):
    if name in ("fit", "load_bundle", "Bundle"):
        from . import api
        return getattr(api, name)
    raise AttributeError(f"module 'pocketforest' has no attribute {name!r}")
