"""Lazy public names of a package: ``import cavchar.tracking`` stays cheap, and a name is
imported from the module that defines it on first use (PEP 562 module ``__getattr__``)."""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping


def lazy_exports(package: str, public: Mapping[str, str | tuple[str, str]], *eager: str
                 ) -> tuple[list[str], Callable[[str], object], Callable[[], list[str]]]:
    """``__all__``, ``__getattr__`` and ``__dir__`` of a package whose public names live in
    submodules.

    Parameters
    ----------
    package
        The package's ``__name__`` (used in the error message).
    public
        Public name -> dotted name of the module that defines it, or ``(module, name
        there)`` when the public name differs from the module's.
    eager
        Names the package defines itself (listed first in ``__all__``).
    """
    names = [*eager, *public]

    def __getattr__(name: str) -> object:
        if name in public:
            where = public[name]
            module, attribute = where if isinstance(where, tuple) else (where, name)
            return getattr(importlib.import_module(module), attribute)
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__() -> list[str]:
        return sorted(names)

    return names, __getattr__, __dir__
