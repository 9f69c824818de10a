"""Package-level names that import their module on first use.

A subpackage lists where each public name lives; ``import stelltemp.observing``
then costs nothing (the command line's start-up stays fast) while
``stelltemp.observing.plan_night`` works as if imported eagerly.

Examples
--------
>>> getattr_, dir_ = lazy_exports("stelltemp.catalog", {"load_mapping": "mapping"})
>>> getattr_("load_mapping").__name__
'load_mapping'
"""

import importlib

__all__ = ["lazy_exports"]


def lazy_exports(package, homes):
    """(``__getattr__``, ``__dir__``) for ``package`` whose names live in the submodules ``homes`` maps to."""

    def __getattr__(name):
        if name in homes:
            value = getattr(importlib.import_module(f"{package}.{homes[name]}"), name)
            setattr(importlib.import_module(package), name, value)  # later look-ups skip this hook
            return value
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__():
        return sorted(set(homes) | set(vars(importlib.import_module(package))))

    return __getattr__, __dir__
