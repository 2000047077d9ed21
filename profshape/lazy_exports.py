"""Names of a package imported on first use (PEP 562).

A package that re-exports heavy modules (torch, botorch) but whose settings modules
are read by the calibration file's checks declares where each name lives and gets the
module-level ``__getattr__`` and ``__dir__`` from :func:`lazy_exports`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from importlib import import_module
from typing import Any

__all__ = ["lazy_exports"]


def lazy_exports(package: str, where: Mapping[str, str], public: Sequence[str],
                 namespace: dict[str, Any]) -> tuple[Callable[[str], Any], Callable[[], list[str]]]:
    """Module ``__getattr__`` and ``__dir__`` for names imported on first use.

    Parameters
    ----------
    package : str
        The package's ``__name__`` (relative module names resolve against it).
    where : mapping
        Exported name -> relative module that defines it (e.g. ``".engine"``).
    public : sequence of str
        The package's ``__all__``.
    namespace : dict
        The package's ``globals()``; a name is cached there once imported.

    Returns
    -------
    (__getattr__, __dir__)
    """

    def __getattr__(name: str) -> Any:
        if name in where:
            value = getattr(import_module(where[name], package), name)
            namespace[name] = value
            return value
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__() -> list[str]:
        return sorted(set(namespace) | set(public))

    return __getattr__, __dir__
