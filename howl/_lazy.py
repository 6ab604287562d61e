"""Lazy re-exports for the subpackages' curated APIs (PEP 562).

Each subpackage lists its public names and the private module that defines each;
``from howl.model import plan_rig`` then imports only ``howl.model.plan`` (and what it
needs), so a command pays for the modules it uses and no more.
"""

from __future__ import annotations

import importlib
from typing import Callable


def lazy_exports(package: str, names: dict[str, str]) -> tuple[Callable[[str], object], Callable[[], list[str]]]:
    """``__getattr__`` and ``__dir__`` for ``package``: ``names`` maps a public name to its module."""

    def __getattr__(name: str) -> object:
        mod = names.get(name)
        if mod is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(f"{package}.{mod}"), name)
        return value

    def __dir__() -> list[str]:
        return sorted(names)

    return __getattr__, __dir__
