"""Names of a package imported on first use (PEP 562), so that importing it stays cheap."""

from __future__ import annotations

import importlib
from typing import Callable


def lazy_names(package: str, namespace: dict, names: dict[str, str]
               ) -> tuple[Callable[[str], object], Callable[[], list[str]]]:
    """``__getattr__`` and ``__dir__`` for a package whose ``names`` (name -> defining
    module) are imported when first asked for and then kept in ``namespace``."""

    def __getattr__(name: str):
        module = names.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        namespace[name] = value
        return value

    def __dir__() -> list[str]:
        return sorted(set(namespace) | set(names))

    return __getattr__, __dir__
