"""Where bytes live: local files and object-store URLs, read and written the same way.

The lowest layer of tilewright (below :mod:`tilewright.slide`): slides, stores and cohort files
may be local paths or URLs (``s3://bucket/key``, ``gs://``, ``az://``, and ``https://`` for
reading). Cloud clients (obstore) are imported only when a URL is used, so importing tilewright
stays light.

- :mod:`~tilewright.location.url`: recognizing and splitting URLs.
- :mod:`~tilewright.location.client`: one object-store client a bucket, credentials and endpoints
  from each cloud's standard environment and config files, retries, and errors told in one line.
- :mod:`~tilewright.location.objects`: the few operations tilewright needs (head, ranged get,
  put, conditional put, list, delete).
- :mod:`~tilewright.location.byte_source`: positional reads of a slide file, local (``pread``)
  or remote (range requests, coalesced, with a small block cache).
- :mod:`~tilewright.location.objpath`: :class:`~tilewright.location.objpath.ObjectPath`, the
  part of :class:`pathlib.Path` the run and store code use, for URLs; :func:`as_path` gives a
  ``Path`` or an ``ObjectPath``.
"""
