"""Keep freed tensor memory in the process between operations (glibc ``malloc`` settings).

Each element-wise torch operation on a chunk of the root finder's grid allocates an output of about
a megabyte and frees its inputs soon after. glibc's default is to hand such memory back to the system
once the free space at the top of the heap passes a threshold that it adapts at run time (Linux
``mallopt(3)`` man page, M_TRIM_THRESHOLD and M_MMAP_THRESHOLD), so the next operation page-faults the
same memory in again. On the all-roots benchmark that doubled the time of a grid evaluation
(11.5 against 5.8 ms for 4,096 states x 40 levels, 1 thread; benchmarks/README.md, 2026-12-04).
:func:`keep_freed_memory` fixes both thresholds: blocks up to ``mmap_threshold`` come from the heap,
and up to ``trim_threshold`` of free heap is kept for reuse. The defaults (4 and 32 MiB) were the
fastest of four pairs tried and keep the peak memory of a 1e6-state solve within a few MB of
glibc's own; after a large solve up to ``trim_threshold`` stays reserved by the process.

Other C libraries (macOS, Windows, musl) have no such settings: the call does nothing there.
"""
from __future__ import annotations

import ctypes
import ctypes.util

_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3  # glibc <malloc.h>
_MIB = 1 << 20


def keep_freed_memory(mmap_threshold: int = 4 * _MIB, trim_threshold: int = 32 * _MIB) -> bool:
    """Set glibc's mmap and trim thresholds [bytes]; True when the C library took them.

    Called by the command line before every command and by the benchmarks; call it once in a
    Python program that solves large batches.

    >>> isinstance(keep_freed_memory(), bool)
    True
    """
    name = ctypes.util.find_library("c")
    try:
        libc = ctypes.CDLL(name)
        mallopt = libc.mallopt
    except (OSError, AttributeError, TypeError):
        return False
    mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
    return bool(mallopt(_M_MMAP_THRESHOLD, int(mmap_threshold))) and bool(mallopt(_M_TRIM_THRESHOLD, int(trim_threshold)))
