"""Reading whole-slide images at one physical resolution.

Modules
-------
open               ``open``: sniff the file, pick a backend, check the resolution.
wholeslide         ``WholeSlide`` (levels, µm/px, ``read_level``, ``at_mpp``, ``thumbnail``)
                   and ``Level``.
view               ``ResampledView``: the slide at a target µm/px (``read``, ``iter_blocks``,
                   ``block_size``, ``to_dask``).
downsample         area averaging with weights fixed by global coordinates (seam-free).
tiff_backend       tifffile structure + positional reads decoding only the touched tiles.
tiff_pages         which pages are pyramid levels, which are label/macro/thumbnail.
tiff_pixels        which photometric/compression pairs are served, and their RGB conversion.
dicom_series       the files of a DICOM whole-slide series (one slide) and their headers.
openslide_backend  every format OpenSlide reads.
resolution         µm/px and objective from TIFF tags, OME-XML, Aperio descriptions,
                   OpenSlide properties; plausibility checks.
sniff              missing / empty / not-an-image checks before any decoder runs.
colour             the embedded ICC profile: read (TIFF tag, OpenSlide), checked, provenance,
                   and its conversion to sRGB (``colour_transform``: profile bytes in).
colour_icc         ICC header and tag-table checks (RGB device profile, tags inside, a mapping).
colour_lut         the conversion as a table of every 8-bit colour, built once with LittleCMS.

Nothing here is imported by ``import tilewright``; openslide is imported only when the
OpenSlide backend is used.
"""
