"""Progress people can trust (issue 20): a bar that moves within a slide, plain lines when not a
terminal, a compact summary, progress.json and ``tilewright status``, events for library callers."""

from __future__ import annotations

import ast
import io
import json
from pathlib import Path

import pandas as pd
import pytest

from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.run.cohort import tile_cohort
from tilewright.run.config import TilingConfig

CFG = TilingConfig(mpp=0.5, tile=128, min_tissue=0.3, block=256, qc_overlay=False)  # several blocks a slide


@pytest.fixture(scope="module")
def slides(tmp_path_factory):
    d = tmp_path_factory.mktemp("progress")
    paths = [write_slide(d / f"s{i}.tif", mpp=0.2527, size_um=(1200.0, 1500.0), seed=30 + i)[0] for i in range(2)]
    (d / "broken.tif").write_text("not a slide\n")
    return d, paths


def test_bar_on_a_terminal_moves_within_a_slide(slides, tmp_path):
    from rich.console import Console

    from tilewright.cli.progress import RichProgress

    _, paths = slides
    screen = io.StringIO()
    console = Console(file=screen, force_terminal=True, width=140, record=True)
    seen = []  # (slides done, tiles read) each time the bar is updated
    with RichProgress(len(paths), console=console) as bar:
        def listen(event):
            bar(event)
            task = bar.bar.tasks[0]
            seen.append((event.kind, event.slide_id, bar.counts.done, task.completed))

        tile_cohort(paths, tmp_path / "out", CFG, progress=False, on_progress=listen)
    first = [s for s in seen if s[0] == "tiles" and s[1] == "s0"]
    # ground truth: s0 alone spans several blocks, so the bar advanced before s0 finished
    assert len(first) >= 2 and all(done == 0 for _, _, done, _ in first)
    assert [c for *_, c in first] == sorted(c for *_, c in first) and first[0][3] < first[-1][3]
    text = console.export_text()
    assert "2/2 slides" in text and "tiles" in text and "MP/s" in text
    assert "\x1b[" in screen.getvalue()  # drawn with terminal control codes, as on a real terminal


def test_not_a_terminal_gives_plain_log_lines(slides, tmp_path, capsys):
    d, _ = slides
    assert tile_out([str(d), str(tmp_path / "out"), "--mpp", "0.5", "--tile", "128"]) == 3
    captured = capsys.readouterr()
    assert "\x1b[" not in captured.err  # no control codes in a log
    assert "[1/3]" in captured.err and "[3/3]" in captured.err and "broken: failed" in captured.err
    assert "1 failed" in captured.out  # the summary
    # bytes written: each store's files counted here with os.walk (the summary reads none)
    import os
    import re

    on_disk = sum(os.path.getsize(os.path.join(root, f)) for store in (tmp_path / "out").glob("*.zarr")
                  for root, _, files in os.walk(store) for f in files)
    shown = re.search(r"tiles, ([0-9.]+) (kB|MB) written", captured.out)
    assert float(shown.group(1)) * {"kB": 1e3, "MB": 1e6}[shown.group(2)] == pytest.approx(on_disk, rel=0.06)


def test_quiet_prints_nothing(slides, tmp_path, capsys):
    d, _ = slides
    assert tile_out([str(d), str(tmp_path / "out"), "--mpp", "0.5", "--tile", "128", "--quiet"]) == 3
    captured = capsys.readouterr()
    assert captured.err == "" and captured.out == ""
    assert "[3/3]" in (tmp_path / "out" / "tile-out.log").read_text()  # the log file still is


def _rows(n_ok, n_failed):
    rows = [{"slide_id": f"s{i:03d}", "status": "ok", "error": "", "n_tiles": 10, "seconds": 1.0}
            for i in range(n_ok)]
    rows += [{"slide_id": f"bad{i}", "status": "failed", "error": f"bad{i}.svs: damaged tile {i}",
              "n_tiles": 0, "seconds": 0.1} for i in range(n_failed)]
    return rows


def test_summary_lists_failures_only_for_large_runs(tmp_path):
    from tilewright.cli.summary import print_summary

    out = io.StringIO()
    print_summary(_rows(498, 2), tmp_path, seconds=100.0, megapixels=25000.0, stream=out)
    text = out.getvalue()
    assert text.splitlines()[1].startswith("498 ok, 0 skipped, 2 failed; 4980 tiles")
    assert "250 MP/s" in text  # ground truth: 25000 MP / 100 s
    assert "bad0.svs: damaged tile 0" in text and "bad1" in text
    assert "s000" not in text and "manifest.csv" in text  # a pointer instead of 498 rows
    full = io.StringIO()
    print_summary(_rows(498, 2), tmp_path, seconds=100.0, verbose=True, stream=full)
    assert "s497" in full.getvalue()
    small = io.StringIO()
    print_summary(_rows(19, 1), tmp_path, stream=small)
    assert "s018" in small.getvalue()  # ≤ 20 slides: every slide listed


