"""The glibc allocator tweak the Monte Carlo workers apply once per process (no-op off Linux)."""

from __future__ import annotations

import os
import sys

#: glibc allocator settings applied by :func:`tune_allocator`: temporaries below the mmap threshold are recycled from
#: the heap instead of being mapped and page-faulted afresh on every numpy operation (which costs more than the
#: arithmetic at these array sizes); freed memory above the trim threshold still goes back to the system.
MMAP_THRESHOLD = 32 * 1024 * 1024
TRIM_THRESHOLD = 128 * 1024 * 1024
_ALLOCATOR_TUNED: bool | None = None


def tune_allocator() -> bool:
    """Raise glibc's mmap and trim thresholds once per process (no-op elsewhere); True if applied.

    Set MCMATCH_KEEP_MALLOC=1 to leave the allocator alone.
    """
    global _ALLOCATOR_TUNED
    if _ALLOCATOR_TUNED is None:
        _ALLOCATOR_TUNED = False
        if os.environ.get("MCMATCH_KEEP_MALLOC") != "1" and sys.platform.startswith("linux"):
            try:
                import ctypes

                libc = ctypes.CDLL("libc.so.6")
                m_trim_threshold, m_mmap_threshold = -1, -3
                _ALLOCATOR_TUNED = bool(
                    libc.mallopt(m_mmap_threshold, MMAP_THRESHOLD) and libc.mallopt(m_trim_threshold, TRIM_THRESHOLD)
                )
            except (OSError, AttributeError):
                pass
    return _ALLOCATOR_TUNED
