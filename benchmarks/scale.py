"""Cohorts of 100, 1,000 (and 10,000) small slides: the run's own cost per slide, and the cohort
commands on that many stores.

Slides: 8 distinct synthetic H&E slides of 1536 x 1536 px at 0.5 µm/px (JPEG q90 tiles, SVS
pyramid, ~5 tiles of 256 px each), hard-linked N times into ``src<N>/`` (copies of a few distinct
files: the per-slide work is the same, the disk holds 8 files). Cached in ``--cache``
(``TILEWRIGHT_SCALE_DIR``, default ``bench-out/scale``); the output folders are removed after each
size unless ``--keep``.

For each cohort size, each step in a fresh process:

tile-out     ``tile-out SRC OUT --workers 2 --mpp 0.5`` as a user runs it (log lines to a file,
             the closing summary, the QC page): wall time, the tile-out process's CPU time (it
             also hosts the local dask scheduler) and peak RSS, and the CPU time of its workers
             (the children's rusage the benchmark collects once they have exited);
re-run       the same command again: every store is complete and kept (the resume check);
commands     on the N stores: ``open_cohort``, ``Cohort.index``, ``TileStoreDataset(OUT)``,
             ``tilewright status``, ``make_splits`` on a metadata table of N slides (two slides a
             patient, ten sites), the closing summary, ``audit_cohort`` + ``write_report``, and
             rebuilding ``qc/index.html``; each timed alone after the imports (wall and CPU).

Aims: per-slide wall time at the largest size <= 1.2x at 100; tile-out's peak RSS at the largest
size <= 1.5x at 100; tile-out's own CPU <= 10 % of a core at 20 slides a second (<= 5 ms a slide).

Usage: ``.venv/bin/python benchmarks/scale.py [--sizes 100 1000 10000] [--cache DIR] [--keep]``
(``make bench`` runs 100 and 1,000; ``make bench-scale`` adds 10,000: about 15 minutes of tiling
and 10 GB of stores on 2 cores).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

DISTINCT = 8
SIDE = 1536
ARGS = ["--workers", "2", "--mpp", "0.5"]


def cache_dir(given=None) -> Path:
    root = given or os.environ.get("TILEWRIGHT_SCALE_DIR") or HERE.parent / "bench-out" / "scale"
    return Path(root)


def cohort_source(cache: Path, n: int) -> Path:
    """``src<n>/`` with n hard links (copies where links fail) of the distinct slides."""
    from fixtures import bench_slide

    distinct = [bench_slide(SIDE, SIDE, mpp=0.5, seed=s, islands=2, root=cache) for s in range(DISTINCT)]
    folder = cache / f"src{n}"
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n):
        p = folder / f"slide_{i:05d}.svs"
        if not p.exists():
            try:
                os.link(distinct[i % DISTINCT], p)
            except OSError:
                shutil.copyfile(distinct[i % DISTINCT], p)
    return folder


def _child(argv) -> dict:
    """Run this script's ``argv`` mode in a fresh process; its JSON line, with the CPU time of the
    process and of everything it started (its children's rusage, collected once they exited)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    done = subprocess.run([sys.executable, str(Path(__file__).resolve()), *argv], capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{argv[0]} failed ({done.returncode}):\n{done.stderr[-3000:]}")
    out = json.loads(done.stdout.strip().splitlines()[-1])
    out["cpu_all"] = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    return out


def run_tile_out(src, out) -> dict:
    """(child) tile-out as a user runs it, in this process; wall, own CPU and peak RSS."""
    import contextlib
    import io

    from tilewright.cli.tile_out import main

    sink = io.StringIO()
    t0, c0 = time.perf_counter(), time.process_time()
    with contextlib.redirect_stdout(sink), contextlib.redirect_stderr(sink):
        code = main([str(src), str(out), *ARGS])
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    if code != 0:
        raise SystemExit(f"tile-out exit {code}:\n{sink.getvalue()[-3000:]}")
    return {"wall": wall, "cpu": cpu, "rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def _timed(fn):
    t0, c0 = time.perf_counter(), time.process_time()
    fn()
    return {"wall": time.perf_counter() - t0, "cpu": time.process_time() - c0}


def run_commands(out) -> dict:
    """(child) the cohort commands on the stores of ``out``, each timed alone after the imports."""
    import contextlib
    import io
    import logging

    import pandas as pd

    import tilewright as tw
    from tilewright.cli.main import main as tilewright_main
    from tilewright.cli.summary import print_summary
    from tilewright.run.qc_page import qc_page_from_folder
    from tilewright.splits.make import make_splits
    from tilewright.store.cohort import read_manifest
    from tilewright.torch.dataset import TileStoreDataset

    logging.getLogger("tilewright").setLevel(logging.ERROR)
    rows = read_manifest(out).to_dict("records")
    ids = [r["slide_id"] for r in rows]
    meta = pd.DataFrame({"slide_id": ids, "patient": [f"p{i // 2:05d}" for i in range(len(ids))],
                         "label": [("MSI", "MSS", "MSS")[(i // 2) % 3] for i in range(len(ids))],
                         "site": [f"site-{(i // 2) % 10}" for i in range(len(ids))]})
    res, keep = {}, {}
    res["open_cohort"] = _timed(lambda: keep.setdefault("c", tw.open_cohort(out)))
    res["Cohort.index"] = _timed(lambda: keep["c"].index)
    res["TileStoreDataset(OUT)"] = _timed(lambda: TileStoreDataset(out))
    with contextlib.redirect_stdout(io.StringIO()):
        res["tilewright status"] = _timed(lambda: tilewright_main(["status", str(out)]))
    res["make_splits"] = _timed(lambda: make_splits(meta, patient="patient", label="label", site="site", folds=5))
    res["summary"] = _timed(lambda: print_summary(rows, out, seconds=1.0, stream=io.StringIO()))
    res["audit_cohort"] = _timed(lambda: keep.setdefault("a", tw.audit_cohort(out, metadata=meta)))
    res["write_report"] = _timed(lambda: keep["a"].write_report(Path(out) / "audit"))
    res["qc/index.html"] = _timed(lambda: qc_page_from_folder(out))
    return res


def measure(cache: Path, n: int, keep: bool) -> dict:
    src = cohort_source(cache, n)
    out = cache / f"out{n}"
    shutil.rmtree(out, ignore_errors=True)
    first = _child(["--child-run", str(src), str(out)])
    again = _child(["--child-run", str(src), str(out)])
    commands = _child(["--child-commands", str(out)])
    if not keep:
        shutil.rmtree(out, ignore_errors=True)
    return {"n": n, "run": first, "rerun": again, "commands": commands}


def report(results) -> None:
    print(f"\nscale benchmark | {SIDE} x {SIDE} px slides at 0.5 µm/px, tile-out {' '.join(ARGS)} | "
          f"{os.cpu_count()} CPUs | load average {os.getloadavg()[0]:.1f}")
    head = (f"{'slides':>7}{'wall s':>9}{'ms/slide':>9}{'tile-out CPU s':>15}{'ms/slide':>9}{'% core':>7}"
            f"{'peak RSS MiB':>13}{'workers CPU s':>14}{'re-run s':>9}{'re-run CPU s':>13}")
    print(head)
    print("-" * len(head))
    for r in results:
        n, run, again = r["n"], r["run"], r["rerun"]
        print(f"{n:>7}{run['wall']:>9.1f}{1000 * run['wall'] / n:>9.1f}{run['cpu']:>15.1f}"
              f"{1000 * run['cpu'] / n:>9.2f}{100 * run['cpu'] / run['wall']:>7.1f}{run['rss_mib']:>13.0f}"
              f"{run['cpu_all'] - run['cpu']:>14.1f}{again['wall']:>9.1f}{again['cpu']:>13.1f}")
    names = list(results[0]["commands"].keys() - {"cpu_all"})
    names = [k for k in results[0]["commands"] if k != "cpu_all"]
    print("\ncommands on the stores, seconds wall (CPU)")
    print(f"{'':<24}" + "".join(f"{r['n']:>18}" for r in results))
    for k in names:
        print(f"{k:<24}" + "".join(f"{r['commands'][k]['wall']:>10.2f} ({r['commands'][k]['cpu']:>5.2f})"
                                    for r in results))
    small, large = results[0], results[-1]
    per = [1000 * r["run"]["wall"] / r["n"] for r in (small, large)]
    aims = [(f"per-slide wall, {large['n']} / {small['n']} slides", per[1] / per[0], "<= 1.2", per[1] / per[0] <= 1.2),
            (f"tile-out peak RSS, {large['n']} / {small['n']} slides", large["run"]["rss_mib"] / small["run"]["rss_mib"],
             "<= 1.5", large["run"]["rss_mib"] / small["run"]["rss_mib"] <= 1.5),
            (f"tile-out CPU a slide at {large['n']}, ms (10 % of a core at 20/s = 5)",
             1000 * large["run"]["cpu"] / large["n"], "<= 5", 1000 * large["run"]["cpu"] / large["n"] <= 5)]
    print("\naims")
    for label, value, aim, ok in aims:
        print(f"{label:<58}{value:>8.2f}   aim {aim:<6} {'met' if ok else 'MISSED'}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100, 1000])
    ap.add_argument("--cache", help="where the slides (and, while measured, the stores) go")
    ap.add_argument("--keep", action="store_true", help="keep each size's output folder")
    ap.add_argument("--child-run", nargs=2, metavar=("SRC", "OUT"), help=argparse.SUPPRESS)
    ap.add_argument("--child-commands", metavar="OUT", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child_run:
        print(json.dumps(run_tile_out(*args.child_run)))
        return 0
    if args.child_commands:
        print(json.dumps(run_commands(args.child_commands)))
        return 0
    cache = cache_dir(args.cache)
    t0 = time.perf_counter()
    results = []
    for n in sorted(args.sizes):
        results.append(measure(cache, n, args.keep))
        print(f"# {n} slides measured ({time.perf_counter() - t0:.0f} s so far)", flush=True)
    report(results)
    return 0


if __name__ == "__main__":
    sys.exit(main())
