"""Freed memory given back to the operating system between the large stages of a build.

glibc's allocator raises its threshold for serving large blocks by ``mmap`` each time such a block
is freed (up to 32 MiB), so after one stage frees many arrays of some megabytes, the next arrays of
that size come from the heap, and the heap keeps the pages it once held: a million-page build kept
over a gigabyte it no longer used (measured). ``malloc_trim(0)`` hands the free pages back
(glibc ≥ 2.8 also returns pages in the middle of the heap); elsewhere nothing is done.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import sys
from functools import lru_cache


@lru_cache(maxsize=1)
def _trim():
    if not sys.platform.startswith("linux"):
        return None
    try:
        library = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        return library.malloc_trim
    except (OSError, AttributeError):  # not glibc (musl has no malloc_trim)
        return None


def release_memory() -> bool:
    """Give the allocator's free pages back to the system; whether it could be asked (glibc only)."""
    trim = _trim()
    if trim is None:
        return False
    trim(0)
    return True
