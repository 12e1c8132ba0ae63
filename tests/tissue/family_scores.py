"""Scores of a tissue mask against a generated slide's ground truth, and the aims of the hard-slide
families as shares of draws (issue 28). Shared by the tuning family (test_hard_family.py) and
the held-back family (test_heldback_family.py); only the scoring is shared, not the slides.

Aims, each over the draws where it applies (ground truth: the layouts the generators drew):

- ink-free tissue kept >= 0.9 and at most 5 % of the mask on ink, in >= 95 % of draws;
- red blood cells (tissue) kept >= 0.9, in >= 95 % of the draws with blood;
- faint tissue (>= 0.03 OD above glass in green) kept >= 0.8, in >= 95 % of the draws with it.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

ARTEFACTS = Path(os.environ.get("TILEWRIGHT_ARTEFACTS", Path(__file__).parents[2] / "test-artefacts"))
KEPT, ON_INK, BLOOD, FAINT, SHARE = 0.9, 0.05, 0.9, 0.8, 0.95


def score(mask, truth, spare=None) -> dict:
    """Per-draw figures: kept share of ink-free tissue, share of the mask on ink, kept blood and
    faint tissue (NaN when the slide has none). ``spare``: tissue no aim asks for (fainter than
    0.03 OD above glass), left out of every figure but the share on ink."""
    m, ink = mask.array, truth["ink"]
    free = truth["tissue"] & ~ink & (True if spare is None else ~spare)
    out = {"kept": float(m[free].mean()) if free.any() else float("nan"),
           "on_ink": float((m & ink).sum()) / max(1, int(m.sum())),
           "on_glass": on_glass(m, truth)}
    for key in ("blood", "faint"):
        t = truth.get(key)
        t = None if t is None else t & ~ink
        out[key] = float(m[t].mean()) if t is not None and t.sum() >= 20 else float("nan")
    out["warnings"] = list(mask.warnings)
    return out


def on_glass(m, truth) -> float:
    """Share of the mask on blank glass: more than 4 pixels from any drawn tissue or ink (no aim
    asks for it; reported: tiles cut there show nothing)."""
    import cv2

    near = cv2.dilate((truth["tissue"] | truth["ink"]).astype(np.uint8), np.ones((9, 9), np.uint8)).astype(bool)
    return float((m & ~near).sum()) / max(1, int(m.sum()))


def passes(s: dict) -> dict:
    """Which aims a draw meets (None where an aim does not apply)."""
    return {"tissue": (s["kept"] >= KEPT and s["on_ink"] <= ON_INK) if s["kept"] == s["kept"] else None,
            "blood": s["blood"] >= BLOOD if s["blood"] == s["blood"] else None,
            "faint": s["faint"] >= FAINT if s["faint"] == s["faint"] else None}


def shares(scores: list[dict]) -> dict:
    """Share of draws meeting each aim, and how many draws each aim applied to."""
    out = {}
    for aim in ("tissue", "blood", "faint"):
        got = [p[aim] for p in map(passes, scores) if p[aim] is not None]
        out[aim] = (float(np.mean(got)) if got else float("nan"), len(got))
    return out


def check_floor(name: str, scores: list[dict], aim: str, floor: float, *, min_count: int = 3) -> None:
    """Fail unless ``aim`` applied to at least ``min_count`` draws and at least ``floor`` of them
    meet it (the message carries the family's summary)."""
    share, count = shares(scores)[aim]
    assert count >= min_count, (aim, count)
    assert share >= floor, (aim, share, count, summary(name, scores))


def opt_in(env: str, label: str) -> list:
    """Marks of a held-back family's confirmation test: skipped unless ``env`` is "1" (never run
    by ``make test``), and a long timeout (100 draws take a few minutes)."""
    import pytest

    return [pytest.mark.skipif(os.environ.get(env) != "1", reason=f"{label}: confirmation only, set {env}=1"),
            pytest.mark.timeout(7200)]


def confirm_family(name: str, module: str, folder: str, draws_env: str) -> None:
    """Run a held-back family (``module`` with ``draw`` and ``describe``) on as many draws as the
    environment variable ``draws_env`` says (100 by default, see :func:`run_family`) and fail
    unless each aim holds in at least :data:`SHARE` of the draws it applies to."""
    import importlib

    family = importlib.import_module(module)
    scores = run_family(name, family.draw, range(int(os.environ.get(draws_env, "100"))), folder, family.describe)
    for aim, (share, count) in shares(scores).items():
        if count:
            assert share >= SHARE, f"{aim}: {share:.3f} of {count} draws meet the aim (aim {SHARE})"


def worst(scores: list[dict], n: int = 5) -> list[dict]:
    """The ``n`` draws farthest below an aim (by the largest shortfall of any aim)."""
    def shortfall(s):
        gaps = [KEPT - s["kept"], (s["on_ink"] - ON_INK) * 4, BLOOD - s["blood"], FAINT - s["faint"]]
        return max(g for g in gaps if g == g)
    return sorted(scores, key=shortfall, reverse=True)[:n]


def summary(name: str, scores: list[dict]) -> str:
    """A few lines for the test log: shares, quantiles and the worst draws."""
    lines = [f"{name}: {len(scores)} draws"]
    for aim, (share, n) in shares(scores).items():
        lines.append(f"  {aim}: {share:.3f} of {n} draws meet the aim")
    for key in ("kept", "on_ink", "blood", "faint", "on_glass"):
        v = np.array([s[key] for s in scores if s.get(key, np.nan) == s.get(key, np.nan)])
        if v.size:
            if key == "on_glass":  # the high end matters: median, 95th percentile, max, draws over 5 %
                q = np.quantile(v, [0.5, 0.95, 1.0])
                lines.append(f"  {key}: median {q[0]:.3f}, 95th percentile {q[1]:.3f}, max {q[2]:.3f}, "
                             f"{int((v > 0.05).sum())} draws over 0.05")
                continue
            q = np.quantile(v, [0.0, 0.05, 0.5])
            lines.append(f"  {key}: min {q[0]:.3f}, 5th percentile {q[1]:.3f}, median {q[2]:.3f}")
    for s in worst(scores):
        lines.append(f"  worst: {s['name']}: kept {s['kept']:.3f}, on ink {s['on_ink']:.3f}, blood "
                     f"{s['blood']:.3f}, faint {s['faint']:.3f} {s['warnings']}")
    return "\n".join(lines)


def write_qc(folder: str, name: str, rgb, mask) -> Path:
    """The QC picture of one draw in ``test-artefacts/<folder>/`` (gitignored)."""
    from tilewright.tissue.overlay import overlay_png, write_png

    out = ARTEFACTS / folder
    out.mkdir(parents=True, exist_ok=True)
    return Path(write_png(out / f"{name}.png", overlay_png(rgb, mask, None, mpp=mask.mpp, title=name)))


def run_family(name: str, draw, seeds, folder: str, describe=None) -> list[dict]:
    """Mask and score the draws ``seeds`` of a family whose ``draw(seed)`` gives ``rgb``, ``mpp``,
    ``truth`` and ``info`` (with ``faint_od``: faint tissue under 0.03 OD above glass is left out
    of the faint aim); print the summary (and ``describe(info)`` of each draw missing an aim)
    and write the worst draws' QC pictures to ``test-artefacts/<folder>/``."""
    from tilewright.tissue.mask import tissue_mask

    scores, pictures, infos = [], {}, {}
    for seed in seeds:
        d = draw(seed)
        mask = tissue_mask(d.rgb, mpp=d.mpp)
        truth = dict(d.truth)
        if any(v < 0.03 for v in d.info["faint_od"]):  # the aim covers faint tissue >= 0.03 OD above glass
            truth.pop("faint")
        s = score(mask, truth)
        s["name"] = f"{folder}-{seed:03d}"
        scores.append(s)
        pictures[s["name"]], infos[s["name"]] = (d.rgb, mask), d.info
    print("\n" + summary(name, scores))
    if describe is not None:
        for s in scores:
            missed = [{"tissue": "ink"}.get(aim, aim) for aim, ok in passes(s).items() if ok is False]
            if missed:
                print(f"  missed {'/'.join(missed)}: {s['name']} (kept {s['kept']:.3f}, on ink {s['on_ink']:.3f}): "
                      f"{describe(infos[s['name']])}")
    for s in worst(scores):
        write_qc(folder, s["name"], *pictures[s["name"]])
    return scores
