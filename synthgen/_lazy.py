"""Public names of a package that load their module on first use (PEP 562), so importing one
light module of a package does not import its heavy siblings."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from importlib import import_module


def lazy_exports(package: str, exports: Mapping[str, str], *, also: tuple[str, ...] = ()) -> tuple[Callable, Callable]:
    """``(__getattr__, __dir__)`` for ``package`` whose public name ``n`` lives in module ``exports[n]``
    (``also``: names the package defines itself, listed by ``dir``).

    >>> getattr_, dir_ = lazy_exports("demo", {"sqrt": "math"})
    >>> getattr_("sqrt")(9.0)
    3.0
    >>> getattr_("nope")
    Traceback (most recent call last):
    AttributeError: module 'demo' has no attribute 'nope'
    """

    def __getattr__(name: str):
        if name in exports:
            return getattr(import_module(exports[name]), name)
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__():
        return sorted([*exports, *also])

    return __getattr__, __dir__
