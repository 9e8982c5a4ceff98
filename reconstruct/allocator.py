"""Keep large freed arrays in the heap instead of returning them to the system.

Each LSQR iteration allocates and frees several arrays of millions of values.
glibc hands allocations above a size threshold to ``mmap`` and unmaps them when
freed, so every iteration page-faults its arrays back in. Raising the mmap
and trim thresholds lets freed blocks be reused; measured here on the
foundation benchmark (840,000 cells), one LSQR iteration took 0.037 s instead
of 0.15 s. The setting is process-wide, so the library never applies it on its
own: the command-line layer and the benchmarks call
:func:`keep_freed_memory_for_reuse` once at start-up.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import sys

__all__ = ["keep_freed_memory_for_reuse"]

_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3


def keep_freed_memory_for_reuse(threshold_bytes: int = 1 << 30) -> bool:
    """Raise glibc's mmap and trim thresholds; return True if applied.

    A no-op (returning False) where the C library is not glibc.
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
    mallopt.restype = ctypes.c_int
    threshold = int(min(threshold_bytes, 2**31 - 1))
    ok_mmap = mallopt(_M_MMAP_THRESHOLD, threshold)
    ok_trim = mallopt(_M_TRIM_THRESHOLD, threshold)
    return bool(ok_mmap and ok_trim)
