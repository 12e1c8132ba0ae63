"""Before a cluster run: do the workers see the slides and the output folder the client sees?

Workers of a ``dask.distributed`` cluster open slides and write stores by path, so every worker
must see SOURCE and OUT at the same absolute paths (a shared file system). The client writes a
token file into OUT; each worker reads it back, checks that the slide files exist and writes a
file of its own there, which the client then reads. Any mismatch stops the run before any work,
with a message naming the worker, what it could not see, and how to fix it.
"""

from __future__ import annotations

import os
import uuid
from pathlib import Path

from tilewright.errors import ConfigError

__all__ = ["check_workers", "probe"]

#: Seconds to wait for a first worker to connect to the scheduler.
WAIT_FOR_WORKERS = 60


def probe(paths: list[str], out_dir: str, token: str) -> dict:
    """Run on a worker: which slides it cannot see, and whether it reads the token and writes OUT."""
    import socket

    host = socket.gethostname()
    missing = [p for p in paths if not os.path.exists(p)]
    try:
        sees = Path(out_dir, f".tilewright-check-{token}").read_text() == token
    except OSError:
        sees = False
    mine = Path(out_dir, f".tilewright-check-{token}-{host}-{os.getpid()}")
    try:
        mine.write_text(token)
        wrote = mine.name
    except OSError as exc:
        wrote = None
        error = exc.strerror or str(exc)
    else:
        error = ""
        if not sees:  # written into another folder than the client's OUT: leave nothing there
            mine.unlink(missing_ok=True)
    return {"host": host, "missing": missing[:3], "n_missing": len(missing), "sees_out": sees,
            "wrote": wrote, "error": error}


def check_workers(client, paths, out_dir) -> None:
    """Raise :class:`ConfigError` unless every connected worker sees ``paths`` and ``out_dir``."""
    out_dir = Path(out_dir)
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
            if r["n_missing"]:
                problems.append(f"worker {addr} on {r['host']} cannot see {r['n_missing']} slide file(s), "
                                f"e.g. {r['missing'][0]}")
            if not r["sees_out"]:
                problems.append(f"worker {addr} on {r['host']} does not see the output folder {out_dir}")
            elif not wrote_ok:
                problems.append(f"worker {addr} on {r['host']} cannot write to {out_dir} "
                                f"({r['error'] or 'its file is not visible here'})")
        if problems:
            raise ConfigError("; ".join(problems[:4]) + ". Every worker must see SOURCE and OUT at the same "
                              "absolute paths (a shared file system mounted alike on every machine)")
    finally:
        for p in out_dir.glob(f".tilewright-check-{token}*"):
            try:
                p.unlink()
            except OSError:
                pass


def _read(path: Path) -> str | None:
    try:
        return path.read_text()
    except OSError:
        return None
