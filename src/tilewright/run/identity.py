"""Whether a complete store is the one this run would write: the resume identity.

A re-run keeps a complete store only when everything that decides its tiles is unchanged: the
tile-changing settings, the source file itself (size and content digest), the level-0 µm/px in
effect (the file's own, or ``--source-mpp`` / ``--mpp-table``), and the stain target the tiles
were normalized to. Both sides are plain dicts of named fields, built by :func:`run_identity`
(this run) and :func:`store_identity` (a store's attributes), compared by
:func:`identity_changes`; a new kind of identity (a region file, a colour profile, a codec) is one
more field in both builders.
"""

from __future__ import annotations


from tilewright.store.settings import RUN_ONLY, _same, _short, current_names, target_digest  # noqa: F401 - public here too

__all__ = ["RUN_ONLY", "run_identity", "RunIdentity", "store_identity", "identity_changes", "target_digest"]

#: Field names (they appear in the messages of refused resumes).
SOURCE_SIZE, SOURCE_DIGEST, LEVEL0_MPP, STAIN_TARGET = (
    "source size", "source digest", "level-0 µm/px", "stain target")


def _settings(config: dict) -> dict:
    from tilewright.store.compression import tile_identity

    out = {k: v for k, v in current_names(config).items() if k not in RUN_ONLY}
    out["compression"] = tile_identity(config or {})
    return out


def run_identity(path, config, mpp: float | None, target) -> dict:
    """The identity of the store this run would write for the slide at ``path``.

    Parameters
    ----------
    path : path
        The slide file, or a DICOM series folder.
    config : TilingConfig
    mpp : float or None
        The level-0 µm/px override of this run (None: the file's own value, read from its header).
    target : normalizer or dict or None
        The cohort's stain target (None: none, or each slide's own).
    """
    return RunIdentity(config, target).of(path, mpp)


class RunIdentity:
    """This run's side of the identity: what all slides share (settings, stain target) computed
    once, then :meth:`of` a slide (its source's size and digest, its level-0 µm/px)."""

    def __init__(self, config, target):
        self.config = config
        self.shared = _settings(config.to_dict())
        self.shared[STAIN_TARGET] = target_digest(target)

    def of(self, path, mpp: float | None, stored: dict | None = None) -> dict:
        """The identity of the store this run would write for ``path`` (see :func:`run_identity`).

        ``stored``: the attributes of the complete store being checked. When the source's stat
        stamp (bytes, modification time, files; :func:`~tilewright.store.provenance.source_stamp`)
        equals the one the store recorded, the store's digest stands for the source's (it is not
        read again); when the store's level-0 µm/px was read from the file (``mpp_source_from``,
        not given by the run) and the digest is unchanged, the file is not opened again for it
        either: a resumed run checks an unchanged slide with a ``stat``.
        """
        from tilewright.store.provenance import source_digest, source_size, source_stamp

        ident = dict(self.shared)
        source = (stored or {}).get("source") or {}
        stamp = source_stamp(path) if source.get("stamp") else None
        if stamp is not None and stamp == source["stamp"] and source.get("digest"):
            ident[SOURCE_SIZE], ident[SOURCE_DIGEST] = stamp["size"], source["digest"]
        else:
            ident[SOURCE_SIZE] = source_size(path)  # a file's bytes, or all files of a DICOM series folder
            ident[SOURCE_DIGEST] = source_digest(path)
        if mpp is not None:
            ident[LEVEL0_MPP] = float(mpp)
        elif (stored or {}).get("mpp_source_from") == "file" and \
                (stored.get("source") or {}).get("digest") == ident[SOURCE_DIGEST]:
            ident[LEVEL0_MPP] = stored.get("mpp_source")
        else:
            ident[LEVEL0_MPP] = _file_mpp(path, self.config)
        return ident


def _file_mpp(path, config) -> float | None:
    from tilewright.errors import TilewrightError
    from tilewright.slide.open import open as open_slide

    try:
        with open_slide(path, verify=False) as slide:
            return float(slide.mpp)
    except TilewrightError:
        return None  # e.g. no resolution recorded: the store had an override, which now is missing


_MISSING = object()


def store_identity(attrs: dict) -> dict:
    """The identity recorded in a complete store's attributes (fields older stores lack are left
    out, so they are not compared)."""
    ident = _settings(attrs.get("config"))
    source = attrs.get("source") or {}
    for field, value in ((SOURCE_SIZE, source.get("size")), (SOURCE_DIGEST, source.get("digest")),
                         (LEVEL0_MPP, attrs.get("mpp_source")), (STAIN_TARGET, attrs.get("stain_target", _MISSING))):
        if value is not _MISSING and not (field != STAIN_TARGET and value is None):
            ident[field] = value
    return ident


def identity_changes(old: dict, new: dict) -> list[str]:
    """What differs between a store's identity and this run's, one ``"name old -> new"`` text a
    field (fields the store does not record are not compared)."""
    out = []
    for key in sorted(set(old) | set(new), key=lambda k: (k in (SOURCE_SIZE, SOURCE_DIGEST, LEVEL0_MPP,
                                                                STAIN_TARGET), k)):
        if key not in old:
            if key in (SOURCE_SIZE, SOURCE_DIGEST, LEVEL0_MPP, STAIN_TARGET):
                continue  # not recorded by the store's version
            if new.get(key) is None or _is_default(key, new.get(key)):
                continue  # a setting added later, at its default: the store was made as it would be now
        if not _same(old.get(key), new.get(key)):
            out.append(f"{key} {_short(old.get(key))} -> {_short(new.get(key))}")
    return out


def _is_default(key: str, value) -> bool:
    """Whether ``value`` is :class:`TilingConfig`'s default for the setting ``key``."""
    import dataclasses

    from tilewright.run.config import TilingConfig

    field = TilingConfig.__dataclass_fields__.get(key)
    return field is not None and field.default is not dataclasses.MISSING and _same(field.default, value)

