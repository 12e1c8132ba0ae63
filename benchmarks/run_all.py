"""``make bench``: tile-out against raw decoding and the hand-written loop, in one run, one table.

Generated slides (cached in ``bench-out/``; first run ~5 min to generate on 2 cores): synthetic
H&E, 0.25 µm/px ("40x", common practice), JPEG q90 256 px tiles, Aperio-style pyramid with
levels at downsample 1, 4, 16 (so 0.5 µm/px is computed from level 0 by everyone):

* main: 24576 x 20480 px, ~1/3 tissue (4 islands), JPEG in YCbCr 4:2:0 (tifffile's default);
* the same pixels as RGB JPEG without subsampling (4:4:4, as some scanners write; 3x the bytes);
* 4 names (hard links) of main, for the 1-worker / 2-worker comparison;
* main's own JPEG tiles stored as the frames of a DICOM WSI series (no re-encoding: same pixels);
* a copy of main whose level 0 also carries an ICC profile (the demo's wide-gamut scanner-B
  profile): the same pixels, converted to sRGB on reading (colour management's cost);
* memory: 20480 x 16384 and 61440 x 51200 px, mostly glass with tissue islands of ~1.2 mm.

Rows, all on the main slide's planned tiles (256 px at 0.5 µm/px, min_tissue 0.5). Every rate is
compared with raw decoding on as many threads (cores) as the row uses: like for like.

raw decode    imagecodecs (libjpeg-turbo): decode exactly the level-0 JPEG tiles under the planned
              tiles, from bytes read beforehand, each into a fresh array; 1 thread, or 2 threads
              each decoding half of them (the limit of the 2-thread and 2-worker rows);
hand loop     OpenSlide read_region(512 px, level 0) per tile, cv2 INTER_AREA to 256, one zarr
              write per tile (tile-out's default codec, one tile a chunk), 1 thread;
tile-out      tile_cohort (what the tile-out command runs) with the given workers/threads, QC
              overlay on, timed end to end (mask, plan, reads, normalization, store, manifest);
              "progress bar drawn": the same with tile-out's terminal display fed every event.
read          the planned tiles read as tile-out's reader threads read them (blocks of a view at
              0.5 µm/px), from the TIFF, the DICOM series (frame backend), the series through
              OpenSlide (see benchmarks/formats.py; it also estimates the OpenSlide path's use of
              two threads from the reader threads' states, which the load of a shared machine
              does not change).
one core      benchmarks/one_core.py in a child process pinned to one CPU: tile_slide(threads=1)
              against raw decoding on that CPU (CPU seconds of every thread), with and without the
              damaged-JPEG check, with Macenko and an ICC profile; the check's own cost; DICOM
              frames against TIFF tiles of the same streams (4:2:0, 4:4:4, a label that disagrees);
              and where one core's time goes, stage by stage.

Then, on the stores the lz4 and jpeg rows wrote: random reads against the chunk codec alone and
zarr-python's own read (``store_reads.py``); and the codec table on the demo tiles: bytes,
PSNR/SSIM against the lossless tile, encode/decode speed (``compression.py``).

"source MP/s" counts the level-0 pixels behind the stored tiles (512 x 512 a tile). Every row runs
once a round, ``--rounds`` (5) interleaved rounds, so load that drifts on a shared machine hits
all rows alike; the table shows each row's fastest run (the slow hand loop runs in the first round
only), and each aim's ratio is the median over the rounds of two rates measured in the same round,
printed with its range over the rounds. An aim below its mark prints MISSED (a regression guard
for whoever runs the bench; no test asserts a speed). Peak memory: fresh processes, small and large
slide alternated, medians. The load average is printed before and after.

Usage: ``.venv/bin/python benchmarks/run_all.py [--skip-memory]``
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
logging.getLogger("distributed").setLevel(logging.ERROR)  # no cluster chatter between the rows
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402

import compression  # noqa: E402
import one_core  # noqa: E402
import store_reads  # noqa: E402
from fixtures import bench_slide, demo_tiles, peak_rss_mib_of, profiled_copy, slide_copies  # noqa: E402
from formats import dicom_copy, plan_for, read_planned, tiles_of  # noqa: E402

TILE, MPP = 256, 0.5
CPU = [None]  # CPU seconds of this process during the last measurement (None: other processes worked)


def raw_decoder(path, yx, scale):
    """``run(threads) -> (seconds, cpu)``: decode, on ``threads`` threads, every level-0 tile that
    a planned tile's footprint touches, from bytes read once here (each decode into a fresh array,
    as a plain imagecodecs call does; imagecodecs releases the GIL while decoding)."""
    import imagecodecs

    from one_core import needed_tiles

    backend, lv, data = needed_tiles(path, yx, scale)
    backend.close()
    tables = lv.jpegtables

    def part(chunk):
        for _, d in chunk:
            imagecodecs.jpeg8_decode(d, tables=tables)

    def run(threads=1):
        t0, c0 = time.perf_counter(), time.process_time()
        if threads <= 1:
            part(data)
        else:
            from concurrent.futures import ThreadPoolExecutor

            with ThreadPoolExecutor(threads) as pool:
                list(pool.map(part, [data[i::threads] for i in range(threads)]))
        seconds = time.perf_counter() - t0
        CPU[0] = time.process_time() - c0
        return seconds, len(data)

    return run


@contextlib.contextmanager
def _cv2_one_thread():
    """OpenCV on one thread meanwhile (the hand loop's resize is documented as single-threaded)."""
    import cv2

    threads = cv2.getNumThreads()
    cv2.setNumThreads(1)
    try:
        yield
    finally:
        cv2.setNumThreads(threads)


def hand_loop(path, yx, scale, out):
    """What people write by hand: one level-0 read a tile, resize, one zarr write a tile."""
    import cv2
    import openslide
    import zarr

    import tilewright as tw
    from tilewright.store.writer import compressor

    src = int(round(TILE * scale))
    arr = zarr.create_array(str(out), shape=(len(yx), TILE, TILE, 3), chunks=(1, TILE, TILE, 3),
                            dtype="uint8", overwrite=True, compressors=compressor(tw.TilingConfig().compression))
    s = openslide.OpenSlide(str(path))
    with _cv2_one_thread():
        t0, c0 = time.perf_counter(), time.process_time()
        for i, (y, x) in enumerate(yx):
            region = np.asarray(s.read_region((int(round(x * scale)), int(round(y * scale))), 0, (src, src)))[..., :3]
            arr[i] = cv2.resize(region, (TILE, TILE), interpolation=cv2.INTER_AREA)
        seconds = time.perf_counter() - t0
    CPU[0] = time.process_time() - c0
    s.close()
    return seconds


def display():
    """What tile-out feeds on a terminal: the rich bar (into a terminal-like buffer) and log lines."""
    import io

    from rich.console import Console

    from tilewright.cli.progress import RichProgress
    from tilewright.run.events import LogProgress

    bar = RichProgress(1, console=Console(file=io.StringIO(), force_terminal=True, width=120))
    lines = LogProgress()

    def listen(event):
        lines(event)
        bar(event)

    return bar, listen


def cohort(paths, out, cfg, *, client=None, target=None, shown=False):
    """Run tile_cohort into a fresh ``out``; ``target`` (a fitted normalizer dict) is saved there
    first, as a resumed or distributed run finds it (so no cohort stain estimate is made)."""
    import json

    import tilewright as tw
    from tilewright.run.cohort import stain_target_path

    shutil.rmtree(out, ignore_errors=True)
    if target is not None:
        Path(out).mkdir(parents=True)
        stain_target_path(out, target["method"]).write_text(json.dumps(target))
    bar, listen = display() if shown else (contextlib.nullcontext(), None)
    t0, c0 = time.perf_counter(), time.process_time()
    with bar:
        res = tw.tile_cohort([str(p) for p in paths], out, cfg, scheduler=client, workers=1, progress=False,
                             on_progress=listen)
    seconds = time.perf_counter() - t0
    CPU[0] = None if client is not None else time.process_time() - c0
    bad = [r for r in res if r.status != "ok"]
    if bad:
        raise SystemExit(f"benchmark run failed: {bad[0].error}")
    return seconds, sum(r.n_tiles for r in res), res


def store_bytes(store):
    files = [f for f in (Path(store) / "tiles").rglob("*") if f.is_file() and f.name != "zarr.json"]
    return sum(f.stat().st_size for f in files)


def _largest_difference(tiff, series, yx, tiff_store, dicom_store):
    """Largest absolute difference of the planned tiles read from the DICOM series (fast path, then
    OpenSlide) and of the stored tiles, against the TIFF path's."""
    import tilewright as tw

    ref = tiles_of(tiff, yx)
    fast = read_planned(series, yx, compare=ref)[2]
    slow = read_planned(series, yx, backend="openslide", compare=ref)[2]
    a, b = tw.open_store(tiff_store), tw.open_store(dicom_store)
    stored = max(int(np.abs(a[i:i + 64].astype(np.int16) - b[i:i + 64]).max()) for i in range(0, len(a), 64)) \
        if len(a) == len(b) and np.array_equal(a.yx, b.yx) else "plans differ"
    return fast, slow, stored


def local_client(n, warm_slide, warm_dir, pinned=False):
    """The local cluster ``tile-out --workers n`` starts, its workers warmed up like this process
    (modules imported, a few tiles cut), as they are through most of a long cohort run. With
    ``pinned`` each worker process runs on a CPU of its own (the last ``n`` CPUs), so that one
    worker on one core compares like for like with two workers on two."""
    from distributed import Client

    from tilewright.run.execute import local_cluster

    cluster = local_cluster(n)
    client = Client(cluster)
    if pinned:
        cpus = sorted(os.sched_getaffinity(0))[-n:]
        for cpu, address in zip(cpus, sorted(client.scheduler_info()["workers"])):
            client.run(_pin_process, cpu, workers=[address])
    client.run(_warm_worker, str(warm_slide), str(warm_dir))
    return client, cluster


def _pin_process(cpu):
    """Keep every thread of this process (and those it starts later) on ``cpu``."""
    for tid in os.listdir("/proc/self/task"):
        try:
            os.sched_setaffinity(int(tid), {cpu})
        except OSError:  # a thread that ended meanwhile
            pass


def _warm_worker(slide, folder):
    import tilewright as tw

    tw.tile_slide(slide, Path(folder) / f"w{os.getpid()}", tw.TilingConfig(mpp=MPP, max_tiles=8, qc_overlay=False))


def main(argv=None):
    import json
    import statistics

    import tilewright as tw

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--skip-memory", action="store_true", help="skip the peak-memory runs")
    ap.add_argument("--copies", type=int, default=4, help="slides in the 1- vs 2-worker comparison")
    ap.add_argument("--rounds", type=int, default=5, help="interleaved rounds of every timed row")
    args = ap.parse_args(argv)
    t_start = time.perf_counter()
    load0 = os.getloadavg()
    main_slide = bench_slide(24576, 20480)
    small = big = None
    if not args.skip_memory:
        small = bench_slide(20480, 16384, islands=2, island_um=1200)
        big = bench_slide(61440, 51200, islands=6, island_um=1200)
    rgb_slide = bench_slide(24576, 20480, jpeg_colours="rgb")
    copies = slide_copies(main_slide, args.copies)
    series = dicom_copy(main_slide)
    from tilewright.demo.icc import SCANNER_B, matrix_trc_profile

    icc_slide = profiled_copy(main_slide, matrix_trc_profile(**SCANNER_B), "scanner-b-icc")
    yx, scale = plan_for(main_slide)
    n = len(yx)
    src_mp = n * (TILE * scale) ** 2 / 1e6
    tmp = Path(tempfile.mkdtemp(prefix="tw-bench-"))
    base = tw.TilingConfig(mpp=MPP, tile=TILE)
    one = base.replace(threads=1)
    mac_cfg = base.replace(normalizer="macenko")
    many = len(copies)
    clients = {}
    results = {}  # key -> list of (seconds, tiles, cpu) per round

    decoders = {"main": raw_decoder(main_slide, yx, scale), "rgb": raw_decoder(rgb_slide, yx, scale)}

    def raw(name, threads):
        def run():
            sec, _ = decoders[name](threads)
            return sec, n, CPU[0]
        return run

    def reader(path, backend, threads):
        def run():
            sec, cpu, _ = read_planned(path, yx, backend=backend, threads=threads)
            return sec, n, cpu
        return run

    def out(paths, name, cfg, workers=None, target=None, shown=False, pinned=False):
        def run():
            if workers:  # a fresh, warmed-up cluster a round: idle clusters would disturb the other rows
                clients[workers] = local_client(workers, main_slide, tmp / "warm", pinned)
            try:
                sec, k, res = cohort(paths, tmp / name, cfg, client=clients[workers][0] if workers else None,
                                     target=target, shown=shown)
            finally:
                if workers:
                    client, cluster = clients.pop(workers)
                    client.close()
                    cluster.close()
            results.setdefault(name + ":res", res)
            return sec, k, CPU[0]
        return run

    try:
        # warm-up: page cache holds the slides, modules are imported (as in any long cohort run)
        tw.tile_slide(main_slide, tmp / "warm", tw.TilingConfig(mpp=MPP, max_tiles=8, qc_overlay=False))
        # the profile's table is built once a process (a cohort from one scanner builds it once)
        tw.tile_slide(icc_slide, tmp / "warm-icc", tw.TilingConfig(mpp=MPP, max_tiles=8, qc_overlay=False))
        decoders["main"](1)
        cohort([main_slide], tmp / "mac-target", mac_cfg)
        target = json.loads((tmp / "mac-target" / "stain_target.macenko.json").read_text())
        rows = [  # key, label, run, source MP, note
            ("raw", "raw decode: imagecodecs, needed level-0 tiles, 1 thread", raw("main", 1), src_mp,
             f"{4 * n} JPEG tiles, bytes read before"),
            ("raw2", "raw decode, the same, 2 threads", raw("main", 2), src_mp, "half the tiles each"),
            ("loop", "hand loop: OpenSlide 512 px/tile + INTER_AREA + zarr", None, src_mp, "first round only"),
            ("tw", "tile-out, 1 worker (threads=2), no normalization", out([main_slide], "tw", base), src_mp,
             "defaults: lz4, JPEG check on"),
            ("shown", "tile-out, 1 worker (threads=2), progress bar drawn", out([main_slide], "shown", base,
                                                                              shown=True),
             src_mp, "what a terminal run adds: bar + log lines"),
            ("icc", "tile-out, 1 worker (threads=2), + embedded ICC profile",
             out([icc_slide], "icc", base), src_mp, "same slide; profile applied (sRGB)"),
            ("nv", "tile-out, 1 worker (threads=2), --no-verify-jpeg",
             out([main_slide], "nv", base.replace(verify_jpeg=False)), src_mp, "without the damaged-JPEG check"),
            ("mac", "tile-out, 1 worker (threads=2), Macenko, new cohort", out([main_slide], "mac", mac_cfg),
             src_mp, "incl. the cohort stain target"),
            ("mac2", "tile-out, 1 worker (threads=2), Macenko, target known",
             out([main_slide], "mac2", mac_cfg, target=target), src_mp, "per-slide cost in a large cohort"),
            ("zstd", "tile-out, 1 worker (threads=2), compression=zstd",
             out([main_slide], "zstd", base.replace(compression="zstd")), src_mp, "smaller store, more CPU"),
            ("jpeg", "tile-out, 1 worker (threads=2), compression=jpeg q90",
             out([main_slide], "jpeg", base.replace(compression="jpeg", quality=90)), src_mp, "lossy, 4:4:4"),
            ("webp", "tile-out, 1 worker (threads=2), compression=webp",
             out([main_slide], "webp", base.replace(compression="webp")), src_mp, "lossless WebP"),
            ("in1", f"tile-out, 1 worker in-process (threads=1), {many} slides", out(copies, "in1", one),
             src_mp * many, "helper threads use a little of the 2nd core"),
            ("in2", f"tile-out, 1 worker in-process (threads=2), {many} slides", out(copies, "in2", base),
             src_mp * many, "one worker's threads already use 2 cores"),
            ("d1", f"tile-out, 1 worker on a local dask cluster, {many} slides",
             out(copies, "d1", one, workers=1, pinned=True), src_mp * many, "threads=1; the worker on 1 CPU"),
            ("d2", f"tile-out, 2 workers on a local dask cluster, {many} slides",
             out(copies, "d2", one, workers=2, pinned=True), src_mp * many, "threads=1; a CPU each (--workers 2)"),
            ("rgbraw", "raw decode, RGB-JPEG copy of the slide, 2 threads", raw("rgb", 2), src_mp,
             "same pixels, RGB JPEG 4:4:4"),
            ("rgb", "tile-out, 1 worker (threads=2), RGB-JPEG copy", out([rgb_slide], "rgb", base), src_mp, "defaults"),
            ("t1", "tile-out, 1 worker (threads=1), tiled TIFF", out([main_slide], "t1", one), src_mp, "one core"),
            ("dcm1", "tile-out, 1 worker (threads=1), DICOM series", out([series], "dcm1", one), src_mp,
             "same JPEG tiles as frames"),
            ("rtif", "read planned tiles, tiled TIFF, 1 thread", reader(main_slide, "auto", 1), src_mp, "tiff backend"),
            ("rdcm", "read planned tiles, DICOM series, 1 thread", reader(series, "auto", 1), src_mp, "dicom backend"),
            ("ros1", "read planned tiles, DICOM via OpenSlide, 1 thread", reader(series, "openslide", 1), src_mp,
             "OpenSlide backend"),
            ("ros2", "read planned tiles, DICOM via OpenSlide, 2 threads", reader(series, "openslide", 2), src_mp,
             "wall clock: starved on a loaded machine"),
        ]
        for r in range(args.rounds):  # every row once a round: drifting load hits all rows alike
            for key, _, run, _, _ in rows:
                if key == "loop":
                    if r == 0:
                        sec = hand_loop(main_slide, yx, scale, tmp / "loop.zarr")
                        results[key] = [(sec, n, CPU[0])]
                    continue
                results.setdefault(key, []).append(run())
        same_tiles = _largest_difference(main_slide, series, yx, results["t1:res"][0].store, results["dcm1:res"][0].store)
        _, _, states = read_planned(series, yx, backend="openslide", threads=2, sample_states=True)
        _, _, single = read_planned(series, yx, backend="openslide", threads=1, sample_states=True)
        bytes_per_tile = store_bytes(results["tw:res"][0].store) / n
        zstd_bytes = store_bytes(results["zstd:res"][0].store) / n
        codec_bytes = {k: store_bytes(results[k + ":res"][0].store) / n for k in ("jpeg", "webp")}
        reads = {"lz4": store_reads.measure(results["tw:res"][0].store),
                 "jpeg q90": store_reads.measure(results["jpeg:res"][0].store)}
        core = one_core.measure(args.rounds, stages=True)  # its own process, pinned to one CPU
        demo = demo_tiles()
        codec_rows = compression.measure(demo, compression.store_codecs())
        memory = []
        if not args.skip_memory:
            for _ in range(args.rounds):  # alternate the slides; the median is kept (heap layout varies)
                for p in (small, big):
                    for overlay in ("1", "0"):
                        rss, text = peak_rss_mib_of("memory_probe", str(p), "2", overlay)
                        memory.append((p, overlay, rss, int(text.split()[0])))
    finally:
        for client, cluster in clients.values():
            client.close()
            cluster.close()
        shutil.rmtree(tmp, ignore_errors=True)

    def best(key):
        return min(results[key], key=lambda t: t[0])

    def per_round(key_a, key_b, mp_a=1.0, mp_b=1.0):
        """rate(a) / rate(b) of each round (both measured in the same round)."""
        pairs = zip(results[key_a], results[key_b]) if len(results[key_b]) > 1 else \
            ((x, results[key_b][0]) for x in results[key_a][:1])
        return [(mp_a / a[0]) / (mp_b / b[0]) for a, b in pairs]

    def extra(key_base, key):
        """The extra time of ``key`` over ``key_base`` in %, each round."""
        return [100 * (r - 1) for r in per_round(key_base, key)]

    # like for like: each row against raw decoding on as many threads as the row uses
    two = {"raw2", "tw", "shown", "icc", "nv", "mac", "mac2", "zstd", "jpeg", "webp", "in2", "d2", "rgb", "ros2"}
    limit = {key: ("rgbraw" if key == "rgb" else "raw2" if key in two else "raw") for key, *_ in rows}
    print()
    print(f"tilewright {tw.__version__} | slide {main_slide.name}: 24576 x 20480 px at 0.25 µm/px -> "
          f"{n} tiles of {TILE} px at {MPP} µm/px ({src_mp:.0f} source MP) | {os.cpu_count()} CPUs | "
          f"{args.rounds} interleaved rounds, fastest shown; x raw: against raw decoding on as many threads "
          f"(1 or 2) as the row uses")
    head = (f"{'method':<58}{'tiles':>6}{'s':>7}{'tiles/s':>8}{'src MP/s':>9}{'x loop':>7}{'x raw':>6}"
            f"{'CPU s':>7}  note")
    print(head)
    print("-" * len(head))
    loop_rate = src_mp / best("loop")[0]
    for key, label, _, mp, note in rows:
        sec, tiles, cpu = best(key)
        cpu_txt = f"{cpu:>7.2f}" if cpu else f"{'-':>7}"
        raw_rate = src_mp / best(limit[key])[0]
        print(f"{label:<58}{tiles:>6d}{sec:>7.2f}{tiles / sec:>8.0f}{mp / sec:>9.1f}{mp / sec / loop_rate:>7.2f}"
              f"{mp / sec / raw_rate:>6.2f}{cpu_txt}  {note}")
    print("-" * len(head))
    print(f"same pixels, other readers: largest |tile difference| from the TIFF path: DICOM fast path "
          f"{same_tiles[0]}, DICOM through OpenSlide {same_tiles[1]}; stored tiles (tile-out, TIFF vs DICOM) "
          f"{same_tiles[2]}")
    print(f"OpenSlide path, share of the time each reader thread is runnable (not waiting for the GIL or a "
          f"lock): 2 threads {', '.join(f'{v:.2f}' for v in states)}; 1 thread {single[0]:.2f}")
    print(f"stored bytes per tile: default blosc-lz4 {bytes_per_tile:,.0f} "
          f"({100 * bytes_per_tile / (TILE * TILE * 3):.0f} % of raw {TILE * TILE * 3:,}); "
          f"blosc-zstd {zstd_bytes:,.0f} ({100 * zstd_bytes / (TILE * TILE * 3):.0f} %); "
          + "; ".join(f"{k} {v:,.0f} ({100 * v / (TILE * TILE * 3):.1f} %)" for k, v in codec_bytes.items()))
    print()
    core_aims = one_core.report(core)
    print()
    read_aims = store_reads.print_table(reads, TILE * TILE * 3)
    print()
    compression.print_rows(codec_rows, len(demo))
    peak = {}
    for p, overlay, rss, k in memory:
        peak.setdefault((p, overlay), []).append(rss)
    for p in (small, big) if memory else ():
        with tw.open(p) as sl:
            h, w = sl.dimensions
        print(f"peak RSS, one worker (threads=2), {w} x {h} px slide: median {statistics.median(peak[p, '1']):,.0f} "
              f"MiB ({statistics.median(peak[p, '0']):,.0f} MiB without the QC overlay); runs "
              f"{', '.join(f'{v:.0f}' for v in peak[p, '1'])}")
    print()
    aims = [  # (label, value or per-round values, aim text, limit: >= limit, or <= -limit when negative)
        ("tile-out / hand loop (source MP/s)", per_round("tw", "loop"), ">= 3.5", 3.5),
        *core_aims,
        ("2 threads: tile-out 1 worker / raw decode", per_round("tw", "raw2"), ">= 0.7", 0.7),
        ("  the same with --no-verify-jpeg", per_round("nv", "raw2"), ">= 0.7", 0.7),
        ("  the same on the RGB-JPEG copy", per_round("rgb", "rgbraw"), ">= 0.7", 0.7),
        ("tile-out jpeg q90 / tile-out lz4", per_round("jpeg", "tw"), ">= 0.8", 0.8),
        ("progress display extra time, %", extra("tw", "shown"), "< 2", -2),
        ("2 workers / 1 worker, a CPU each, on dask", per_round("d2", "d1"), ">= 1.8", 1.8),
        ("  2 workers / 1 unpinned worker in-process", per_round("d2", "in1"), "info", None),
        ("DICOM fast path / TIFF, tile-out 1 thread", per_round("dcm1", "t1"), ">= 0.9", 0.9),
        ("  the same, reading the planned tiles", per_round("rdcm", "rtif"), ">= 0.9", 0.9),
        ("OpenSlide path 2 / 1 threads, from thread states", sum(states) / max(single[0], 1e-9), ">= 1.7", 1.7),
        ("  the same, wall clock (load starves it)", per_round("ros2", "ros1"), ">= 1.7", 1.7),
    ]
    if memory:
        s_med, b_med = statistics.median(peak[small, "1"]), statistics.median(peak[big, "1"])
        s_pl, b_pl = statistics.median(peak[small, "0"]), statistics.median(peak[big, "0"])
        aims += [("peak RSS 60k-wide vs 20k-wide, %", 100 * (b_med / s_med - 1), "< 20", -20),
                 ("  the same without the QC overlay, %", 100 * (b_pl / s_pl - 1), "< 20", -20),
                 ("peak RSS 60k-wide (MiB)", b_med, "<= 1536", -1536)]
    jpeg_row = next(r for r in codec_rows if "quality 90" in r["label"])
    aims += [(f"jpeg q90 bytes, % of raw (PSNR {jpeg_row['psnr']:.1f} dB)", jpeg_row["pct"], "<= 15", -15),
             ("jpeg q90 PSNR against the lossless tile, dB", jpeg_row["psnr"], ">= 40", 40)]
    aims += [(label, value, f">= {aim}", aim) for label, value, aim in read_aims]
    print("aims: ratios are medians over the rounds of rates measured in the same round, (range over the "
          "rounds); 'one core' rows: CPU seconds in a process pinned to one CPU (benchmarks/one_core.py)")
    missed = []
    for name, value, aim, mark in aims:
        values = value if isinstance(value, list) else [value]
        med = statistics.median(values)
        spread = f"{med:.2f} ({min(values):.2f}-{max(values):.2f})" if len(values) > 1 else f"{med:.2f}"
        if mark is None:
            print(f"{name:<52}{spread:>22}   {aim}")
            continue
        ok = med >= mark if mark > 0 else med <= -mark
        missed += [] if ok else [name.strip()]
        print(f"{name:<52}{spread:>22}   aim {aim:<8} {'met' if ok else 'MISSED'}")
    print(f"aims missed: {len(missed)} of {sum(a[3] is not None for a in aims)}"
          + (f" ({'; '.join(missed)})" if missed else ""))
    load1 = os.getloadavg()
    print(f"\nload average (1 min) before {load0[0]:.1f}, after {load1[0]:.1f}; "
          f"total {time.perf_counter() - t_start:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
