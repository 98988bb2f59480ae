"""The report's section builders, one module per section; importing this package registers
every module in it (a new chain's section is one new module here)."""

from __future__ import annotations

import importlib
import pkgutil

__all__ = ["load_sections"]

_LOADED = False


def load_sections() -> None:
    """Import every section module (each registers itself); once per process."""
    global _LOADED
    if _LOADED:
        return
    for m in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        if not m.name.startswith("_"):
            importlib.import_module(f"{__name__}.{m.name}")
    _LOADED = True
