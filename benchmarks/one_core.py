"""One core, like for like: ``tile_slide`` on one thread against raw JPEG decoding, on one CPU.

Everything here runs in a child process pinned to one CPU (``sched_setaffinity`` before any
thread starts, so every thread it creates shares that CPU: the reader, the side threads that draw the
QC picture and fit the stain estimate, the codec's own threads). Times are CPU seconds of the
whole process (all its threads), which a shared machine's load disturbs far less than the wall
clock; every row runs once a round, rows interleaved, and each ratio is taken within a round
(median and range over the rounds are printed). Rows, on the main bench slide (planned 256-px
tiles at 0.5 µm/px, computed from level-0 JPEG 4:2:0 tiles):

raw      imagecodecs (libjpeg-turbo) decodes exactly the level-0 JPEG tiles under the planned
         tiles, from bytes read beforehand, each into a fresh array (a plain call);
best     the same decodes into one reused buffer 16 bytes off a 32-byte boundary, as tilewright's
         reader decodes (libjpeg-turbo writes 32-byte-aligned rows with non-temporal stores that
         bypass the cache, so a fresh array costs more when malloc happens to align it);
         the limit the aims are set against is the faster of the two in each round;
tile     ``tile_slide(threads=1)``, defaults: damaged-JPEG check on, lz4, QC picture;
fixed    the same with one tile (``max_tiles=1``): what a slide costs besides its tiles (open,
         thumbnail, tissue mask, plan, store pictures, QC picture, source digest, commit);
nv       ``tile`` with the damaged-JPEG check off; icc: the same slide with an embedded ICC
         profile (applied); mac: Macenko with the cohort's stain target known;
check    the damaged-JPEG check's own cost: the needed tiles decoded through the reader's
         checked path against a plain decode into the same buffer (4:2:0: strict decode; 4:4:4:
         sentinel MCU row);
dicom    the planned tiles read from DICOM series holding the same JPEG streams against the
         TIFF, checks on: 4:2:0 labelled YBR_FULL_422, 4:4:4 labelled YBR_FULL, and 4:4:4
         labelled YBR_FULL_422 (a label that disagrees with the streams, as converters write).

``--stages`` adds instrumented ``tile_slide`` runs (the median of three): the CPU each stage took,
in % of the raw decode (what stands between ``tile`` and the limit). ``--callgrind`` runs the
raw decode and ``tile_slide`` once each under ``valgrind --tool=callgrind`` and compares their
instruction counts (deterministic, blind to cache misses; slow).

Usage: ``.venv/bin/python benchmarks/one_core.py [--rounds 5] [--stages] [--callgrind]``
(``make bench`` runs it through ``run_all.py``).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

TILE, MPP = 256, 0.5
DICOM_CASES = (("420", None), ("444", "YBR_FULL"), ("444", None))  # None: labelled YBR_FULL_422


def slides():
    """The slides measured (generated once, cached in bench-out/)."""
    from fixtures import bench_slide, profiled_copy
    from formats import dicom_copy
    from tilewright.demo.icc import SCANNER_B, matrix_trc_profile

    main = bench_slide(24576, 20480)
    s444 = bench_slide(24576, 20480, jpeg_colours="ycbcr444")
    out = {"main": main, "444": s444, "icc": profiled_copy(main, matrix_trc_profile(**SCANNER_B), "scanner-b-icc")}
    for kind, label in DICOM_CASES:
        out[f"dicom {kind} {label or 'YBR_FULL_422'}"] = dicom_copy(main if kind == "420" else s444, label)
    return out


def needed_tiles(path, yx, scale):
    """Bytes of the level-0 tiles under the planned tiles (read now, not timed), and the level's
    shared JPEG tables."""
    from tilewright.slide.tiff_backend import TiffBackend

    backend = TiffBackend(str(path), verify_jpeg=True)
    lv = backend._levels[0]
    src = int(round(TILE * scale))
    need = set()
    for y, x in (yx * scale).round().astype(int):
        for r in range(y // lv.tile_h, (y + src - 1) // lv.tile_h + 1):
            for c in range(x // lv.tile_w, (x + src - 1) // lv.tile_w + 1):
                need.add(r * lv.grid_w + c)
    data = [(i, backend._pread(int(lv.counts[i]), int(lv.offsets[i]))) for i in sorted(need)]
    return backend, lv, data


# -- the child: every measurement, on one CPU ---------------------------------------------------
def _child(rounds: int, stages: bool) -> dict:
    import imagecodecs
    import numpy as np

    import tilewright as tw
    from formats import plan_for, read_planned
    from tilewright.slide.tile_pixels import offset_tile_buffer
    from tilewright.stain.registry import transfer_from_dict

    paths = slides()
    yx, scale = plan_for(paths["main"])
    backend, lv, data = needed_tiles(paths["main"], yx, scale)
    b444, lv444, data444 = needed_tiles(paths["444"], yx, scale)
    tables = lv.jpegtables
    buf = offset_tile_buffer((lv.tile_h, lv.tile_w))
    tmp = Path(tempfile.mkdtemp(prefix="tw-one-core-"))
    base = tw.TilingConfig(mpp=MPP, tile=TILE, threads=1)
    mac = base.replace(normalizer="macenko")
    tw.tile_cohort([str(paths["main"])], tmp / "target", mac, workers=1, progress=False)
    target = transfer_from_dict(json.loads((tmp / "target" / "stain_target.macenko.json").read_text()))

    def raw():
        for _, d in data:
            imagecodecs.jpeg8_decode(d, tables=tables)

    def best():
        for _, d in data:
            imagecodecs.jpeg8_decode(d, tables=tables, out=buf)

    def plain(b, level, tiles):
        def run():
            for i, d in tiles:
                b._decode(level, d, i)
        return run

    def checked(b, level, tiles):
        def run():
            for i, d in tiles:
                if not b._decode_verified(level, d, i)[1]:
                    raise SystemExit(f"intact tile {i} refused")
        return run

    def slide(path, cfg, target=None):
        def run():
            shutil.rmtree(tmp / "out", ignore_errors=True)
            tw.tile_slide(path, tmp / "out", cfg, target=target)
        return run

    def planned(path):
        return lambda: read_planned(path, yx, threads=1)

    rows = {
        "raw": raw, "best": best,
        "tile": slide(paths["main"], base), "fixed": slide(paths["main"], base.replace(max_tiles=1)),
        "nv": slide(paths["main"], base.replace(verify_jpeg=False)), "icc": slide(paths["icc"], base),
        "mac": slide(paths["main"], mac, target),
        "plain 420": plain(backend, lv, data), "check 420": checked(backend, lv, data),
        "plain 444": plain(b444, lv444, data444), "check 444": checked(b444, lv444, data444),
        "tiff 420": planned(paths["main"]), "tiff 444": planned(paths["444"]),
    }
    rows.update({key: planned(paths[key]) for key in paths if key.startswith("dicom")})
    for run in rows.values():  # warm-up: page cache, imports, the ICC table, first-use work
        run()
    times: dict = {key: [] for key in rows}
    for _ in range(rounds):
        for key, run in rows.items():
            c0, t0 = time.process_time(), time.perf_counter()
            run()
            times[key].append((time.process_time() - c0, time.perf_counter() - t0))
    out = {"times": times, "tiles": len(yx), "jpeg_tiles": len(data), "jpeg_tiles_444": len(data444),
           "cpu": sorted(os.sched_getaffinity(0))}
    if stages:
        out["stages"] = _stages(paths["main"], base, tmp)
    shutil.rmtree(tmp, ignore_errors=True)
    return out


def _stages(path, cfg, tmp) -> dict:
    """CPU seconds of each stage of a ``tile_slide`` run (thread CPU time, every thread; the run
    of median total of three), by wrapping the functions that do the work; nested stages are
    reported exclusive of their parts."""
    import threading
    from collections import Counter

    import tilewright as tw
    from tilewright.run import slide as run_slide
    from tilewright.slide import tile_grid
    from tilewright.store import shards
    from tilewright.store.writer import StoreWriter
    from tilewright.tissue import sharpness

    acc, lock = Counter(), threading.Lock()
    saved = []

    def wrap(owner, name, label):
        f = getattr(owner, name)
        saved.append((owner, name, f))

        def timed(*a, **k):
            t = time.thread_time()
            try:
                return f(*a, **k)
            finally:
                with lock:
                    acc[label] += time.thread_time() - t
        setattr(owner, name, timed)

    wrap(tile_grid.GridReader, "_decode_verified", "decode")
    wrap(tile_grid, "reduce_into", "reduce")
    wrap(tile_grid.GridReader, "read", "grid read")
    wrap(run_slide, "_tile_arrays", "tile loop")
    wrap(sharpness, "sharpness", "sharpness")
    wrap(shards.ShardEncoder, "encode_chunks", "compress")
    wrap(shards.ShardEncoder, "write_chunks", "write")
    wrap(run_slide, "_survey", "survey")
    wrap(run_slide, "_aside", "aside")
    wrap(StoreWriter, "commit", "commit")
    runs = []
    try:
        for _ in range(3):  # the median run of three: one run can be hit by the machine's load
            acc.clear()
            shutil.rmtree(tmp / "stages", ignore_errors=True)
            c0 = time.process_time()
            tw.tile_slide(path, tmp / "stages", cfg)
            runs.append((time.process_time() - c0, dict(acc)))
    finally:
        for owner, name, f in saved:
            setattr(owner, name, f)
    total, kept = sorted(runs, key=lambda r: r[0])[1]
    acc = Counter(kept)
    loop_parts = acc["grid read"] + acc["sharpness"] + acc["compress"] + acc["write"]
    return {
        "JPEG decode with the damage check": acc["decode"],
        "2x area reduction (cv2 INTER_AREA, tile by tile)": acc["reduce"],
        "read plumbing (positional reads, Python per tile, tile copies)":
            acc["grid read"] - acc["decode"] - acc["reduce"] + max(0.0, acc["tile loop"] - loop_parts),
        "sharpness (variance of the Laplacian)": acc["sharpness"],
        "compression (Blosc lz4, bit shuffle)": acc["compress"],
        "shard writes (kernel copy to the page cache)": acc["write"],
        "per slide: thumbnail, tissue mask, plan": acc["survey"],
        "per slide: store pictures, QC picture, source digest": acc["aside"],
        "per slide: open, commit, the rest": total - acc["tile loop"] - acc["survey"] - acc["aside"],
        "total": total,
    }


# -- the parent: launch, format --------------------------------------------------------------
def measure(rounds: int = 5, stages: bool = False) -> dict:
    """Run the child on one CPU (the last this process may use) and return its results."""
    cpu = max(os.sched_getaffinity(0))
    env = {**os.environ, "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", "--cpu", str(cpu), "--rounds", str(rounds)] + \
        (["--stages"] if stages else [])
    done = subprocess.run(cmd, check=True, capture_output=True, text=True, env=env)
    return json.loads(done.stdout.strip().splitlines()[-1])


def _spread(values) -> str:
    return f"{statistics.median(values):.2f} ({min(values):.2f}-{max(values):.2f})"


def ratios(res: dict, a: str, b: str, extra: bool = False) -> list[float]:
    """Per round: CPU(a) / CPU(b) (a rate of b over a rate of a), or CPU(b) / CPU(a) - 1 in % with
    ``extra`` (the extra time b takes). ``a = "limit"``: the faster of raw and best that round."""
    t = dict(res["times"])
    t["limit"] = [min(r, b_) for r, b_ in zip(t["raw"], t["best"])]
    if extra:
        return [100 * (y[0] / x[0] - 1) for x, y in zip(t[a], t[b])]
    return [x[0] / y[0] for x, y in zip(t[a], t[b])]


def report(res: dict) -> list:
    """Print the one-core table; return the aims ``(label, values, aim text, limit)``."""
    t, n = res["times"], res["tiles"]
    src_mp = n * (2 * TILE) ** 2 / 1e6
    print(f"one core (a process pinned to CPU {res['cpu'][0]}; CPU seconds of all its threads, median "
          f"(min-max) over {len(t['raw'])} rounds; x limit: the faster raw decode's CPU / the row's, same round)")
    labels = [
        ("raw", f"raw decode: imagecodecs, the {res['jpeg_tiles']} level-0 tiles, fresh arrays"),
        ("best", "the same decodes into one reused, 16-byte-offset buffer"),
        ("tile", "tile_slide(threads=1), defaults (check on, lz4, QC picture)"),
        ("fixed", "  the same, one tile: a slide's cost besides its tiles"),
        ("nv", "  the same, damaged-JPEG check off"),
        ("icc", "  the same slide with an embedded ICC profile, applied"),
        ("mac", "  Macenko, the cohort's stain target known"),
    ]
    print(f"{'':<66}{'CPU s':>18}{'src MP/CPU-s':>14}{'x limit':>18}")
    for key, label in labels:
        cpu = [c for c, _ in t[key]]
        x = ratios(res, "limit", key)
        print(f"{label:<66}{_spread(cpu):>18}{src_mp / statistics.median(cpu):>14.0f}{_spread(x):>18}")
    tile_part = [min(r[0], b[0]) / (a[0] - f[0]) for r, b, a, f in zip(t["raw"], t["best"], t["tile"], t["fixed"])]
    print(f"tile pipeline alone (tile less fixed) / limit: {_spread(tile_part)}: what slides with many more "
          f"tiles approach; tile / raw decode into fresh arrays: {_spread(ratios(res, 'raw', 'tile'))}")
    check = {k: ratios(res, f"plain {k}", f"check {k}", extra=True) for k in ("420", "444")}
    print(f"damaged-JPEG check's own cost, % of a plain decode of the same tiles: 4:2:0 (strict decode) "
          f"{_spread(check['420'])}; 4:4:4 (sentinel row) {_spread(check['444'])}")
    dicom = {}
    for kind, label in DICOM_CASES:
        key = f"dicom {kind} {label or 'YBR_FULL_422'}"
        dicom[key] = ratios(res, key, f"tiff {kind}")
    print("read the planned tiles, checks on, DICOM frames / TIFF tiles of the same JPEG streams: " +
          "; ".join(f"{k[6:]} {_spread(v)}" for k, v in dicom.items()))
    if "stages" in res:
        print_stages(res)
    aims = [("one core: tile-out / raw decode", ratios(res, "limit", "tile"), ">= 0.8", 0.8),
            ("  the same, damaged-JPEG check off", ratios(res, "limit", "nv"), ">= 0.8", 0.8),
            ("one core: Macenko extra time (target known), %", ratios(res, "tile", "mac", True), "<= 30", -30),
            ("one core: ICC profile extra time, %", ratios(res, "tile", "icc", True), "<= 15", -15),
            ("JPEG check's own cost, 4:2:0, %", check["420"], "<= 5", -5),
            ("JPEG check's own cost, 4:4:4, %", check["444"], "<= 5", -5)]
    aims += [(f"DICOM / TIFF, checks on, {k[6:]}", v, ">= 0.9", 0.9) for k, v in dicom.items()]
    return aims


def print_stages(res: dict) -> None:
    t = res["times"]
    raw = statistics.median(min(r[0], b[0]) for r, b in zip(t["raw"], t["best"]))
    st = res["stages"]
    print(f"where one core's time goes (instrumented tile_slide, the median of 3 runs, CPU s; % of the limit's {raw:.2f} s; "
          f"0.8 of the limit leaves {raw / 0.8 - raw:.2f} s beside a decode as fast as it):")
    for name, sec in st.items():
        print(f"  {name:<66}{sec:>7.3f}{100 * sec / raw:>7.0f} %")


def callgrind() -> None:
    """Instruction counts of the raw decode and of ``tile_slide(threads=1)`` under valgrind: each
    process is counted with and without the measured call (same imports, set-up and warm-up), and
    the difference is the call's (deterministic; blind to cache misses and page faults)."""
    import re

    code = {
        "raw decode": ("import one_core as o, formats as f, imagecodecs as ic; p=o.slides()['main']; "
                       "yx,s=f.plan_for(p); b,lv,d=o.needed_tiles(p,yx,s); "
                       "[ic.jpeg8_decode(x,tables=lv.jpegtables) for _,x in d[:20]]",
                       "[ic.jpeg8_decode(x,tables=lv.jpegtables) for _,x in d]"),
        "tile_slide": ("import one_core as o, tempfile, tilewright as tw; p=o.slides()['main']; "
                       "t=tempfile.mkdtemp(); c=tw.TilingConfig(mpp=0.5,tile=256,threads=1); "
                       "tw.tile_slide(p,t+'/w',c.replace(max_tiles=8))",
                       "tw.tile_slide(p,t+'/o',c)"),
    }
    counts = {}
    for name, (setup, call) in code.items():
        got = []
        for body in (setup, f"{setup}; {call}"):
            out = Path(tempfile.mkdtemp()) / "cg.out"
            subprocess.run(["valgrind", "--tool=callgrind", f"--callgrind-out-file={out}", sys.executable, "-c",
                            f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); {body}"],
                           check=True, capture_output=True)
            got.append(sum(int(v) for v in re.findall(r"^summary:\s*(\d+)", out.read_text(), re.M)))
            shutil.rmtree(out.parent, ignore_errors=True)
        counts[name] = got[1] - got[0]
    print("instructions (callgrind; each call counted as the difference of two processes): "
          + ", ".join(f"{k} {v / 1e9:.2f} G" for k, v in counts.items())
          + f"; raw decode / tile_slide {counts['raw decode'] / counts['tile_slide']:.2f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--stages", action="store_true", help="also time each stage of one tile_slide run")
    ap.add_argument("--callgrind", action="store_true", help="also count instructions under valgrind")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--cpu", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        # pinned before anything starts a thread: every thread of the process inherits the CPU
        os.sched_setaffinity(0, {args.cpu})
        print(json.dumps(_child(args.rounds, args.stages)))
        return 0
    aims = report(measure(args.rounds, args.stages))
    print()
    for name, values, aim, limit in aims:
        med = statistics.median(values)
        ok = med >= limit if limit > 0 else med <= -limit
        print(f"{name:<52}{_spread(values):>20}   aim {aim:<8} {'met' if ok else 'MISSED'}")
    if args.callgrind:
        callgrind()
    return 0


if __name__ == "__main__":
    sys.exit(main())
