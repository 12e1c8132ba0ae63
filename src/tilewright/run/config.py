"""The tiling configuration: one dataclass, loadable from and printable as TOML."""

from __future__ import annotations

import dataclasses
import math
import os
from dataclasses import InitVar, dataclass, field
from pathlib import Path

from tilewright.errors import ConfigError
from tilewright.slide.colour_icc import MODES as _COLOUR_PROFILES
from tilewright.store.compression import COMPRESSIONS as _COMPRESSIONS

__all__ = ["TilingConfig"]

_NORMALIZERS = (None, "macenko", "reinhard")


@dataclass
class TilingConfig:
    """Everything that decides what a tile store contains.

    Parameters
    ----------
    mpp : float
        Target resolution in µm/px (0.5 ≈ "20x", common practice).
    tile : int
        Tile side in target pixels.
    stride : int or None
        Grid step in target pixels; None means ``tile`` (no overlap).
    min_tissue : float
        Minimum tissue fraction of a tile's footprint.
    normalizer : {None, "macenko", "reinhard"}
        Stain normalization method.
    reference : str, dict or None
        Reference image path, or a fitted normalizer dictionary. None with a normalizer means
        the cohort's own median target (computed once per output folder). Needs ``normalizer``
        (a reference without one is a :class:`ConfigError`, not silently ignored).
    max_tiles : int or None
        Keep at most this many tiles a slide, sampled reproducibly and spread over the slide.
    seed : int
        Seed for tile sampling and the stain estimation sample.
    mask_mpp : float
        Resolution asked of the tissue mask, thumbnail and QC overlay, at least as coarse as ``mpp``
        (a target coarser than the mask is a :class:`ConfigError`). A pyramid level within 5 % of it
        is used as is; the store's ``mask_mpp`` attribute is the true µm/px of the mask.
    tolerance : float
        Relative difference under which a pyramid level is used as is for the tiles (default
        0.005: the scale error stays under 1.3 px across a 256-px tile); otherwise the nearest
        finer level is area-averaged down to ``mpp``. The store records the true µm/px.
    from_level0 : bool
        Take every tile from level 0 (area-averaged to ``mpp``, or as is within ``tolerance``),
        whatever the pyramid offers (default False: the nearest level, see ``tolerance``). Scanners
        make their own lower levels with their own filters and JPEG settings, so tiles taken
        from them differ in sharpness by scanner; from level 0 every slide's tiles are made
        one way. Costs decoding up to 4x the pixels where a level would have served.
    max_ink : float or None
        Drop tiles whose footprint is more than this share marker ink (the tissue mask's ink,
        grown by ``ink_margin_um``); None keeps them (default). Every store keeps each tile's ink
        share (``ink``).
    min_sharpness : float or None
        Drop tiles whose variance of the Laplacian is lower (blur).
    exclude_ink, exclude_dark : bool
        Tissue-mask artifact filters.
    tissue_sensitivity : float
        Unitless factor dividing the tissue mask's density threshold (floor and ceiling): 2 keeps
        tissue half as dense (faint slides), 0.5 only tissue twice as dense. Default 1.
    min_piece_um2 : float
        Tissue pieces smaller than this area, in µm², are dropped (default 25,000 µm², a disc
        about 180 µm across).
    dark_od : float
        With ``exclude_dark``, pixels whose mean optical density (over R, G, B, against the glass)
        is above this are removed as folds and debris (default 0.9; a fold of two layers of
        ordinary tissue is about 0.3-0.6).
    ink_margin_um : float
        Marker ink is grown by this many µm before it is cut out (default 8, the mask's smoothing
        width; other marker is looked for beyond twice it).
    keep : list of str or None
        Region classes to keep (requires regions; a string is split on commas). Names match
        the file's classes ignoring case and spacing; a kept class a slide's file lacks covers
        nothing there (warned), and a slide whose file has none of them fails.
    regions : str or None
        Region file, or folder with one file per slide id (requires keep).
    min_region : float
        Minimum kept-class fraction of a tile's footprint.
    class_property : str or None
        GeoJSON feature property holding the class (default: ``classification``, ``class``,
        ``label``; a feature's ``name`` only when named here).
    default_class : str or None
        Class of GeoJSON features without one (default: such features are skipped, warned).
    feature_kinds : list of str or None
        Kinds of GeoJSON feature read, as their ``objectType``/``object_type`` property names
        them; default annotations only, ``["all"]`` for every feature. Its old name
        ``object_types`` (keyword or TOML key) is still read, with a warning, for one release.
    compression : {"lz4", "zstd", "zlib", "none", "webp", "jpeg"}
        Compression of stored tiles (see :mod:`tilewright.store.compression`): lossless Blosc lz4
        (default), Blosc zstd, zlib, none or lossless WebP; or lossy JPEG, which changes the tiles.
    quality : int
        JPEG quality, 1-100 (default 90); used only with ``compression="jpeg"``.
    shard_tiles : int
        Tiles a shard file holds.
    block : int
        Side of the blocks read from the slide, in target pixels.
    stain_sample : int
        Tiles sampled to estimate a slide's own stain once.
    per_tile_stain : bool
        Estimate the source stain per tile instead of once per slide.
    estimate_stains : bool
        Store un-normalized tiles plus the slide's stain estimates (Macenko and Reinhard, from the
        same ``stain_sample`` tiles a normalizing run uses, against the slide's glass) and a
        sample of its tissue pixels, so readers normalize when reading (``open_store(...,
        normalize=...)``, ``open_cohort``, the datasets) to any target, without re-tiling. Not with
        ``normalizer`` (tiles are normalized once, either way).
    stain_groups : str or None
        A CSV with ``slide_id`` and a grouping column (``stain_group_column``, default ``site``):
        the cohort's default stain target is then built from an equal share of each group's
        slides. Default: groups by folder and file format (:mod:`tilewright.run.target`).
    stain_group_column : str
        The column of ``stain_groups`` to balance the target over.
    threads : int
        Reader threads inside one slide.
    qc_overlay : bool
        Write a QC picture (tissue outline, ink, kept tiles) to ``qc/<slide_id>.png`` beside the store.
    verify_jpeg : bool
        Check every decoded JPEG source tile for damage decoders pass silently (on by default;
        see :func:`tilewright.open`): a damaged slide fails with the tile named instead of
        storing garbage pixels. ``False`` skips the check (faster JPEG decoding, garbage kept).
    source_digest : {"sampled", "full"}
        ``"sampled"`` (default): each store records the sampled digest of its source (16 MiB
        read; the resume check). ``"full"`` also records the SHA-256 of every byte
        (``source.sha256``, the manifest's ``source_sha256``: what ``sha256sum`` prints, to compare
        with an archive's checksums), read once beside the tiles. See
        :mod:`tilewright.store.provenance` for what each can and cannot prove.
    colour_profile : {"apply", "ignore"}
        ``"apply"`` converts pixels from each slide's embedded ICC profile to sRGB before the
        mask, stain estimate and tiles see them (see :mod:`tilewright.slide.colour`);
        ``"ignore"`` keeps the files' raw pixels. It changes tiles: a complete store made with
        the other value is not mixed in on resume.
    """

    mpp: float = 0.5
    tile: int = 256
    stride: int | None = None
    min_tissue: float = 0.5
    normalizer: str | None = None
    reference: str | dict | None = None
    max_tiles: int | None = None
    seed: int = 0
    mask_mpp: float = 8.0
    tolerance: float = 0.005
    from_level0: bool = False
    max_ink: float | None = None
    min_sharpness: float | None = None
    exclude_ink: bool = True
    exclude_dark: bool = False
    tissue_sensitivity: float = 1.0
    min_piece_um2: float = 25_000.0
    dark_od: float = 0.9
    ink_margin_um: float = 8.0
    keep: list | None = None
    regions: str | None = None
    min_region: float = 0.5
    class_property: str | None = None
    default_class: str | None = None
    feature_kinds: list | None = None
    compression: str = "lz4"
    quality: int = 90
    shard_tiles: int = 64
    block: int = 2048
    stain_sample: int = 64
    per_tile_stain: bool = False
    estimate_stains: bool = False
    stain_groups: str | None = None
    stain_group_column: str = "site"
    threads: int = 2
    qc_overlay: bool = True
    verify_jpeg: bool = True
    colour_profile: str = "apply"
    source_digest: str = "sampled"
    extra: dict = field(default_factory=dict, repr=False)
    object_types: InitVar[list | None] = None  # old name of feature_kinds (warns; next release: gone)

    def __post_init__(self, object_types=None):
        if object_types is not None:
            self.feature_kinds = _renamed_setting("object_types", object_types, "feature_kinds", self.feature_kinds)
        self.validate()

    def validate(self) -> "TilingConfig":
        """Raise :class:`ConfigError` for any invalid value."""
        def positive(name, value, kind=float):
            if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value) or value <= 0:
                raise ConfigError(f"{name} must be a positive number, got {value!r}")
            if kind is int and int(value) != value:
                raise ConfigError(f"{name} must be a whole number, got {value!r}")

        positive("mpp", self.mpp)
        positive("mask_mpp", self.mask_mpp)
        if self.mpp > self.mask_mpp:  # the mask that selects tiles must resolve them
            raise ConfigError(f"mpp= (--mpp) {self.mpp:g} µm/px is coarser than the tissue mask (mask_mpp= / --mask-mpp "
                              f"{self.mask_mpp:g} µm/px) that chooses the tiles; tiles are usually 0.25-1 µm/px "
                              f"(common practice); for coarser tiles set --mask-mpp {self.mpp:g} or more")
        positive("tile", self.tile, int)
        positive("shard_tiles", self.shard_tiles, int)
        positive("block", self.block, int)
        positive("threads", self.threads, int)
        positive("stain_sample", self.stain_sample, int)
        positive("tissue_sensitivity", self.tissue_sensitivity)
        positive("dark_od", self.dark_od)
        for name in ("min_piece_um2", "ink_margin_um"):
            v = getattr(self, name)
            if not isinstance(v, (int, float)) or isinstance(v, bool) or not math.isfinite(v) or v < 0:
                raise ConfigError(f"{name} must be a number >= 0, got {v!r}")
        if self.stride is not None:
            positive("stride", self.stride, int)
        if self.max_tiles is not None:
            positive("max_tiles", self.max_tiles, int)
        if self.max_ink is not None and (isinstance(self.max_ink, bool) or not isinstance(self.max_ink, (int, float))
                                         or not 0 <= self.max_ink <= 1):
            raise ConfigError(f"max_ink must lie between 0 and 1 (a share of the tile), got {self.max_ink!r}")
        if not isinstance(self.from_level0, bool):
            raise ConfigError(f"from_level0 must be true or false, got {self.from_level0!r}")
        for name in ("min_tissue", "min_region"):
            v = getattr(self, name)
            if not isinstance(v, (int, float)) or not 0 <= v <= 1:
                raise ConfigError(f"{name} must lie between 0 and 1, got {v!r}")
        if not 0 <= self.tolerance < 1:
            raise ConfigError(f"tolerance must lie in [0, 1), got {self.tolerance!r}")
        if isinstance(self.normalizer, str):
            self.normalizer = self.normalizer.lower()
            if self.normalizer in ("", "none"):
                self.normalizer = None
        if self.normalizer not in _NORMALIZERS:
            raise ConfigError(f"normalizer must be macenko, reinhard or none, got {self.normalizer!r}")
        if isinstance(self.compression, str):
            self.compression = self.compression.lower()
        if self.compression not in _COMPRESSIONS:
            raise ConfigError(f"compression must be one of {', '.join(_COMPRESSIONS)}, got {self.compression!r}")
        from tilewright.store.provenance import DIGESTS

        if self.source_digest not in DIGESTS:
            raise ConfigError(f"source_digest must be sampled or full, got {self.source_digest!r}")
        if self.colour_profile not in _COLOUR_PROFILES:
            raise ConfigError(f"colour_profile must be apply or ignore, got {self.colour_profile!r}")
        if isinstance(self.quality, bool) or not isinstance(self.quality, int) or not 1 <= self.quality <= 100:
            raise ConfigError(f"quality must be a whole number from 1 to 100, got {self.quality!r}")
        self._validate_regions()
        if self.reference is not None and not isinstance(self.reference, (str, dict, os.PathLike)):
            raise ConfigError(f"reference must be an image path or a fitted normalizer dict, got {type(self.reference).__name__}")
        if isinstance(self.reference, os.PathLike):
            self.reference = os.fspath(self.reference)
        if self.estimate_stains and self.normalizer is not None:
            raise ConfigError("estimate_stains= (--estimate-stains) stores un-normalized tiles for normalizing when "
                              f"reading; normalizer= (--normalize {self.normalizer}) normalizes them now: choose one")
        if self.reference is not None and self.normalizer is None:  # never silently ignored
            method = self.reference.get("method") if isinstance(self.reference, dict) else None
            raise ConfigError("reference= (--reference) is the target of stain normalization and needs normalizer= "
                              f"(--normalize {method if method in _NORMALIZERS[1:] else 'macenko or reinhard'}); "
                              "without it the reference would be ignored")
        return self

    def view(self, slide):
        """The view of ``slide`` these settings cut tiles from (µm/px, tolerance, from_level0)."""
        return slide.at_mpp(self.mpp, tolerance=self.tolerance, from_level0=self.from_level0)

    def mask_options(self) -> dict:
        """Keyword arguments of :func:`tilewright.tissue.mask.tissue_mask` these settings choose."""
        return {"exclude_ink": self.exclude_ink, "exclude_dark": self.exclude_dark,
                "sensitivity": float(self.tissue_sensitivity), "min_component_um2": float(self.min_piece_um2),
                "dark_od": float(self.dark_od), "ink_margin_um": float(self.ink_margin_um)}

    def _validate_regions(self):
        from tilewright.regions.classnames import keep_names

        if self.keep is not None:
            if not isinstance(self.keep, (str, list, tuple)):
                raise ConfigError(f"keep must be class names (a list or a comma-separated string), got {self.keep!r}")
            self.keep = list(keep_names(self.keep)) or None
        if isinstance(self.feature_kinds, str):
            self.feature_kinds = [t.strip() for t in self.feature_kinds.split(",") if t.strip()] or None
        if self.keep and not self.regions:
            raise ConfigError("keep= needs regions= (a region file or folder)")
        if self.regions and not self.keep:
            raise ConfigError("regions= needs keep= (the region classes whose tiles to keep, e.g. keep=['tumour']); "
                              "without it the regions would be ignored")
        for name in ("class_property", "default_class", "feature_kinds"):
            if getattr(self, name) is not None and not self.regions:
                raise ConfigError(f"{name}= reads region files: it needs regions= and keep=")

    @property
    def step(self) -> int:
        """The grid step (stride, or tile when no stride is set)."""
        return int(self.stride or self.tile)

    def to_dict(self) -> dict:
        """JSON/TOML-safe dictionary of every field (None values kept)."""
        d = dataclasses.asdict(self)
        d.pop("extra")
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "TilingConfig":
        names = {f.name for f in dataclasses.fields(cls)} - {"extra"}
        d = dict(d)
        if "object_types" in d:  # the old key: read (warned) for one release
            d["feature_kinds"] = _renamed_setting("object_types", d.pop("object_types"), "feature_kinds",
                                                  d.get("feature_kinds"))
        unknown = sorted(set(d) - names)
        if unknown:
            raise ConfigError(f"unknown configuration keys: {', '.join(unknown)}; known: {', '.join(sorted(names))}")
        return cls(**d)

    def replace(self, **changes) -> "TilingConfig":
        return dataclasses.replace(self, **changes)

    @classmethod
    def from_toml(cls, path: str | os.PathLike) -> "TilingConfig":
        """Load from a TOML file (keys as the field names; a ``[tiling]`` table is also accepted)."""
        from tilewright.store.settings import read_settings_toml

        path = Path(path)
        data = read_settings_toml(path)
        try:
            return cls.from_dict(data)
        except ConfigError as exc:
            raise ConfigError(exc.reason, path) from None

    def to_toml(self) -> str:
        """The configuration as TOML (fields that are None are written as comments)."""
        import tomli_w

        d = self.to_dict()
        body = tomli_w.dumps({k: v for k, v in d.items() if v is not None})
        unset = "".join(f"# {k} = (unset)\n" for k, v in d.items() if v is None)
        return "# tilewright tiling configuration\n" + body + unset


def _renamed_setting(old: str, value, new: str, current):
    """The value of a setting given under its old name, with a warning; ConfigError when both are given."""
    import warnings

    if current is not None:
        raise ConfigError(f"{old}= is the old name of {new}=; give {new}= alone")
    warnings.warn(f"the setting {old} is renamed {new} (--{new.replace('_', '-')}); the old name will be removed in "
                  "the next release", FutureWarning, stacklevel=4)
    return value
