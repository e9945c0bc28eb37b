"""Keep freed audio buffers in the process for the next block (glibc's ``mallopt``).

Every block of every pass allocates arrays of a few hundred kilobytes to a few megabytes.
By default glibc hands arrays above 128 KiB to the kernel one by one (``mmap``) and gives
them back when freed, so each block's arrays arrive as fresh pages that the kernel must
fault in and zero: about 2.4 million page faults and 6 s of system time for a render of one
hour of stereo stems. Raising the mmap threshold to glibc's ceiling and the heap's trim
threshold above it keeps freed buffers in the heap, where the next block reuses them: 80
thousand page faults, 2 s of system time, the same peak memory
(``benchmarks/README.md``). The command line sets this at start-up; worker processes
started by ``fork`` inherit it.
"""

from __future__ import annotations

import ctypes
import os
import sys

#: ``mallopt`` parameters (glibc ``malloc.h``).
M_TRIM_THRESHOLD = -1
M_MMAP_THRESHOLD = -3
#: Arrays up to this size come from the heap, bytes: glibc's ceiling for the threshold on a
#: 64-bit system (``HEAP_MAX_SIZE / 2``); a larger value is refused.
MMAP_THRESHOLD_BYTES = 32 * 2**20
#: Free memory at the top of the heap is given back to the system beyond this, bytes.
TRIM_THRESHOLD_BYTES = 512 * 2**20
#: Environment variables by which a user tunes glibc's allocator; when one is set, it wins.
_USER_TUNING = ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_", "GLIBC_TUNABLES")


def reuse_freed_buffers() -> bool:
    """Keep freed buffers of up to :data:`MMAP_THRESHOLD_BYTES` in the heap; True if set.

    Does nothing (False) off Linux, on a C library without ``mallopt``, when the user tunes
    the allocator through the environment, or when glibc refuses a value.
    """
    if not sys.platform.startswith("linux") or any(name in os.environ for name in _USER_TUNING):
        return False
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    mallopt.restype = ctypes.c_int
    # both or neither: either one alone stops glibc adapting its threshold and faults more
    # pages than the default (measured: 3.8 and 18.7 million against 2.4 million)
    return bool(mallopt(M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES)) and bool(
        mallopt(M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES)
    )


__all__ = ["reuse_freed_buffers"]
