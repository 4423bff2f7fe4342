"""How the compiled kernels become machine code: built ahead of time, or by numba at import.

:mod:`geoops.kernels` and :mod:`geoops.kernels_clean` declare each kernel with
:func:`compiled` (called from Python, with its numba signature) or :func:`inline` (a helper
inlined into kernels). Then, in this order:

1. **Ahead of time.** ``python -m geoops.kernel_build`` (``make`` runs it) compiles every
   kernel with numba's pycc into one extension module beside this file, ``_kernels_aot``, and
   writes a stamp with the digest of the kernel sources, numpy's version and the Python it
   was built for. When the stamp matches what is here, the kernels are that module's
   functions: loading them takes under a millisecond and numba is never imported. Importing
   and initialising numba takes about 0.6 s, a third of a ranger's one-trace job.
2. **Just in time.** Otherwise (no C compiler where it was installed, a kernel edited since
   the build, numpy upgraded) numba compiles the kernels when their module is imported, with
   explicit signatures and ``cache=True``: 15-30 s the first time after a change, then loaded
   from numba's on-disk cache, in a directory named by the digest of all kernel sources
   (under ``NUMBA_CACHE_DIR``, else beside the modules): numba checks only each kernel's own
   file, so a kernel compiled against an older version of a helper in another kernel file
   would be loaded as it was (and crash).

Both give the same numbers (``tests/test_kernel_loader.py``). ``RUTWISE_KERNELS=jit`` forces
the second way (editing a kernel; ``NUMBA_DISABLE_JIT=1`` then runs them as plain Python for
a debugger). The build sets ``RUTWISE_KERNELS=build``: lazily compiled numba functions, which
pycc compiles into the extension.
"""

from __future__ import annotations

import hashlib
import importlib
import os
import sys
from collections.abc import Callable
from functools import cache
from pathlib import Path
from types import ModuleType
from typing import Any

HERE = Path(__file__).resolve().parent
#: the files whose content the extension module is built from
SOURCES = ("kernel_loader.py", "kernels.py", "kernels_clean.py")
AOT_MODULE = "_kernels_aot"
STAMP = HERE / f"{AOT_MODULE}.stamp"

#: every kernel declared with :func:`compiled`: (Python function, numba signature)
REGISTRY: list[tuple[Callable[..., Any], str]] = []


def source_digest() -> str:
    """SHA-256 of the kernel sources, numpy's version and this Python's cache tag: what an
    extension module must have been built from to be used."""
    import numpy

    h = hashlib.sha256()
    for name in SOURCES:
        h.update((HERE / name).read_bytes())
    h.update(f"numpy {numpy.__version__} {sys.implementation.cache_tag}".encode())
    return h.hexdigest()


def _choose(stamp: Path = STAMP) -> tuple[str, ModuleType | None]:
    """The way kernels are made here (``aot``, ``jit`` or ``build``) and the extension module
    when ``aot``."""
    asked = os.environ.get("RUTWISE_KERNELS", "")
    if asked in ("jit", "build"):
        return asked, None
    try:
        if stamp.read_text().strip() != source_digest():
            return "jit", None  # built from other sources: stale
        return "aot", importlib.import_module(f"geoops.{AOT_MODULE}")
    except (OSError, ImportError):
        return "jit", None


MODE, _AOT = _choose()


@cache
def jit_cache_dir(base: str = "") -> str:
    """Where numba caches the kernels compiled from these sources: a directory named by their
    digest, under ``base`` (numba's ``NUMBA_CACHE_DIR``) or beside the modules. Worked out
    once, not for every kernel."""
    return os.path.join(base or str(HERE / "__pycache__"), f"kernels-{source_digest()[:16]}")


def inline(fn: Callable[..., Any]) -> Any:
    """A helper inlined into the kernels that call it (never called from Python)."""
    if MODE == "aot":
        return fn
    from numba import njit

    return njit(nogil=True, inline="always")(fn)


def compiled(signature: str) -> Callable[[Callable[..., Any]], Any]:
    """A kernel called from Python, with its numba ``signature``: the extension module's
    function, or numba's compiled now (cached on disk where numba finds a writable place, in
    memory otherwise). Kernels release the GIL, so threads can run them side by side."""

    def deco(fn: Callable[..., Any]) -> Any:
        REGISTRY.append((fn, signature))
        if MODE == "aot":
            return getattr(_AOT, fn.__name__)
        from numba import njit

        if MODE == "build":
            return njit(nogil=True)(fn)  # compiled by pycc, for the signature above
        from numba.core import config

        # the cache directory of these sources (see the module's docstring), for our kernels only
        before = config.CACHE_DIR  # type: ignore[attr-defined]  # set from the environment
        config.CACHE_DIR = jit_cache_dir(before)  # type: ignore[attr-defined]
        try:
            return njit(signature, cache=True, nogil=True)(fn)
        except RuntimeError:  # no writable cache location
            return njit(signature, nogil=True)(fn)
        finally:
            config.CACHE_DIR = before  # type: ignore[attr-defined]

    return deco
