"""A numba cache locator keyed by source content, not by where the source lives.

numba's own ``UserProvidedCacheLocator`` (used when ``NUMBA_CACHE_DIR`` is set) files the
compiled kernels of ``a/b/c.py`` under ``<cache>/b_<sha1 of the absolute folder a/b>``, so a
second checkout (or a second virtual environment, which holds its own copy of
pythermalcomfort) of the very same version compiles everything again. numba 0.68 already
checks a cache entry against a hash of the source file's content (its "source stamp"); this
locator also names the folder by that content, so identical sources share entries wherever
they are. A changed source gets a folder of its own and compiles once.

numba loads this class by name from ``NUMBA_CACHE_LOCATOR_CLASSES``, which
:mod:`thermowarden` sets before numba is imported (unless the variable is already set).
Importing this module imports numba: only numba itself does, when it caches a function.
"""

from __future__ import annotations

import hashlib
import os

from numba.core.caching import UserProvidedCacheLocator


class ContentKeyedCacheLocator(UserProvidedCacheLocator):
    """``UserProvidedCacheLocator`` whose sub-folder is named by the source file's content."""

    @classmethod
    def get_suitable_cache_subpath(cls, py_file: str) -> str:
        path = os.path.abspath(py_file)
        with open(path, "rb") as fh:
            digest = hashlib.sha1(fh.read()).hexdigest()
        folder = os.path.basename(os.path.dirname(path))
        stem = os.path.splitext(os.path.basename(path))[0]
        return f"{folder}_{stem}_{digest}"
