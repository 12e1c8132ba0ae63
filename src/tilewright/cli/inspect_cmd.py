"""``tilewright inspect SLIDE``: what a slide is and what would be cut from it.

Exit codes (as tile-out's): 0 done; 2 bad arguments (no such slide path, invalid option values, an
overlay path that cannot be written); 1 the slide cannot be read (the reason is printed).
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

from tilewright.errors import TilewrightError

__all__ = ["register", "run"]


def register(sub) -> None:
    p = sub.add_parser("inspect", help="levels, µm/px, backend, tissue fraction and a QC overlay of one slide")
    p.add_argument("slide", help="slide file")
    p.add_argument("--source-mpp", type=float, help="level-0 µm/px when the file lacks it")
    p.add_argument("--mpp", type=float, default=0.5, help="target µm/px for the tile plan (default 0.5)")
    p.add_argument("--tile", type=int, default=256, help="tile side (default 256)")
    p.add_argument("--min-tissue", type=float, default=0.5, help="minimum tissue fraction (default 0.5)")
    p.add_argument("--overlay", help="QC overlay PNG path (default: <slide id>.overlay.png here)")
    p.set_defaults(func=run)


def run(args) -> int:
    from tilewright.slide.open import open as open_slide
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.overlay import render_overlay
    from tilewright.tissue.plan import plan_tiles

    overlay = _overlay_path(args)
    if isinstance(overlay, int):
        return overlay
    try:
        with open_slide(args.slide, mpp=args.source_mpp) as slide:
            out = sys.stdout
            out.write(f"slide       {slide.path}\nbackend     {slide.backend}\n")
            out.write(f"level-0     {slide.dimensions[1]} x {slide.dimensions[0]} px (w x h), "
                      f"{slide.mpp:.4f} µm/px\n")
            out.write(f"objective   {slide.objective if slide.objective else 'not recorded'}\n")
            colour = (f"ICC profile {slide.colour.label!r}, converted to sRGB" if slide.colour.applied
                      else "no ICC profile: pixels as stored")
            out.write(f"colour      {colour}\n")
            out.write("levels      #  width x height   downsample  µm/px\n")
            for i, lv in enumerate(slide.levels):
                out.write(f"            {i}  {lv.width} x {lv.height}  {lv.downsample:10.3f}  {lv.mpp:.4f}\n")
            view = slide.at_mpp(args.mpp)
            mask = tissue_mask(slide)
            plan = plan_tiles(view, mask, tile=args.tile, min_tissue=args.min_tissue)
            out.write(f"at {args.mpp} µm/px: {view.shape[1]} x {view.shape[0]} px from level {view.source_level} "
                      f"(scale {view.scale:.4f})\n")
            out.write(f"tissue      {100 * float(mask.array.mean()):.1f}% of the slide at {mask.mpp} µm/px\n")
            out.write(f"tiles       {len(plan)} of {args.tile} px with >= {args.min_tissue:.0%} tissue\n")
            for note in mask.warnings:  # no glass, much ink, little tissue, implausible plane
                out.write(f"warning     {note}\n")
            render_overlay(slide, mask, plan, overlay)
            out.write(f"overlay     {overlay}\n")
    except TilewrightError as exc:
        print(f"tilewright inspect: {exc.one_line()}", file=sys.stderr)
        return 1
    except OSError as exc:  # the overlay could not be written after all (disk full, permissions)
        print(f"tilewright inspect: {overlay}: cannot write the overlay ({exc.strerror or exc}); "
              "choose another --overlay path", file=sys.stderr)
        return 1
    return 0


def _overlay_path(args) -> Path | int:
    """Check the arguments before any work: the overlay path (its folder is created), or exit code 2."""
    from tilewright.store.layout import slide_stem

    def bad(message):
        print(f"tilewright inspect: error: {message}", file=sys.stderr)
        return 2

    from tilewright.location.url import is_url

    if not is_url(args.slide) and not Path(args.slide).exists():  # a URL: tw.open says what is wrong
        return bad(f"{args.slide}: no such slide file; check the path (and the folder you run in)")
    for option, value, ok in (("--mpp", args.mpp, args.mpp > 0), ("--tile", args.tile, args.tile >= 1),
                              ("--min-tissue", args.min_tissue, 0 <= args.min_tissue <= 1)):
        if not (ok and math.isfinite(value)):
            return bad(f"{option} {value} is out of range ({'between 0 and 1' if option == '--min-tissue' else 'positive'})")
    overlay = Path(args.overlay or f"{slide_stem(args.slide)}.overlay.png")
    if overlay.is_dir():
        return bad(f"{overlay}: --overlay is a folder; give a file name such as {overlay / 'slide.png'}")
    try:
        overlay.parent.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):
        return bad(f"{overlay.parent}: a file is in the way of the overlay's folder; choose another --overlay path")
    except OSError as exc:
        return bad(f"{overlay.parent}: cannot create the overlay's folder ({exc.strerror or exc}); "
                   "choose another --overlay path")
    return overlay
