"""``tilewright demo [OUT]``: build the invented demo cohort, tile it, audit it, say where to look."""

from __future__ import annotations

import sys
from pathlib import Path

__all__ = ["register", "run"]


def register(sub) -> None:
    p = sub.add_parser("demo", help="build a small invented two-site cohort, tile it with Macenko and audit it")
    p.add_argument("out", nargs="?", default="demo-out", help="output folder (default demo-out)")
    p.add_argument("--workers", type=int, default=1, help="worker processes for tile-out (default 1)")
    p.set_defaults(func=run)


def run(args) -> int:
    from tilewright.cli.tile_out import main as tile_out
    from tilewright.demo.cohort import write_demo_cohort

    out = Path(args.out)
    print(f"tilewright demo: an invented cohort (site-north 0.25 µm/px, site-south 0.5 µm/px) in {out}/")
    slides, meta = write_demo_cohort(out)
    tiles = out / "tiles"
    code = tile_out([str(slides), str(tiles), "--mpp", "0.5", "--tile", "256", "--normalize", "macenko",
                     "--workers", str(args.workers)])
    if code not in (0, 3):
        return code
    _overlays(tiles, out / "qc")
    report = _audit(tiles, meta, out)
    print("\nWhat was made:")
    print(f"  slides (pyramidal TIFF)     {slides}/")
    print(f"  metadata (site, label)      {meta}")
    print(f"  tile stores + manifest      {tiles}/  (manifest.csv, one <slide>.zarr a slide)")
    print(f"  QC overlays                 {out / 'qc'}/  (tissue outline, ink, kept tiles)")
    if report:
        print(f"  colour audit                {report}")
    print("\nRead the tiles lazily:  python -c \"import tilewright as tw; c = tw.open_cohort('%s'); "
          "print(c, c.tiles)\"" % tiles)
    print("Research use only: not for diagnosis or clinical decisions.")
    return 0


def _overlays(tiles_dir: Path, qc: Path) -> None:
    from tilewright.errors import TilewrightError
    from tilewright.store.cohort import read_manifest
    from tilewright.store.reader import open_store
    from tilewright.tissue.overlay import render_overlay_from_store

    qc.mkdir(parents=True, exist_ok=True)
    for sid, status in zip(*[read_manifest(tiles_dir)[c] for c in ("slide_id", "status")]):
        if status == "failed":
            continue
        try:
            render_overlay_from_store(open_store(tiles_dir / f"{sid}.zarr"), qc / f"{sid}.png")
        except TilewrightError as exc:
            print(f"  no overlay for {sid}: {exc}", file=sys.stderr)


def _audit(tiles_dir: Path, meta: Path, out: Path):
    try:
        from tilewright.audit.cohort import audit_cohort
    except ImportError:  # pragma: no cover - audit not installed in this build
        return None
    before = audit_cohort(tiles_dir, metadata=meta, source="thumbnail")
    after = audit_cohort(tiles_dir, metadata=meta, source="tiles")
    folder = out / "audit"
    after.write_report(folder, before=before)
    for line in list(before.findings)[:2]:
        print(f"  before normalization: {line}")
    for line in list(after.findings)[:2]:
        print(f"  after normalization:  {line}")
    return folder / "report.html"
