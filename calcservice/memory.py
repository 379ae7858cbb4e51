"""Keep freed memory in the process for the next request.

By default glibc hands a freed block at the top of the heap back to the kernel once more than
128 KiB (adjusted upwards as it goes) lies free there, so each catalogue-sized temporary array of
the engine is faulted in page by page afresh: on a linear batch of 10^5 systems that was about
60 000 page faults and a third of the time.  A worker that keeps up to ``trim_bytes`` of free
heap reuses it instead.  Only glibc's ``mallopt`` is touched; elsewhere this does nothing.
``CALCSERVICE_KEEP_FREED_MEMORY=0`` turns it off.
"""

from __future__ import annotations

import ctypes
import os

M_TRIM_THRESHOLD = -1       # glibc malloc.h
M_MMAP_THRESHOLD = -3

MIB = 1024 * 1024


def keep_freed_memory(trim_bytes: int = 512 * MIB, mmap_bytes: int = 32 * MIB) -> bool:
    """Raise glibc's trim threshold (and fix its mmap threshold at its usual ceiling, 32 MiB);
    True if the allocator took the settings."""
    if os.environ.get("CALCSERVICE_KEEP_FREED_MEMORY", "1").strip().lower() in ("0", "false", "no", "off"):
        return False
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    return bool(mallopt(M_MMAP_THRESHOLD, mmap_bytes)) and bool(mallopt(M_TRIM_THRESHOLD, trim_bytes))