def test_progress_json_valid_at_every_read_and_final_counts(slides, tmp_path, monkeypatch):
    import tilewright.run.events as events

    monkeypatch.setattr(events, "WRITE_EVERY", 0.0)  # rewritten at every event: the worst case for readers
    d, _ = slides
    out = tmp_path / "out"
    reads = []

    def read(event):
        p = out / "progress.json"
        if p.exists():
            reads.append(json.loads(p.read_text()))  # raises if ever half-written

    paths = sorted(d.glob("*.tif"))
    tile_cohort(paths, out, CFG, progress=False, on_progress=read)
    assert len(reads) > 5
    assert [r["slides_done"] for r in reads] == sorted(r["slides_done"] for r in reads)
    assert any(r["in_flight"] for r in reads) and any(r["estimated_end"] for r in reads)
    final = json.loads((out / "progress.json").read_text())
    m = pd.read_csv(out / "manifest.csv", keep_default_na=False)  # reference: the manifest
    assert final["state"] == "finished" and final["in_flight"] == []
    assert final["slides_done"] == final["slides_total"] == len(m)
    assert final["slides_failed"] == int((m.status == "failed").sum()) == 1
    assert final["tiles_written"] == int(m.n_tiles.sum())


def test_status_command_in_words(slides, tmp_path, capsys):
    import subprocess
    import sys

    from tilewright.cli.main import main as tilewright

    out = tmp_path / "out"
    assert tilewright(["status", str(out)]) == 0
    assert "No progress.json" in capsys.readouterr().out
    tile_cohort(slides[1], out, CFG, progress=False)
    assert tilewright(["status", str(out)]) == 0
    text = capsys.readouterr().out
    assert "2 of 2 done" in text and "finished" in text and "No run holds" in text
    code = ("import sys, time; from tilewright.run.lock import output_lock\n"
            "with output_lock(sys.argv[1]):\n    print('locked', flush=True); time.sleep(60)\n")
    holder = subprocess.Popen([sys.executable, "-c", code, str(out)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        assert tilewright(["status", str(out)]) == 0
        assert f"pid {holder.pid}" in capsys.readouterr().out
    finally:
        holder.kill()
        holder.wait()


def test_status_says_when_a_running_run_is_gone():
    from datetime import datetime, timezone

    from tilewright.cli.status_cmd import describe

    now = datetime(2026, 3, 1, 12, 0, tzinfo=timezone.utc)
    status = {"state": "running", "slides_total": 500, "slides_done": 120, "slides_failed": 3,
              "slides_skipped": 1, "tiles_read": 600000, "tiles_written": 590000,
              "tiles_planned_estimate": 2500000, "started": "2026-03-01T10:00:00+00:00",
              "updated": "2026-03-01T11:59:30+00:00", "estimated_end": "2026-03-01T18:20:00+00:00",
              "in_flight": ["site-north-017", "site-south-101"]}
    text = describe(status, None, now)
    assert "120 of 500 done (3 failed, 1 skipped)" in text and "2.0 h ago" in text
    assert "site-north-017" in text and "2026-03-01 18:20 UTC" in text
    assert "no run holds the lock" in text  # a stale "running" file is called out
    assert "holds the folder's lock (node-west-07, pid 4242)" in describe(status, "node-west-07 4242", now)


@pytest.mark.timeout(300)
def test_workers_report_tiles_per_block(slides, tmp_path):
    """With --workers, progress comes from the worker processes: per block (dask worker events)
    for a slide that lasts longer than SEND_EVERY, with the slide's row for a shorter one."""
    from tilewright.run.reporting import SEND_EVERY

    events = []
    _, paths = slides
    res = tile_cohort(paths, tmp_path / "out", CFG.replace(threads=1), workers=2, progress=False,
                      on_progress=events.append)
    tiles, per_block = {}, set()
    for e in events:
        if e.kind in ("tiles", "slide"):  # "slide": tiles no event of the slide's reported
            tiles[e.slide_id] = tiles.get(e.slide_id, 0) + e.count
        if e.kind == "tiles":
            per_block.add(e.slide_id)
    # ground truth: the manifest's tile counts (every planned tile is read, none dropped here)
    assert tiles == {r.slide_id: r.n_tiles for r in res}
    # a slide that lasted over SEND_EVERY (measured on its worker) sent per-block events and a plan
    long = {r.slide_id for r in res if r.seconds > 2 * SEND_EVERY}
    assert long <= per_block and long <= {e.slide_id for e in events if e.kind == "plan"}


def test_library_never_imports_the_command_line():
    """No module outside tilewright/cli imports it (issue 14, item 7)."""
    root = Path(__import__("tilewright").__file__).parent
    offenders = []
    for py in root.rglob("*.py"):
        if py.parent.name == "cli":
            continue
        for node in ast.walk(ast.parse(py.read_text(encoding="utf-8"))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            offenders += [f"{py.relative_to(root)}: {n}" for n in names if n.startswith("tilewright.cli")]
    assert offenders == []
