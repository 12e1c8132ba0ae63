"""Same pixels, three readers: tiled TIFF (tiff backend), a DICOM WSI series (dicom backend), OpenSlide.

The DICOM series holds the bench slide's own JPEG tiles as its frames (``dicom_series_from_tiff``:
no re-encoding), so every reader decodes the same JPEG streams and tiles must be identical up to
decoder rounding. Rows (planned 256 px tiles at 0.5 µm/px, computed from level 0):

read      the planned tiles read as tile-out's reader threads read them (``iter_tile_blocks`` over a
          ``ResampledView``: blocks, area downsampling), ``threads`` 1 or 2, for the TIFF, the DICOM
          series, and the DICOM series through OpenSlide;
tile-out  ``tile_cohort`` end to end, one worker, ``threads=1`` (one core), on the TIFF and the series.

The OpenSlide path's use of two reader threads is also measured without trusting the wall clock of a
shared machine: while two reader threads read, a sampler process reads the state of each reader
thread from ``/proc`` every millisecond. A thread that waits for the GIL or for a lock inside
OpenSlide sleeps (state S); one that computes or waits for a core is runnable (R). With ``p`` the
runnable share of each thread, two idle cores would run the two threads at ``p1 + p2`` times one
thread's speed (one thread alone: runnable all the time); the load of other processes does not
change it.

Usage: ``.venv/bin/python benchmarks/formats.py [--rounds 3]`` (also rows of ``make bench``).
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from fixtures import ROOT, bench_slide  # noqa: E402

TILE, MPP = 256, 0.5

_SAMPLER = r"""
import os, sys, time, json
pid, stop = sys.argv[1], sys.argv[2]
counts = {}
while not os.path.exists(stop):
    for tid in os.listdir(f"/proc/{pid}/task"):
        try:
            with open(f"/proc/{pid}/task/{tid}/stat") as fh:
                state = fh.read().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        c = counts.setdefault(tid, {})
        c[state] = c.get(state, 0) + 1
    time.sleep(0.001)
print(json.dumps(counts))
"""


def dicom_copy(tiff: Path, photometric: str | None = None) -> Path:
    """The DICOM series of ``tiff``'s tiles (cached in bench-out/ beside it), labelled
    ``photometric`` (default: see ``dicom_series_from_tiff``)."""
    from tilewright.demo.dicom_series import dicom_series_from_tiff

    folder = ROOT / (f"{tiff.stem}_dicom" + (f"_{photometric}" if photometric else ""))
    if not (folder / "volume_01.dcm").exists():
        tmp = folder.with_name(folder.name + ".tmp")
        shutil.rmtree(tmp, ignore_errors=True)
        t0 = time.perf_counter()
        dicom_series_from_tiff(tiff, tmp, photometric=photometric)
        os.replace(tmp, folder)
        print(f"# wrote {folder.name} ({sum(f.stat().st_size for f in folder.iterdir()) / 1e6:.0f} MB) "
              f"in {time.perf_counter() - t0:.0f} s", flush=True)
    return folder


def plan_for(path):
    """Planned tile corners at 0.5 µm/px on ``path`` (the same for every copy of the pixels), and
    the view's scale (level-0 px per target px)."""
    import tilewright as tw

    cfg = tw.TilingConfig(mpp=MPP, tile=TILE)
    with tw.open(path) as slide:
        view = slide.at_mpp(cfg.mpp)
        mask = tw.tissue_mask(slide, mpp=cfg.mask_mpp)
        plan = tw.plan_tiles(view, mask, tile=cfg.tile, min_tissue=cfg.min_tissue)
        return plan.yx, view.scale


