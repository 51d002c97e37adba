"""Lazy re-exports for package ``__init__`` modules (PEP 562 module ``__getattr__``).

A package lists its public names and the module each lives in; the module is imported on first
access only, so ``import synth`` (and ``synth --help``) does not load OpenCV, SciPy or PyAV.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable

__all__ = ["lazy_exports"]


def lazy_exports(package: str, exports: dict[str, str]) -> tuple[Callable[[str], object], Callable[[], list[str]]]:
    """Module-level ``__getattr__`` and ``__dir__`` for `package` re-exporting `exports`.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    exports : dict of str to str
        Public name -> absolute module name that defines it.

    Returns
    -------
    (callable, callable)
        Assign them to the package's ``__getattr__`` and ``__dir__``.
    """

    def __getattr__(name: str) -> object:
        try:
            module = exports[name]
        except KeyError:
            raise AttributeError(f"module {package!r} has no attribute {name!r}") from None
        return getattr(importlib.import_module(module), name)

    def __dir__() -> list[str]:
        return sorted(exports)

    return __getattr__, __dir__
