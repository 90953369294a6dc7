"""One pythermalcomfort model at a time, without importing the other forty.

``from pythermalcomfort.models import utci`` runs the package's ``__init__``, which imports
every model module, and each module builds its numba ufunc wrappers at import even when the
compiled kernels load from the cache: 2-5 CPU s per process, for models this service never
calls. :func:`model` imports only the module that defines the asked-for function (and what
that module itself imports). The package's ``__init__`` still runs, in full, the first time
anyone else asks ``pythermalcomfort.models`` for a name it has not loaded (a test comparing
against the library, say), so other code sees the package exactly as the library ships it.

The modules it imports also build their module-level numba ufuncs (``@vectorize``) only
when one is first called (:class:`_LazyUfunc`): building a ufunc's wrapper costs about half
a CPU second per ufunc in every process, even when its code loads from numba's cache, and
most of them (the cooling-effect SET variant beside the two-node kernel, say) are never
called here. A ufunc used from other compiled code would need the real object, so only
ufuncs of the modules imported through :func:`model` are deferred.

Methods and results are pythermalcomfort's own (version pinned in pyproject.toml).
"""

from __future__ import annotations

import importlib
import importlib.util
import sys
import types
from typing import Any

_PACKAGE = "pythermalcomfort.models"


class _LazyModels(types.ModuleType):
    """``pythermalcomfort.models`` whose ``__init__`` runs on the first name it lacks."""

    _complete = False

    def __getattr__(self, name: str) -> Any:
        if name.startswith("__") or self._complete:
            raise AttributeError(name)
        self._complete = True
        spec = self.__spec__
        assert spec is not None and spec.loader is not None
        spec.loader.exec_module(self)  # the package's own __init__, in this module
        return getattr(self, name)


def _package() -> types.ModuleType:
    found = sys.modules.get(_PACKAGE)
    if found is not None:
        return found
    importlib.import_module("pythermalcomfort")
    spec = importlib.util.find_spec(_PACKAGE)
    if spec is None or spec.loader is None:  # pragma: no cover - a broken install
        return importlib.import_module(_PACKAGE)
    module = importlib.util.module_from_spec(spec)
    module.__class__ = _LazyModels
    sys.modules[_PACKAGE] = module
    return module


class _LazyUfunc:
    """A numba ``@vectorize`` ufunc built on its first call or attribute lookup."""

    def __init__(self, decorator: Any, py_func: Any) -> None:
        self._decorator = decorator
        self._py_func = py_func
        self._built: Any = None
        self.__name__ = getattr(py_func, "__name__", "ufunc")
        self.__doc__ = getattr(py_func, "__doc__", None)

    def _ufunc(self) -> Any:
        if self._built is None:
            self._built = self._decorator(self._py_func)
        return self._built

    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        return self._ufunc()(*args, **kwargs)

    def __getattr__(self, name: str) -> Any:
        if name.startswith("__"):
            raise AttributeError(name)
        return getattr(self._ufunc(), name)


def _import_deferring_ufuncs(name: str) -> types.ModuleType:
    if name in sys.modules:
        return sys.modules[name]
    import numba

    real: Any = numba.vectorize

    def lazy_vectorize(*args: Any, **kwargs: Any) -> Any:
        if len(args) == 1 and callable(args[0]) and not kwargs:  # bare @vectorize
            return real(args[0])
        decorator = real(*args, **kwargs)
        return lambda py_func: _LazyUfunc(decorator, py_func)

    numba.vectorize = lazy_vectorize  # seen by `from numba import vectorize` during import
    try:
        return importlib.import_module(name)
    finally:
        numba.vectorize = real


def model(module: str, name: str | None = None) -> Any:
    """pythermalcomfort's ``models.<module>.<name>`` (``name`` defaults to ``module``)."""
    package = _package()
    submodule = _import_deferring_ufuncs(f"{_PACKAGE}.{module}")
    value = getattr(submodule, name or module)
    if isinstance(package, _LazyModels) and not package._complete:
        # importing the submodule bound the module under its own name on the package, where
        # the package's __init__ binds the function of that name: leave the name unset, so
        # the first lookup runs the __init__ and finds what the library ships
        package.__dict__.pop(module, None)
    return value
