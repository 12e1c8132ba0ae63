"""What progress reporting costs ``tile-out``: the same cohort run with and without the display.

"with": what ``tile-out`` runs on a terminal: per-block events into the rich bar (drawn into a
terminal-like buffer), the plain log lines, the run's ``progress.json``. "without": no listener
(``tile_cohort(..., progress=False)``; ``progress.json`` is still kept, as it always is). Rows
interleaved over ``--rounds`` rounds; the cost is the median over rounds of the time ratio.

Usage: ``.venv/bin/python benchmarks/progress_cost.py [--size 12288] [--rounds 5]``
"""

from __future__ import annotations

import argparse
import io
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from fixtures import bench_slide  # noqa: E402


def run(slide, out, cfg, with_display: bool) -> float:
    import tilewright as tw

    shutil.rmtree(out, ignore_errors=True)
    listener = None
    if with_display:
        from rich.console import Console

        from tilewright.cli.progress import RichProgress
        from tilewright.run.events import LogProgress

        bar = RichProgress(1, console=Console(file=io.StringIO(), force_terminal=True, width=120))
        lines = LogProgress()

        def listener(event):
            lines(event)
            bar(event)

        bar.__enter__()
    t0 = time.perf_counter()
    res = tw.tile_cohort([str(slide)], out, cfg, progress=False, on_progress=listener)
    seconds = time.perf_counter() - t0
    if with_display:
        bar.__exit__(None, None, None)
    assert res[0].status == "ok", res[0].error
    return seconds


def event_cost(n: int = 2000) -> float:
    """CPU seconds the display spends on one "tiles" event (rich bar + log lines + counts)."""
    from tilewright.run.events import ProgressEvent

    bar, listen = None, None
    import io

    from rich.console import Console

    from tilewright.cli.progress import RichProgress
    from tilewright.run.events import LogProgress

    bar = RichProgress(1, console=Console(file=io.StringIO(), force_terminal=True, width=120))
    lines = LogProgress()
    with bar:
        bar(ProgressEvent("plan", "s", 10 * n))
        lines(ProgressEvent("plan", "s", 10 * n))
        c0 = time.process_time()
        for _ in range(n):
            e = ProgressEvent("tiles", "s", 10, 1.0)
            lines(e)
            bar(e)
        return (time.process_time() - c0) / n


def main(argv=None):
    import tilewright as tw

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=12288, help="slide width and height in level-0 px")
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args(argv)
    slide = bench_slide(args.size, args.size)
    cfg = tw.TilingConfig(mpp=0.5, tile=256, qc_overlay=False)
    tmp = Path(tempfile.mkdtemp(prefix="tw-progress-"))
    try:
        run(slide, tmp / "warm", cfg, True)
        pairs = []
        for r in range(args.rounds):  # the order alternates, so drifting load hits both alike
            if r % 2 == 0:
                a = run(slide, tmp / "a", cfg, False)
                b = run(slide, tmp / "b", cfg, True)
            else:
                b = run(slide, tmp / "b", cfg, True)
                a = run(slide, tmp / "a", cfg, False)
            pairs.append((a, b))
        tiles = len(tw.open_store(tmp / "b" / f"{slide.stem}.zarr"))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    ratios = [b / a for a, b in pairs]
    per_event = event_cost()
    print(f"slide {slide.name}: {tiles} tiles of 256 px at 0.5 µm/px; {args.rounds} rounds")
    print(f"without display: fastest {min(a for a, _ in pairs):.2f} s; with display: fastest "
          f"{min(b for _, b in pairs):.2f} s")
    seconds_per_tile = min(a for a, _ in pairs) / max(tiles, 1)
    print(f"display CPU per event: {per_event * 1e6:.0f} µs; bound on the cost at one event a tile "
          f"(the worst case; tile-out sends one a block): {100 * per_event / seconds_per_tile:.2f} %")
    print(f"progress cost: median {100 * (statistics.median(ratios) - 1):+.1f} % "
          f"(rounds: {', '.join(f'{100 * (x - 1):+.1f}' for x in ratios)}); aim < 2 %")


if __name__ == "__main__":
    main()
