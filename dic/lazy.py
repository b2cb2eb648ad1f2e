"""Public names of a package that load on first use (PEP 562), so ``import dic`` stays light.

Every stage package lists its public names and sub-modules and gets its ``__getattr__`` and
``__dir__`` from :func:`lazy_exports`.
"""

from __future__ import annotations

import importlib
import sys

__all__ = ["lazy_exports"]


def _absolute(package: str, module: str) -> str:
    return module if module == "dic" or module.startswith("dic.") else f"{package}.{module}"


def lazy_exports(package: str, names: dict, modules=()):
    """``__getattr__`` and ``__dir__`` for a package whose public names load on first use.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    names : dict
        Public name -> module defining it (``"reader"`` for ``package.reader``, or a full
        ``dic....`` path).
    modules : iterable of str or dict, optional
        Sub-modules reachable as attributes; a dict maps an attribute to a module path.

    Returns
    -------
    (callable, callable)
        ``__getattr__`` and ``__dir__`` (PEP 562); a loaded value is kept in the package.
    """
    names = {k: _absolute(package, v) for k, v in names.items()}
    modules = {k: _absolute(package, v) for k, v in
               (modules.items() if isinstance(modules, dict) else ((m, m) for m in modules))}

    def __getattr__(name):
        if name in names:
            value = getattr(importlib.import_module(names[name]), name)
        elif name in modules:
            value = importlib.import_module(modules[name])
        else:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        setattr(sys.modules[package], name, value)
        return value

    def __dir__():
        return sorted(set(vars(sys.modules[package])) | set(names) | set(modules))

    return __getattr__, __dir__
