"""Fixed malloc thresholds (tilewright.run.allocator), checked against glibc's own bookkeeping.

Ground truth: ``mallinfo2()`` counts the blocks malloc currently holds as separate mmaps
(``hblks``). glibc raises its mmap threshold to the size of a freed mmapped block (mallopt(3),
M_MMAP_THRESHOLD, "dynamic mmap threshold"), so after a 16 MiB array is freed a 2 MiB array is
served from the heap; with the thresholds fixed it is still mmapped (and returned on free).
"""

import ctypes
import os
import subprocess
import sys

import pytest

_PROBE = r"""
import ctypes, sys
import numpy as np

class MallInfo2(ctypes.Structure):
    _fields_ = [(n, ctypes.c_size_t) for n in
                ("arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks",
                 "fordblks", "keepcost")]

libc = ctypes.CDLL(None)
libc.mallinfo2.restype = MallInfo2
if sys.argv[1] == "steady":
    from tilewright.run.allocator import steady_heap
    assert steady_heap()
big = np.ones(16 << 20, np.uint8)
del big  # the dynamic threshold, if any, is now 16 MiB
before = libc.mallinfo2().hblks
small = np.ones(2 << 20, np.uint8)
print(libc.mallinfo2().hblks - before)
"""


def _glibc_with_mallinfo2() -> bool:
    if not sys.platform.startswith("linux"):
        return False
    try:
        return hasattr(ctypes.CDLL(None), "mallinfo2")
    except OSError:
        return False


@pytest.mark.skipif(not _glibc_with_mallinfo2(), reason="needs glibc >= 2.33 (mallinfo2)")
@pytest.mark.parametrize("mode, mmapped", [("default", 0), ("steady", 1)])
def test_block_sized_buffers_stay_out_of_the_heap(mode, mmapped):
    env = {k: v for k, v in os.environ.items() if not k.startswith("MALLOC_")}
    out = subprocess.run([sys.executable, "-c", _PROBE, mode], capture_output=True, text=True, env=env,
                         check=True).stdout
    assert int(out.strip()) == mmapped


def test_steady_heap_is_idempotent():
    from tilewright.run.allocator import steady_heap

    assert steady_heap() == steady_heap()
