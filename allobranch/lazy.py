"""Public names of a package imported on first use (a module ``__getattr__``, PEP 562).

A package lists its public names and the module each comes from; the name's module is imported only when
the name is first used, so that light uses of the package (the command line's ``--help``, ``check``) do
not import the sampler stack or a converter's libraries.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from importlib import import_module
from typing import Any


def lazy_getattr(
    package: str, table: Mapping[str, str], cache: dict[str, Any] | None = None
) -> Callable[[str], Any]:
    """A package's module ``__getattr__`` that imports each name of ``table`` from its module on first use.

    Parameters
    ----------
    package : str
        The package's name (``__name__``), for the message of an unknown name.
    table : mapping
        Public name -> the module that defines it.
    cache : dict, optional
        The package's ``globals()``: a name once imported is kept there, so later uses do not come back
        here. Leave it out where a public name is also a sub-module's name (caching the name would hide
        the sub-module).

    Returns
    -------
    callable
        ``__getattr__(name)``, raising :class:`AttributeError` for a name not in ``table``.

    Examples
    --------
    >>> getattr_ = lazy_getattr("pkg", {"sqrt": "math"})
    >>> getattr_("sqrt")(9.0)
    3.0
    """

    def __getattr__(name: str) -> Any:
        if name not in table:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(import_module(table[name]), name)
        if cache is not None:
            cache[name] = value
        return value

    return __getattr__
