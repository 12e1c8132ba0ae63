"""Before a cluster run: do the workers see the slides and the output folder the client sees?

Workers of a ``dask.distributed`` cluster open slides and write stores by path, so every worker
must see SOURCE and OUT at the same absolute paths (a shared file system). The client writes a
token file into OUT; each worker reads it back, checks that the slide files exist and writes a
file of its own there, which the client then reads. Any mismatch stops the run before any work,
with a message naming the worker, what it could not see, and how to fix it.

Slides and OUT given as object-store URLs need no shared disk: the same check runs through the
bucket (each worker reads a few of the slides' objects and the token object, and writes its own
object under OUT), so a worker without credentials, or with ones that may not read SOURCE or
write OUT, is named with the object store's reason.
"""

from __future__ import annotations

import os
import uuid

from tilewright.errors import ConfigError, TilewrightError
from tilewright.location.objpath import ObjectPath, as_path
from tilewright.location.url import is_url

__all__ = ["check_workers", "probe"]

#: Seconds to wait for a first worker to connect to the scheduler.
WAIT_FOR_WORKERS = 60


#: Slides in a bucket each worker reads (one request each) before a run.
URL_SAMPLE = 3


def _unreadable(path: str) -> str | None:
    """Why a worker cannot read a slide (None: it can): a missing local file, or the object store's reason."""
    if not is_url(path):
        return None if os.path.exists(path) else "no such file"
    from tilewright.location import objects

    try:
        if path.endswith("/"):  # a DICOM series under a prefix
            if not objects.list_children(path)[0]:
                return "no object under this prefix"
        else:
            objects.head(path)
    except TilewrightError as exc:
        return exc.reason
    return None


def probe(paths: list[str], out_dir: str, token: str) -> dict:
    """Run on a worker: which slides it cannot see, and whether it reads the token and writes OUT."""
    import socket

    host = socket.gethostname()
    local = [p for p in paths if not is_url(p)]
    remote = [p for p in paths if is_url(p)][:URL_SAMPLE]
    missing, reasons = [], []
    for p in local + remote:
        why = _unreadable(p)
        if why is not None:
            missing.append(p)
            reasons.append(why)
    out = as_path(out_dir)
    try:
        sees = (out / f".tilewright-check-{token}").read_text() == token
        out_error = ""
    except (OSError, TilewrightError) as exc:
        sees = False
        out_error = exc.reason if isinstance(exc, TilewrightError) else ""
    mine = out / f".tilewright-check-{token}-{host}-{os.getpid()}"
    try:
        mine.write_text(token)
        wrote = mine.name
    except (OSError, TilewrightError) as exc:
        wrote = None
        error = exc.reason if isinstance(exc, TilewrightError) else (exc.strerror or str(exc))
    else:
        error = ""
        if not sees:  # written into another folder than the client's OUT: leave nothing there
            mine.unlink(missing_ok=True)
    return {"host": host, "missing": missing[:3], "n_missing": len(missing), "why": reasons[:1],
            "sees_out": sees, "out_error": out_error, "wrote": wrote, "error": error}


def check_workers(client, paths, out_dir) -> None:
    """Raise :class:`ConfigError` unless every connected worker sees ``paths`` and ``out_dir``."""
    out_dir = as_path(out_dir)
    remote = isinstance(out_dir, ObjectPath) or any(is_url(p) for p in paths)
    token = uuid.uuid4().hex
    mine = out_dir / f".tilewright-check-{token}"
    try:
        client.wait_for_workers(1, timeout=WAIT_FOR_WORKERS)
    except (TimeoutError, OSError):
        raise ConfigError(f"no dask worker connected to the scheduler within {WAIT_FOR_WORKERS} s; start "
                          "workers (`dask worker <scheduler address>`) on machines that see SOURCE and OUT") from None
    mine.write_text(token)
    try:
        report = client.run(probe, [str(p) for p in paths], str(out_dir), token)
        problems = []
        for addr, r in sorted(report.items()):
            wrote_ok = r["wrote"] is not None and _read(out_dir / r["wrote"]) == token
            if r["n_missing"] and is_url(r["missing"][0]):
                why = f" ({r['why'][0]})" if r.get("why") else ""
                problems.append(f"worker {addr} on {r['host']} cannot read {r['n_missing']} slide(s), "
                                f"e.g. {r['missing'][0]}{why}")
            elif r["n_missing"]:
                problems.append(f"worker {addr} on {r['host']} cannot see {r['n_missing']} slide file(s), "
                                f"e.g. {r['missing'][0]}")
            if not r["sees_out"]:
                problems.append(f"worker {addr} on {r['host']} does not see the output folder {out_dir}"
                                + (f" ({r['out_error']})" if r.get("out_error") else ""))
            elif not wrote_ok:
                problems.append(f"worker {addr} on {r['host']} cannot write to {out_dir} "
                                f"({r['error'] or 'its file is not visible here'})")
        if problems:
            need = ("Every worker needs credentials that read SOURCE and write OUT (the cloud's standard "
                    "environment variables or config files on each machine)" if remote else
                    "Every worker must see SOURCE and OUT at the same absolute paths (a shared file system "
                    "mounted alike on every machine)")
            raise ConfigError("; ".join(problems[:4]) + ". " + need)
    finally:
        for p in out_dir.glob(f".tilewright-check-{token}*"):
            try:
                p.unlink(missing_ok=True)
            except (OSError, TilewrightError):
                pass


def _read(path) -> str | None:
    try:
        return path.read_text()
    except (OSError, TilewrightError):
        return None
