"""``tilewright inspect SLIDE``: what a slide is and what would be cut from it."""

from __future__ import annotations

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
    from tilewright.store.layout import slide_stem
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.overlay import render_overlay
    from tilewright.tissue.plan import plan_tiles

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
            overlay = Path(args.overlay or f"{slide_stem(args.slide)}.overlay.png")
            render_overlay(slide, mask, plan, overlay)
            out.write(f"overlay     {overlay}\n")
    except TilewrightError as exc:
        print(f"tilewright inspect: {exc}", file=sys.stderr)
        return 1
    return 0
