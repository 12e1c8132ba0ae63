"""``tilewright demo [OUT]``: build the invented demo cohort, tile it, audit it, say where to look."""

from __future__ import annotations

from pathlib import Path

__all__ = ["register", "run"]


def register(sub) -> None:
    p = sub.add_parser("demo", help="build a small invented two-site cohort, tile it with Macenko and audit it")
    p.add_argument("out", nargs="?", default="demo-out", help="output folder (default demo-out)")
    p.add_argument("--workers", type=int, default=1, help="worker processes for tile-out (default 1)")
    p.add_argument("--per-site", type=int, default=6, help="slides a site (default 6)")
    p.set_defaults(func=run)


def run(args) -> int:
    from tilewright.cli.tile_out import main as tile_out
    from tilewright.demo.cohort import write_demo_cohort

    out = Path(args.out)
    print(f"tilewright demo: an invented cohort (site-north 0.25 µm/px, site-south 0.5 µm/px) in {out}/")
    slides, meta = write_demo_cohort(out, n_per_site=args.per_site)
    tiles = out / "tiles"
    code = tile_out([str(slides), str(tiles), "--mpp", "0.5", "--tile", "256", "--normalize", "macenko",
                     "--workers", str(args.workers)])
    if code not in (0, 3):
        return code
    gap = _colour_gap(slides)
    report, closing = _audit(tiles, meta, out)
    print("\nWhat was made:")
    print(f"  slides (pyramidal TIFF)     {slides}/")
    print(f"  metadata (site, label)      {meta}")
    print(f"  tile stores + manifest      {tiles}/  (manifest.csv, one <slide>.zarr a slide)")
    print(f"  QC overlays                 {tiles / 'qc'}/  (tissue outline, ink, kept tiles)")
    if report:
        print(f"  colour audit                {report}")
    if gap is not None:
        print(f"\nScanner-B embeds an ICC profile: {gap.sentence()}.")
    for line in closing:
        print(line)
    print("\nRead the tiles lazily:  python -c \"import tilewright as tw; c = tw.open_cohort('%s'); "
          "print(c, c.tiles)\"" % tiles)
    print("Research use only: not for diagnosis or clinical decisions.")
    return 0


def _colour_gap(slides: Path):
    """The between-site colour gap with the scanners' profiles ignored and applied (see
    :mod:`tilewright.demo.colour_gap`); None when there are not two sites with tissue."""
    from tilewright.demo.colour_gap import site_colour_gap

    sites = {d.name: sorted(p for p in d.iterdir() if p.is_file() and not p.name.startswith("."))
             for d in sorted(slides.iterdir()) if d.is_dir()}
    try:
        return site_colour_gap(sites)
    except ValueError:
        return None


def _audit(tiles_dir: Path, meta: Path, out: Path):
    try:
        from tilewright.audit.before_after import audit_before_after
    except ImportError:  # pragma: no cover - audit not installed in this build
        return None, []
    from tilewright.audit.compare import compare_gaps
    from tilewright.audit.gaps import AIM_MAX, AIM_SHARE, gap_aim

    before, after = audit_before_after(tiles_dir, metadata=meta)
    folder = out / "audit"
    after.write_report(folder, before=before)
    print("\nColour audit (site and scanner should not explain the colour clusters):")
    for name, audit in (("raw tiles        ", before), ("normalized tiles ", after)):
        for line in audit.findings:
            if "colour clusters" in line.lower() and "follow" in line:
                print(f"  {name} {line}")
    print(f"  {before.notes['_pairing']}")
    met, lines = gap_aim(compare_gaps(before, after), "site")
    closing = []
    if lines:
        closing.append("\nWhat stain normalization did to the sites' colour (CIEDE2000 of mean tissue colour over the "
                       "same tile positions, raw and stored):")
        closing += [f"  {line}" for line in lines]
        aim = f"every site pair's gap after at most {100 * AIM_SHARE:.0f} % of before and at most {AIM_MAX:g}"
        closing.append(f"  Gap closed: {aim}." if met else
                       f"  Gap NOT closed ({aim} is not met): see {folder / 'report.html'}.")
    return folder / "report.html", closing
