"""Fetching the stored tiles of several rows at once, for slides whose file is in an object store.

A read of a region fetches each row of tiles it touches (adjacent tiles of a row in one read, see
:meth:`tilewright.slide.tile_grid.GridReader._fetch_row`). Locally that is a positional read a row,
cheap whatever the count. From a bucket each is a request, so :class:`RowFetch` (a base of
``GridReader``) requests all rows of a region together (in flight at once, ranges less than 1 MiB
apart merged into one request by the client), and :meth:`RowFetch.prefetch` does so ahead of a
view's strip-by-strip reads of one region: a block of tiles, or one tile, waits about one request.
"""

from __future__ import annotations

from tilewright.errors import DamagedSlideError

__all__ = ["RowFetch"]


class RowFetch:
    """Row fetching for :class:`~tilewright.slide.tile_grid.GridReader` (see the module docstring)."""

    def _fetch_rows(self, lv, r0: int, r1: int, c0: int, c1: int) -> list[list]:
        """The tiles of columns ``c0..c1`` in rows ``r0..r1``, row by row (see :meth:`_fetch_row`).

        From a file in an object store, the rows are requested together (one range a row whose
        tiles lie together, all in flight at once, neighbours coalesced by the client), so a read
        waits about one request's latency however many rows it touches.
        """
        spans = [(lv.offsets[r * lv.grid_w + c0: r * lv.grid_w + c1 + 1],
                  lv.counts[r * lv.grid_w + c0: r * lv.grid_w + c1 + 1]) for r in range(r0, r1 + 1)]
        if not getattr(lv.fd, "remote", False):
            return [self._fetch_row(offs, cnts, lv.fd) for offs, cnts in spans]
        kept = getattr(self._scratch, "prefetched", None)
        if kept:  # fetched ahead by prefetch(): taken (and let go) tile by tile
            idx = [range(r * lv.grid_w + c0, r * lv.grid_w + c1 + 1) for r in range(r0, r1 + 1)]
            if all((id(lv), i) in kept for row in idx for i in row):
                return [[kept.pop((id(lv), i)) for i in row] for row in idx]
        if len(spans) == 1:
            return [self._fetch_row(offs, cnts, lv.fd) for offs, cnts in spans]
        ranges = []
        for offs, cnts in spans:
            stored = cnts > 0
            if not stored.any():
                ranges.append(None)
                continue
            lo, hi = int(offs[stored].min()), int((offs + cnts)[stored].max())
            ranges.append((lo, hi) if hi - lo <= int(cnts.sum()) + 65536 else None)  # else tile by tile
        wanted = [r for r in ranges if r is not None]
        got = iter(lv.fd.pread_many([lo for lo, _ in wanted], [hi - lo for lo, hi in wanted]) if wanted else [])
        out = []
        for (offs, cnts), span in zip(spans, ranges):
            if span is None:
                out.append(self._fetch_row(offs, cnts, lv.fd))
                continue
            buf = memoryview(next(got))
            if len(buf) < span[1] - span[0]:
                raise DamagedSlideError("truncated tile data", self.path)
            out.append([buf[o - span[0]: o - span[0] + n] if n else b"" for o, n in zip(offs.tolist(), cnts.tolist())])
        return out

    def prefetch(self, level: int, y: int, x: int, h: int, w: int) -> None:
        """Fetch the tiles of a region of a file in an object store at once, for this thread's next
        reads of them: a view reads a region strip by strip (one row of tiles each), which would
        otherwise wait for one request a strip. A local file needs nothing (no-op)."""
        lv = self._levels[level]
        if not getattr(lv.fd, "remote", False) or h <= 0 or w <= 0:
            return
        ya, yb, xa, xb = max(0, y), min(lv.height, y + h), max(0, x), min(lv.width, x + w)
        if ya >= yb or xa >= xb:
            return
        r0, r1, c0, c1 = ya // lv.tile_h, (yb - 1) // lv.tile_h, xa // lv.tile_w, (xb - 1) // lv.tile_w
        self._scratch.prefetched = None  # the previous region's leftovers go
        rows = self._fetch_rows(lv, r0, r1, c0, c1)
        self._scratch.prefetched = {(id(lv), r * lv.grid_w + c): data
                                    for r, row in zip(range(r0, r1 + 1), rows) for c, data in zip(range(c0, c1 + 1), row)}
