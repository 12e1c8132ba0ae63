"""What a run finds in its output folder before it tiles: the stores it keeps, in one pass.

A re-run of a finished 10,000-slide cohort must cost seconds, not a task a slide on the cluster.
:func:`scan` reads each store's metadata once (:func:`tilewright.store.metadata.stores_attrs`,
on a few threads) and, for each complete store, decides here what the worker would decide
(:func:`resume_row`): keep it (this run would write the same store: same settings, source,
level-0 µm/px and stain target; :mod:`tilewright.run.identity`), refuse it (a complete store made
otherwise, kept as it is, the slide failed with the reason), or tile it again (a store that holds
no tile and was made otherwise). Only the slides left to tile become tasks.

A slide whose check cannot be made here (its source is not visible from this process, as on a
cluster whose workers mount the slides elsewhere, or the check raised) is left to its task, which
makes the same check on the worker.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

from tilewright.errors import ConfigError, TilewrightError
from tilewright.location.url import is_url
from tilewright.store.layout import store_path
from tilewright.store.metadata import READ_THREADS, stores_attrs

__all__ = ["scan", "resume_row"]


def resume_row(final, attrs: dict, path: str, slide_id: str, cfg, mpp, identity) -> dict | None:
    """The manifest row of the complete store ``final`` (attributes ``attrs``) when this run keeps
    it, None when the slide is to be tiled (again).

    Parameters
    ----------
    final : Path
    attrs : dict
        The store's group attributes.
    path, slide_id : str
        The slide's source and id.
    cfg : TilingConfig
    mpp : float or None
        This run's level-0 µm/px override for the slide.
    identity : RunIdentity
        This run's side of the resume identity.

    Raises
    ------
    ConfigError
        The store was made with other settings or from another source: it is kept as it is, and
        the message says how to proceed.
    """
    from tilewright.run.identity import identity_changes, store_identity
    from tilewright.store.manifest_row import kept_row

    changed = identity_changes(store_identity(attrs), identity.of(path, mpp, attrs))
    if changed and not int(attrs.get("n_tiles") or 0):
        return None  # a skipped slide's store holds no tile: nothing to keep, tiled anew with these settings
    if changed:
        raise ConfigError(f"a complete store made with other settings or another source exists "
                          f"({', '.join(changed[:4])}); it is kept as it is; pass --overwrite to re-tile "
                          "or choose another output folder", final)
    if cfg.keep:  # region files are part of a store's identity: edited annotations are re-tiled
        from tilewright.regions.load import region_change

        why = region_change(attrs.get("regions"), cfg.regions, slide_id)
        if why:
            raise ConfigError(f"a complete store made with other settings exists ({why}); it is kept as it "
                              "is; pass --overwrite to re-tile or choose another output folder", final)
    return kept_row(final, slide_id, path, attrs)


def scan(out_dir, paths, ids, config, mpps, target, overwrite: bool, *,
         threads: int = READ_THREADS) -> tuple[dict, dict]:
    """The complete stores of this run's slides already in ``out_dir``, and what to do with them.

    Parameters
    ----------
    out_dir : Path
    paths, ids, mpps : list
        This run's slides, their ids and level-0 µm/px overrides.
    config : TilingConfig
    target : dict or None
        The cohort's stain target.
    overwrite : bool
        Re-tile every slide (then nothing is decided here).
    threads : int
        Threads reading metadata and digesting sources.

    Returns
    -------
    found : dict
        slide id -> the row of its complete store (whatever this run does with it): the row of a
        slide this run does not reach.
    decided : dict
        index in ``paths`` -> the slide's final row for this run: kept (``kept`` True) or failed
        (a store made otherwise, refused). The other slides are to be tiled.
    """
    from tilewright.run.identity import RunIdentity
    from tilewright.store.manifest_row import kept_row
    from tilewright.run.slide import SlideResult

    finals = [store_path(out_dir, sid) for sid in ids]
    attrs = stores_attrs(finals, threads=threads)
    found = {sid: kept_row(f, sid, p, a) for f, sid, p, a in zip(finals, ids, paths, attrs) if a is not None}
    if overwrite or not found:
        return found, {}
    identity = RunIdentity(config, target)

    def decide(i):
        if not is_url(paths[i]) and not os.path.exists(paths[i]):
            return i, None  # the worker decides (it may see the source where this process does not)
        try:
            return i, resume_row(finals[i], attrs[i], paths[i], ids[i], config, mpps[i], identity)
        except TilewrightError as exc:
            return i, SlideResult(ids[i], paths[i], "failed", exc.one_line()).to_row()
        except Exception:  # noqa: BLE001 - the task makes the same check and records what it raises
            return i, None

    todo = [i for i, a in enumerate(attrs) if a is not None]
    with ThreadPoolExecutor(max(1, threads), thread_name_prefix="tilewright-resume") as pool:
        decided = {i: row for i, row in pool.map(decide, todo, chunksize=16) if row is not None}
    return found, decided
