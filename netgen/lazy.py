"""Lazy package faces: a room's public names load their module on first use.

Every room's ``__init__`` holds an ``_EXPORTS`` table (public name -> module of the room that
defines it) and binds ``__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)``, so importing a
room costs nothing and pulls in no heavy dependency (PEP 562, module ``__getattr__``/``__dir__``).
"""

from __future__ import annotations

import sys
from importlib import import_module

__all__ = ["lazy_exports"]


def lazy_exports(package: str, exports: dict[str, str]):
    """The module-level ``__getattr__`` and ``__dir__`` of PACKAGE for its EXPORTS table.

    A name is looked up in its module on first access and then bound in the package's globals,
    so later accesses are plain attribute reads.
    """
    names = sorted(exports)

    def __getattr__(name: str):
        try:
            module = exports[name]
        except KeyError:
            raise AttributeError(f"module {package!r} has no attribute {name!r}") from None
        value = getattr(import_module(f"{package}.{module}"), name)
        setattr(sys.modules[package], name, value)
        return value

    def __dir__() -> list[str]:
        return list(names)

    return __getattr__, __dir__
