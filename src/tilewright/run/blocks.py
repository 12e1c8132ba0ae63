"""Reading planned tiles in large blocks instead of one read per tile.

Tiles are grouped by the block of the grid their top-left corner falls in; each block is read once
(the bounding box of its tiles) and cut into tiles. Blocks are read ahead by a small thread pool
(decoding and resampling release the GIL), with a bounded number in flight so that memory stays
flat whatever the slide size.
"""

from __future__ import annotations

import threading
from collections import deque
from concurrent.futures import ThreadPoolExecutor

import numpy as np

__all__ = ["block_order", "iter_tile_blocks"]


def block_order(yx: np.ndarray, tile: int, block: int) -> tuple[np.ndarray, list[np.ndarray]]:
    """Order tiles block by block.

    Parameters
    ----------
    yx : ndarray (N, 2)
        Tile corners in target pixels.
    tile : int
        Tile side.
    block : int
        Nominal block side; rounded up to a multiple of ``tile``.

    Returns
    -------
    order : ndarray (N,)
        Permutation of the tiles: blocks in row-major order, tiles row-major inside a block.
    groups : list of ndarray
        For each non-empty block, the positions in ``order`` of its tiles (consecutive ranges).
    """
    yx = np.asarray(yx, dtype=np.int64).reshape(-1, 2)
    if len(yx) == 0:
        return np.zeros(0, np.int64), []
    side = max(tile, (block // tile) * tile)
    by = yx[:, 0] // side
    bx = yx[:, 1] // side
    order = np.lexsort((yx[:, 1], yx[:, 0], bx, by))
    keys = by[order] * (int(bx.max()) + 1) + bx[order]
    cuts = np.flatnonzero(np.diff(keys)) + 1
    groups = np.split(np.arange(len(order)), cuts)
    return order, groups


def _row_runs(yx: np.ndarray, tile: int) -> list[tuple[int, int, int, np.ndarray]]:
    """Boxes ``(y, x, width, members)`` covering the tiles of a block row by row.

    Tiles sharing a top edge are merged while they touch or overlap along x, so a run is one
    read of exactly the tiles it holds (no glass between tissue tiles is decoded).
    """
    runs = []
    order = np.lexsort((yx[:, 1], yx[:, 0]))
    ys, xs = yx[order, 0], yx[order, 1]
    cut = np.flatnonzero((np.diff(ys) != 0) | (np.diff(xs) > tile)) + 1
    for part in np.split(np.arange(len(order)), cut):
        x0, x1 = int(xs[part[0]]), int(xs[part[-1]]) + tile
        runs.append((int(ys[part[0]]), x0, x1 - x0, order[part]))
    return runs


def _reused(scratch, name: str, shape: tuple) -> np.ndarray:
    """A uint8 array of ``shape`` kept on this thread's ``scratch`` under ``name`` and reused from
    block to block (grown when a block needs more)."""
    need = int(np.prod(shape))
    buf = getattr(scratch, name, None)
    if buf is None or buf.size < need:
        buf = np.empty(need, np.uint8)
        setattr(scratch, name, buf)
    return buf[:need].reshape(shape)


def _read_block(view, yx: np.ndarray, tile: int, scratch=None, reuse: bool = False) -> np.ndarray:
    """The tiles at ``yx`` (one block), read in as few source pixels as possible.

    Either one read of the bounding box, or one read per horizontal run of tiles (when the tiles
    cover the box sparsely, e.g. at tissue borders), whichever touches fewer pixels; overlapping
    tiles (stride < tile) make the box the cheaper choice. With ``reuse`` the tiles land in this
    thread's buffer (see :func:`iter_tile_blocks`).
    """
    y0, x0 = (int(v) for v in yx.min(axis=0))
    y1, x1 = (int(v) for v in yx.max(axis=0) + tile)
    shape = (len(yx), tile, tile, 3)
    out = _reused(scratch, "tiles", shape) if reuse else np.empty(shape, dtype=np.uint8)
    runs = _row_runs(yx, tile)
    if sum(w for _, _, w, _ in runs) * tile < (y1 - y0) * (x1 - x0):
        for y, x, w, members in runs:
            strip = view.read(y, x, tile, w, out=_reused(scratch, "strip", (tile, w, 3)))
            for i in members:
                dx = int(yx[i, 1]) - x
                out[i] = strip[:, dx:dx + tile]
        return out
    region = view.read(y0, x0, y1 - y0, x1 - x0, out=_reused(scratch, "strip", (y1 - y0, x1 - x0, 3)))
    for i, (y, x) in enumerate(yx - (y0, x0)):
        out[i] = region[y:y + tile, x:x + tile]
    return out


def _job(view, yx, tile, process, scratch, reuse):
    tiles = _read_block(view, yx, tile, scratch, reuse)
    return tiles if process is None else process(tiles)


def iter_tile_blocks(view, yx: np.ndarray, tile: int, *, block: int = 2048, threads: int = 2, ahead: int = 2,
                     process=None, reuse: bool = False, groups=None):
    """Yield ``(positions, tiles)`` for each block, in :func:`block_order`.

    Parameters
    ----------
    view : ResampledView
        Source of pixels at the target resolution.
    yx : ndarray (N, 2)
        Tile corners, already in block order (see :func:`block_order`).
    tile, block : int
        Tile side and block side in target pixels.
    threads : int
        Reader threads (1 reads in the calling thread).
    ahead : int
        Blocks read ahead per thread; bounds memory.
    process : callable, optional
        Applied to each block's tiles in the reader thread (normalization, scores); its result is
        yielded instead of the tiles. OpenCV and numpy release the GIL, so this overlaps with
        reading and with the caller's writing.
    reuse : bool
        Read each block into its reader thread's own buffer, reused for the thread's next block
        (no fresh pages to fault in a block). Only when ``process`` returns nothing that refers
        to the tiles it was given (e.g. their compressed bytes).
    groups : list of ndarray, optional
        The blocks :func:`block_order` returned with the order of ``yx`` (saves computing them
        again).
    """
    if reuse and process is None:
        raise ValueError("reuse needs a process that consumes the tiles")
    if groups is None:
        _, groups = block_order(yx, tile, block)
    scratch = threading.local()  # per reader thread: the strip buffer reused from block to block
    # yx is expected in block order already, so groups index yx directly
    if threads <= 1:
        for g in groups:
            yield g, _job(view, yx[g], tile, process, scratch, reuse)
        return
    with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="tilewright-read") as pool:
        pending: deque = deque()
        it = iter(groups)
        for g in it:
            pending.append((g, pool.submit(_job, view, yx[g], tile, process, scratch, reuse)))
            if len(pending) >= threads * ahead:
                break
        while pending:
            g, fut = pending.popleft()
            tiles = fut.result()
            nxt = next(it, None)
            if nxt is not None:
                pending.append((nxt, pool.submit(_job, view, yx[nxt], tile, process, scratch, reuse)))
            yield g, tiles
