"""How fast ``plan_cohort`` (``tilewright plan``) surveys a large cohort of small slides.

Generates a cohort of ``--slides`` small slides (cached in bench-out/plan-cohort-N/): 8 distinct
synthetic H&E slides (two sites, odd level-0 µm/px 0.2428, 0.2527, 0.4991, 0.5021, JPEG tiles,
pyramids mixing x2 and x4 steps), each written once and hard-linked under many names in site
folders, so 10,000 slides take the disk space of 8. Every slide is opened, its thumbnail read and
masked, its tiles planned, as for distinct files; hard links share the page cache, so this
measures the survey's own work (headers, thumbnail decode, mask, plan, dask), not a cold disk.

Rows: in this process (``workers=1``; CPU seconds from ``time.process_time``), and on a local dask
cluster of ``--workers`` processes (wall time; start-up of the cluster included and shown apart).

Usage: ``.venv/bin/python benchmarks/cohort_plan.py [--slides 1000] [--workers 2]``
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from fixtures import ROOT  # noqa: E402

TEMPLATES = [("site-north", 0.2428), ("site-north", 0.2527), ("site-north", 0.2428), ("site-north", 0.2527),
             ("site-south", 0.4991), ("site-south", 0.5021), ("site-south", 0.4991), ("site-south", 0.5021)]


def make_cohort(n: int) -> tuple[Path, Path]:
    """``n`` slides (hard links of 8 templates) in two site folders, and a metadata table."""
    from helpers import write_slide

    folder = ROOT / f"plan-cohort-{n}"
    meta = folder / "metadata.csv"
    if meta.exists():
        return folder / "slides", meta
    templates = []
    for k, (site, mpp) in enumerate(TEMPLATES):
        path = folder / "templates" / f"t{k}.tif"
        write_slide(path, mpp=mpp, size_um=(1400.0, 1800.0), seed=k + 1, tile=256)
        templates.append((site, path))
    lines = ["slide_id,site"]
    for i in range(n):
        site, path = templates[i % len(templates)]
        dest = folder / "slides" / site / f"case-{i:05d}.tif"
        dest.parent.mkdir(parents=True, exist_ok=True)
        os.link(path, dest)
        lines.append(f"case-{i:05d},{site}")
    meta.write_text("\n".join(lines) + "\n")
    return folder / "slides", meta


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--slides", type=int, default=1000)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)

    import tilewright as tw

    t0 = time.perf_counter()
    src, meta = make_cohort(args.slides)
    print(f"cohort of {args.slides} slides ready in {time.perf_counter() - t0:.0f} s ({src})")
    cfg = tw.TilingConfig(mpp=0.5, tile=256)
    tw.plan_cohort(src / "site-north" / "case-00000.tif", cfg)  # imports and the colour tables: once

    c0, t0 = time.process_time(), time.perf_counter()
    plan = tw.plan_cohort(src, cfg, sites=meta)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    assert plan.totals["ok"] == args.slides, plan.totals
    per = plan.slides["seconds"]
    print(f"in-process: {wall:.1f} s wall, {cpu:.1f} CPU s, {args.slides / wall:.0f} slides/s, "
          f"{1000 * cpu / args.slides:.1f} CPU ms a slide (per-slide survey median {1000 * per.median():.1f} ms)")

    from tilewright.run.execute import local_cluster, _client

    t0 = time.perf_counter()
    cluster = local_cluster(args.workers)
    client = _client(cluster)
    start = time.perf_counter() - t0
    try:
        t0 = time.perf_counter()
        plan2 = tw.plan_cohort(src, cfg, sites=meta, scheduler=client)
        wall2 = time.perf_counter() - t0
    finally:
        client.close()
        cluster.close()
    assert plan2.totals["planned_tiles"] == plan.totals["planned_tiles"]
    print(f"dask, {args.workers} workers: {wall2:.1f} s wall ({args.slides / wall2:.0f} slides/s; cluster start "
          f"{start:.1f} s apart), x{wall / wall2:.2f} the in-process rate")
    print()
    print(plan.summary())
    return 0


if __name__ == "__main__":
    sys.exit(main())
