"""Sending one slide's progress events from where it is tiled to where the run is followed.

In the run's own process the events go straight to a callable. On a dask worker they are sent as
dask worker events (``Worker.log_event`` on a topic the client subscribed to), gathered so that a
slide sends at most one ``"tiles"`` event every :data:`SEND_EVERY` seconds: progress costs a few
small messages a second per worker, whatever the block size. A slide that finishes within
:data:`SEND_EVERY` seconds of its plan sends none: each message costs the scheduler and the run's
process about as much as a small slide's whole row, so its counts travel with its row instead
(``"progress"``, see :func:`slide_reporter`) and the run folds them into its ``"slide"`` event.
"""

from __future__ import annotations

import time

from tilewright.run.events import ProgressEvent

__all__ = ["slide_reporter", "events_from", "SEND_EVERY", "UNREPORTED"]

#: Seconds between two "tiles" events of one slide sent from a worker (and before its first).
SEND_EVERY = 0.5

#: Key of a row's progress counts that no event reported (removed before the row is recorded).
UNREPORTED = "progress"


def slide_reporter(report, slide_id: str):
    """``(on_plan, on_tiles, finish)`` callables for one slide.

    ``finish()`` ends the slide's reporting and returns ``(tiles, megapixels)`` read that no
    event reported (on a worker: everything read by a slide that finished within
    :data:`SEND_EVERY` seconds; otherwise nothing).

    Parameters
    ----------
    report : callable, str or None
        Gets :class:`ProgressEvent` values (callable), or the dask event topic to send them on
        (str), or nothing (None).
    slide_id : str
    """
    if report is None:
        def nothing(*_):
            return None

        return nothing, nothing, lambda: (0, 0.0)
    if isinstance(report, str):
        from distributed import get_worker

        worker, topic = get_worker(), report

        def send(event):
            worker.log_event(topic, event.to_dict())

        every = SEND_EVERY
    else:
        send, every = report, 0.0
    state = {"n": 0, "mp_tile": 0.0, "planned": None, "sent": False, "last": time.monotonic()}

    def start() -> None:  # the plan goes first, once the slide has lasted long enough to be shown
        if not state["sent"] and state["planned"] is not None:
            state["sent"] = True
            send(ProgressEvent("plan", slide_id, state["planned"]))

    def flush() -> None:
        start()
        if state["n"]:
            send(ProgressEvent("tiles", slide_id, state["n"], state["n"] * state["mp_tile"]))
            state["n"] = 0
        state["last"] = time.monotonic()

    def on_plan(planned: int, mp_per_tile: float) -> None:
        state["mp_tile"], state["planned"] = float(mp_per_tile), int(planned)
        state["last"] = time.monotonic()
        if not every:
            start()

    def on_tiles(n: int) -> None:
        state["n"] += int(n)
        if time.monotonic() - state["last"] >= every:
            flush()

    def finish():
        if state["sent"] or not every:
            flush()
            return 0, 0.0
        n, state["n"] = state["n"], 0
        return n, n * state["mp_tile"]

    return on_plan, on_tiles, finish


class events_from:
    """Within the block, progress events of the run's slides reach ``sink``.

    Yields what :func:`run_one` takes as ``report``: ``sink`` itself when slides run in this
    process (``client`` None), else a dask event topic the client is subscribed to (workers send
    on it, the client's event loop hands each event to ``sink``).
    """

    def __init__(self, client, sink):
        self.client, self.sink, self.topic = client, sink, None

    def __enter__(self):
        if self.client is None:
            return self.sink
        import uuid

        self.topic = f"tilewright-progress-{uuid.uuid4().hex}"

        def handler(event):
            _, msg = event
            try:
                self.sink(ProgressEvent.from_dict(msg))
            except Exception:  # noqa: BLE001 - a display error must not stop the run
                pass

        self.client.subscribe_topic(self.topic, handler)
        return self.topic

    def __exit__(self, *exc):
        if self.topic is not None:
            try:
                self.client.unsubscribe_topic(self.topic)
            except Exception:  # noqa: BLE001 - the client may be closing
                pass
        return False
