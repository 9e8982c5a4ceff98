"""Are the compiled travel-time kernels in numba's on-disk cache?

The eikonal solver and the ray tracer are compiled by numba on their first
call and cached on disk (``njit(cache=True)``). A first run on a new install
(or after the kernels' source changed) spends about 30 s compiling before the
first travel-time field; :func:`kernels_need_compiling` lets a caller say so
before the silence starts.
"""

from __future__ import annotations

__all__ = ["COMPILING_MESSAGE", "kernels_need_compiling"]

#: What a command says before a first run compiles the kernels (measured: 25 to 35 s on 2 cores).
COMPILING_MESSAGE = "compiling the travel-time kernels (first run only, about 30 s)"


def _entry_kernels():
    from reconstruct.forward import eikonal, ray_tracing

    return (eikonal._march, eikonal._straight_time, eikonal._ball_seeds, eikonal._smooth_flags,
            eikonal._factor_region, eikonal._label_region, ray_tracing._trace_all, ray_tracing._polyline_cells)


def kernels_need_compiling() -> bool:
    """True when any travel-time kernel has no valid entry in numba's cache.

    Reads numba's cache index (the source file's time stamp must match, as
    numba itself checks). When the index cannot be read (an older or newer
    numba), returns True only if no kernel has been compiled in this process.
    """
    kernels = _entry_kernels()
    try:
        return any(not kernel.signatures and not kernel._cache._cache_file._load_index() for kernel in kernels)
    except Exception:  # numba internals differ: fall back to what this process knows
        return not any(kernel.signatures for kernel in kernels)
