"""numba's on-disk cache of the engine's kernels, keyed by the source of the whole engine.

numba stamps each cached kernel with a hash of the one file that defines it.  A kernel is compiled together
with the kernels it calls (the step driver, :func:`qmc.engine.steps.run_steps`, carries copies of the sweep,
the loop update and the estimators in its machine code), so after an edit of a callee's file (a ``git
pull``, a changed vertex kind) the cached caller would keep running the callee's old code, silently, in
the package directory and in a shared ``NUMBA_CACHE_DIR`` alike.  :func:`use_engine_stamp` (called when
:mod:`qmc.engine` is imported, before any kernel is defined) gives every kernel defined in this directory
one stamp instead: a hash of all the engine's source files, so that an edit of any of them makes the next
start compile every engine kernel afresh (about 10 s once) and never mixes old and new code.  Kernels
elsewhere keep numba's own stamp.

This uses numba's cache-locator classes (``numba.core.caching``; the class names differ between numba
versions, both spellings are handled).  When none is found, or the user chose locators through
``NUMBA_CACHE_LOCATOR_CLASSES``, nothing changes.
"""

from __future__ import annotations

import functools
import hashlib
import os

from numba.core import caching

__all__ = ["ENGINE_DIR", "engine_source_stamp", "use_engine_stamp"]

ENGINE_DIR = os.path.dirname(os.path.abspath(__file__))
"""The directory whose kernels share one stamp (this package's)."""

_LOCATORS = ("UserProvidedCacheLocator", "InTreeCacheLocator", "UserWideCacheLocator")
"""numba's locators of functions defined in a source file (with or without a leading underscore)."""


@functools.cache
def _hash_sources(directory: str, files: tuple[tuple[str, int, int], ...]) -> bytes:
    """SHA-256 over the names and contents of ``files`` (name, mtime ns, size) of ``directory``; the
    mtimes and sizes are only the memo key, so a file changed while the process runs is hashed again."""
    digest = hashlib.sha256()
    for name, _, _ in files:
        digest.update(name.encode() + b"\0")
        with open(os.path.join(directory, name), "rb") as f:
            digest.update(f.read())
        digest.update(b"\0")
    return digest.digest()


def engine_source_stamp(directory: str = ENGINE_DIR) -> bytes:
    """One stamp for all ``*.py`` files of ``directory``: changes when any of them changes (content or
    name), not when a file is only touched."""
    names = sorted(n for n in os.listdir(directory) if n.endswith(".py"))
    stats = [os.stat(os.path.join(directory, n)) for n in names]
    files = tuple((n, st.st_mtime_ns, st.st_size) for n, st in zip(names, stats, strict=True))
    return _hash_sources(directory, files)


class _EngineStamp:
    """Mixin for a numba locator: kernels of :data:`ENGINE_DIR` get :func:`engine_source_stamp`."""

    _py_file: str

    def get_source_stamp(self) -> object:  # any picklable object (numba's locator interface)
        if os.path.dirname(os.path.abspath(self._py_file)) == ENGINE_DIR:
            return engine_source_stamp()
        return super().get_source_stamp()  # type: ignore[misc]


def use_engine_stamp() -> bool:
    """Install the engine-wide stamp in numba's list of cache locators (idempotent); returns whether it
    is in use.  Must run before the engine's kernels are defined: numba picks a kernel's locator then."""
    impl = getattr(caching, "CacheImpl", None) or getattr(caching, "_CacheImpl", None)
    classes = getattr(impl, "_locator_classes", None)
    if not isinstance(classes, list):
        return False
    if any(issubclass(c, _EngineStamp) for c in classes):
        return True
    replaced = False
    for i, cls in enumerate(classes):
        name = cls.__name__.lstrip("_")
        if name in _LOCATORS:
            classes[i] = type(f"Engine{name}", (_EngineStamp, cls), {"__module__": __name__})
            replaced = True
    return replaced
