"""Keeping a worker's heap from growing with the slide: fixed glibc malloc thresholds.

glibc's malloc serves large requests with ``mmap`` (returned to the system on ``free``) and
small ones from heaps (kept). Its threshold between the two is dynamic: freeing an mmapped
block raises it to that block's size, up to 32 MiB. A slide's thumbnail-sized arrays (a few MiB
on a small slide, tens on a large one) therefore push the threshold up, the tile pipeline's
block-sized buffers then come from the heaps, and the heaps fragment: peak memory grew by about
half from a 20k- to a 60k-pixel-wide slide (``benchmarks/run_all.py``). Fixing the thresholds
(``mallopt``; the same as the ``MALLOC_MMAP_THRESHOLD_`` and ``MALLOC_TRIM_THRESHOLD_``
environment variables) keeps the blocks of a tiling run out of the heaps; the trim threshold is
set high enough that small buffers freed and reallocated every block do not page-fault again.

References
----------
.. [1] The GNU C Library manual, "Memory Allocation Tunables" and ``mallopt(3)``
   (``M_MMAP_THRESHOLD``, ``M_TRIM_THRESHOLD``).
"""

from __future__ import annotations

import ctypes
import os
import sys

__all__ = ["ENV", "release_free", "steady_heap"]

MMAP_THRESHOLD = 1 << 20  # requests from 1 MiB up are mmapped and returned on free
TRIM_THRESHOLD = 8 << 20  # free memory above this at the heap top goes back to the system
ENV = {"MALLOC_MMAP_THRESHOLD_": str(MMAP_THRESHOLD), "MALLOC_TRIM_THRESHOLD_": str(TRIM_THRESHOLD)}

_M_TRIM_THRESHOLD = -1  # <malloc.h>
_M_MMAP_THRESHOLD = -3
_state: dict = {}


def steady_heap() -> bool:
    """Fix this process's malloc thresholds (glibc on Linux; elsewhere nothing happens).

    Idempotent and cheap; called for every slide of a cohort run (``run_one``: ``tile-out``,
    :func:`tilewright.tile_cohort`, dask workers). Thresholds already chosen through the
    environment variables are left as they are.

    Returns
    -------
    bool
        Whether the thresholds are now the ones in :data:`ENV` (set here or by the environment).
    """
    if "ok" not in _state:
        _state["ok"] = _apply()
    return _state["ok"]


def _apply() -> bool:
    if not sys.platform.startswith("linux"):
        return False
    if any(k in os.environ for k in ENV):
        return all(os.environ.get(k) == v for k, v in ENV.items())
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):  # not glibc (e.g. musl without it): nothing to tune
        return False
    mallopt.argtypes, mallopt.restype = (ctypes.c_int, ctypes.c_int), ctypes.c_int
    return mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD) == 1 and mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD) == 1


def release_free() -> None:
    """Give the heaps' free pages back to the system (``malloc_trim(0)``; glibc only).

    ``tile_slide`` calls it between the slide-sized survey (thumbnail, mask, plan) and the tile
    pipeline, whose own buffers are then laid out in a heap without the survey's holes (only
    when :func:`steady_heap` is in effect).
    """
    if not _state.get("ok"):
        return
    try:
        ctypes.CDLL(None).malloc_trim(0)
    except (OSError, AttributeError):
        pass
