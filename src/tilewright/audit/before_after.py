"""A fair before/after: the colour audit of the same tiles read raw from the source slides and
as stored, factor by factor.

Both sides are measured on the same pixels: the same seeded sample of tile positions per slide,
at the same µm/px, split into tissue and background by the same masks, with the same metric
definitions and the same number of colour clusters. What differs is what the run did to the
stored tiles after reading them: stain normalization.
"""

from __future__ import annotations

from tilewright.audit.metrics import slide_metrics
from tilewright.audit.permutation import N_RESAMPLES
from tilewright.errors import ConfigError, StoreError, TilewrightError

__all__ = ["audit_before_after", "pairing_note"]


def audit_before_after(cohort_or_dir, *, metadata=None, label: str | None = None, max_tiles: int = 64,
                       seed: int = 0, tsne: bool = True, n_resamples: int = N_RESAMPLES):
    """Audit the same sampled tiles raw from the source slides (before) and as stored (after).

    For every slide the same ``max_tiles`` tile positions are read twice: from the source slide
    at the store's µm/px with the run's recorded settings (raw colour) and from the store
    (normalized colour). One set of tissue masks, from the raw tiles by the rule stain
    estimation uses, selects the pixels of both sides; the metrics are the same; the number of
    colour clusters is chosen by silhouette on the raw side and used on both. So the two sides
    differ by stain normalization only.

    Parameters
    ----------
    cohort_or_dir, metadata, label, max_tiles, seed, tsne, n_resamples :
        As for :func:`tilewright.audit.cohort.audit_cohort`.

    Returns
    -------
    (CohortAudit, CohortAudit)
        Before (``source="source"``) and after (``source="tiles"``); both hold the same slides
        and a ``notes["_pairing"]`` sentence saying what they share and what differs. Slides whose
        source slide cannot be re-read are skipped on both sides.

    Raises
    ------
    StoreError
        When no slide's source can be re-read (for example the slides were moved).
    ConfigError
        As for :func:`~tilewright.audit.cohort.audit_cohort`.
    """
    from tilewright.audit.cohort import build_audit, ok_slides
    from tilewright.audit.source import read_pair

    if int(max_tiles) < 1:
        raise ConfigError(f"max_tiles must be at least 1, got {max_tiles}")
    folder, ok = ok_slides(cohort_or_dir)
    sides = ({}, {})
    previews = ({}, {})
    attrs, skipped = {}, []
    for slide_id in ok.index:
        try:
            pair = read_pair(folder, slide_id, max_tiles=int(max_tiles), seed=seed)
        except TilewrightError as exc:
            skipped.append({"slide_id": slide_id, "reason": exc.one_line()})
            continue
        for side, pixels in enumerate(pair):
            sides[side][slide_id] = slide_metrics(pixels)
            previews[side][slide_id] = pixels.preview
        attrs[slide_id] = pair[1].attrs
    if not attrs:
        detail = f" ({skipped[0]['reason']})" if skipped else ""
        raise StoreError(f"no slide could be read both from its source and its store{detail}", folder)
    common = dict(metadata=metadata, label=label, seed=seed, tsne=tsne, n_resamples=n_resamples)
    before = build_audit(folder, ok, sides[0], previews[0], attrs, list(skipped), source="source", **common)
    after = build_audit(folder, ok, sides[1], previews[1], attrs, list(skipped), source="tiles",
                        n_clusters=before.n_clusters, **common)
    note = pairing_note(attrs, int(max_tiles), seed, before.n_clusters)
    before.notes["_pairing"] = after.notes["_pairing"] = note
    return before, after


def pairing_note(attrs: dict, max_tiles: int, seed: int, k: int) -> str:
    """What the two sides of a before/after share and what differs between them."""
    mpps = sorted({float(a.get("mpp")) for a in attrs.values() if a.get("mpp") is not None})
    methods = sorted({str((a.get("normalizer") or {}).get("method", "none")) for a in attrs.values()})
    mpp = " / ".join(f"{m:g}" for m in mpps) or "the target"
    return (f"Both sides are computed from the same pixels: up to {max_tiles} tile positions a slide (seed {seed}) "
            f"at {mpp} µm/px, read raw from the source slide (before) and from the store (after), with the same "
            f"tissue pixels (optical-density norm >= 0.15 against the slide's glass, from the raw tiles), the same "
            f"metrics and k = {k} colour clusters on both sides. The only difference is stain normalization "
            f"({', '.join(methods)}).")
