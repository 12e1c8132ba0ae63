"""Ctrl-C / SIGTERM at the worst moments of a store write leaves no temporary folder behind.

Each case makes the race deterministic instead of hoping a timed signal lands in it:
- a zarr write still in flight on zarr's own thread when the main thread is interrupted (the
  cause of ``s1.zarr.partial-*`` folders left by ``tile-out`` after SIGINT, about 1 run in 6);
- a signal between the two renames that put a finished store in place of an old one;
- a signal while a temporary folder is being removed.
"""

from __future__ import annotations

import os
import signal
import threading
import time

import numpy as np
import pytest

import tilewright as tw
from tilewright.interrupts import Stopped, signals_deferred, stop_on_signals
from tilewright.store.reader import is_complete
from tilewright.store.writer import StoreWriter

pytestmark = pytest.mark.timeout(120)


@pytest.fixture(autouse=True)
def _ctrl_c_raises():
    """Ctrl-C's default behaviour, even when the test process inherited SIGINT ignored (a job
    started in the background by a non-interactive shell does)."""
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    yield
    signal.signal(signal.SIGINT, previous)


def _partials(folder):
    return [p.name for p in folder.iterdir() if ".partial-" in p.name]


def _interrupt_main():
    """Deliver SIGINT to the main thread, as Ctrl-C does (the default handler raises KeyboardInterrupt)."""
    signal.pthread_kill(threading.main_thread().ident, signal.SIGINT)


def test_interrupt_while_zarr_write_in_flight(slide, tmp_path, fast_config, monkeypatch):
    """The main thread is interrupted while zarr writes the ``tiles`` metadata on its IO thread.
    The write goes on; cleanup must wait for it, or it re-creates the removed temporary folder."""
    import zarr.storage._local as local

    src = slide("a.tif")
    out = tmp_path / "out"
    real = local._put
    state = {"fired": False, "done": threading.Event(), "caught": threading.Event()}

    def put(path, value, exclusive=False):
        if state["fired"] or ".partial-" not in str(path) or not str(path).endswith("tiles/zarr.json"):
            return real(path, value, exclusive=exclusive)
        state["fired"] = True
        try:
            _interrupt_main()
            # unfixed, the whole cleanup runs meanwhile and the interrupt reaches the caller; fixed,
            # the cleanup waits for this write, so the caller is reached only after the timeout
            state["caught"].wait(1.5)
            return real(path, value, exclusive=exclusive)  # the write lands after all
        finally:
            state["done"].set()

    monkeypatch.setattr(local, "_put", put)
    with pytest.raises(KeyboardInterrupt):
        try:
            tw.tile_slide(src, out / "a.zarr", fast_config)
        finally:
            state["caught"].set()
    assert state["done"].wait(10)  # the in-flight write has finished (either way)
    assert state["fired"]
    # ground truth: the folder existed before the run, so anything in it now came from the write
    assert _partials(out) == []
    assert not (out / "a.zarr").exists()
    monkeypatch.undo()
    assert tw.tile_slide(src, out / "a.zarr", fast_config).status == "ok"  # and a re-run completes


def _store(final, value, n=3, tile=16):
    with StoreWriter(final, n, tile, shard_tiles=2) as w:
        w.append(np.full((n, tile, tile, 3), value, np.uint8), np.zeros((n, 2)), np.zeros((n, 2)),
                 np.ones(n), np.ones(n))
        w.commit({"slide_id": final.stem})


def test_signal_between_the_two_renames_of_an_overwrite(tmp_path, monkeypatch):
    """An overwrite moves the old store aside, then the new one into place; a signal between the two
    must not leave the slide without a store (the old one would then be removed as a leftover)."""
    import tilewright.store.writer as writer

    final = tmp_path / "s.zarr"
    _store(final, 10)
    real = writer.os.replace
    calls = []

    def replace(src, dst):
        real(src, dst)
        if os.path.dirname(dst) != str(tmp_path):
            return  # a file inside a store (zarr writes its metadata this way too)
        calls.append(dst)
        if len(calls) == 1:
            _interrupt_main()  # arrives right after the old store was moved aside

    monkeypatch.setattr(writer.os, "replace", replace)
    with pytest.raises(KeyboardInterrupt):
        _store(final, 20)
    monkeypatch.undo()
    assert len(calls) == 2  # both renames ran: the signal waited for them
    assert is_complete(final) and int(tw.open_store(final).tiles[0, 0, 0, 0]) == 20  # the new store
    assert _partials(tmp_path) == []


def test_signal_while_removing_a_temporary_folder(tmp_path, monkeypatch):
    """Ctrl-C during the removal of a temporary store (many files) waits until it is gone."""
    import shutil

    import tilewright.store.writer as writer

    final = tmp_path / "s.zarr"
    w = StoreWriter(final, 8, 16, shard_tiles=1)
    w.append(np.zeros((8, 16, 16, 3), np.uint8), np.zeros((8, 2)), np.zeros((8, 2)), np.ones(8), np.ones(8))
    real = shutil.rmtree

    def rmtree(path, *args, **kwargs):
        _interrupt_main()  # lands while the folder is half removed
        time.sleep(0.05)
        return real(path, *args, **kwargs)

    monkeypatch.setattr(writer.shutil, "rmtree", rmtree)
    with pytest.raises(KeyboardInterrupt):
        w.abort()
    assert _partials(tmp_path) == []


def test_sigterm_stops_like_ctrl_c():
    """Inside ``stop_on_signals`` SIGTERM raises ``Stopped`` (a KeyboardInterrupt) carrying exit
    code 143 (shell convention: 128 + 15); SIGINT gives 130."""
    for sig, code in ((signal.SIGTERM, 143), (signal.SIGINT, 130)):
        with pytest.raises(Stopped) as e, stop_on_signals():
            signal.raise_signal(sig)
            time.sleep(1)  # pragma: no cover - the signal raises first
        assert isinstance(e.value, KeyboardInterrupt) and e.value.exit_code == code
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL  # the handlers are put back


def test_signals_deferred_delivers_after_the_block():
    done = []
    with pytest.raises(KeyboardInterrupt):
        with signals_deferred():
            signal.raise_signal(signal.SIGINT)
            done.append("after the signal")  # still runs: the signal is held
    assert done == ["after the signal"]