def read_planned(path, yx, *, backend="auto", threads=1, compare=None, sample_states=False):
    """Read every planned tile as tile-out's reader threads do.

    Returns ``(seconds, cpu_seconds, extra)``: ``extra`` is the largest absolute difference from
    ``compare`` (tiles of the same plan, in block order) when given, the runnable share of each
    reader thread when ``sample_states``, else None.
    """
    import tilewright as tw
    from tilewright.run.blocks import block_order, iter_tile_blocks

    order, groups = block_order(yx, TILE, 2048)
    yx = yx[order]
    tids, worst, got = set(), 0, []

    def consume(tiles):
        tids.add(threading.get_native_id())
        return tiles if compare is not None else None

    stop = None
    with tw.open(path, backend=backend) as slide:
        view = slide.at_mpp(MPP)
        if sample_states:
            stop = Path(ROOT) / f".sampler-stop-{os.getpid()}"
            stop.unlink(missing_ok=True)
            sampler = subprocess.Popen([sys.executable, "-c", _SAMPLER, str(os.getpid()), str(stop)],
                                       stdout=subprocess.PIPE, text=True)
            time.sleep(0.2)
        t0, c0 = time.perf_counter(), time.process_time()
        for g, tiles in iter_tile_blocks(view, yx, TILE, threads=threads, process=consume, groups=groups):
            if compare is not None:
                got.append(tiles)
        seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    if compare is not None:
        for a, b in zip(got, compare):
            worst = max(worst, int(np.abs(a.astype(np.int16) - b).max()))
        return seconds, cpu, worst
    if sample_states:
        import json

        stop.touch()
        counts = json.loads(sampler.communicate()[0])
        stop.unlink(missing_ok=True)
        shares = []
        for tid in tids:
            c = counts.get(str(tid), {})
            total = sum(c.values())
            shares.append(c.get("R", 0) / total if total else 0.0)
        return seconds, cpu, shares
    return seconds, cpu, None


def tiles_of(path, yx, backend="auto"):
    """The planned tiles in block order (one thread), for the identity check."""
    import tilewright as tw
    from tilewright.run.blocks import block_order, iter_tile_blocks

    order, groups = block_order(yx, TILE, 2048)
    with tw.open(path, backend=backend) as slide:
        return [t for _, t in iter_tile_blocks(slide.at_mpp(MPP), yx[order], TILE, threads=1, groups=groups)]


def main(argv=None):
    import statistics

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args(argv)
    tiff = bench_slide(24576, 20480)
    series = dicom_copy(tiff)
    yx, _ = plan_for(tiff)
    ref = tiles_of(tiff, yx)
    print(f"{len(yx)} planned tiles; max |tile difference| from the TIFF path: DICOM fast path "
          f"{read_planned(series, yx, compare=ref)[2]}, OpenSlide on the series "
          f"{read_planned(series, yx, backend='openslide', compare=ref)[2]}")
    rows = {"tiff 1t": (tiff, "auto", 1), "dicom 1t": (series, "auto", 1),
            "openslide 1t": (series, "openslide", 1), "openslide 2t": (series, "openslide", 2)}
    res = {k: [] for k in rows}
    for _ in range(args.rounds):
        for key, (path, backend, threads) in rows.items():
            res[key].append(read_planned(path, yx, backend=backend, threads=threads)[:2])
    for key, runs in res.items():
        sec, cpu = min(runs)
        print(f"{key:<14} {len(yx) / sec:8.1f} tiles/s  {len(yx) / cpu:8.1f} tiles per CPU-s")
    ratio = statistics.median(t[0] / d[0] for t, d in zip(res["tiff 1t"], res["dicom 1t"]))
    print(f"DICOM / TIFF tiles/s, one thread (median of rounds): {ratio:.2f}")
    _, _, shares = read_planned(series, yx, backend="openslide", threads=2, sample_states=True)
    _, _, one = read_planned(series, yx, backend="openslide", threads=1, sample_states=True)
    print(f"OpenSlide, runnable share of each reader thread: 2 threads {[round(s, 2) for s in shares]}, "
          f"1 thread {[round(s, 2) for s in one]}; speedup on 2 idle cores ~{sum(shares) / max(one):.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
