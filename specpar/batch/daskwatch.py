"""Waiting for Dask futures in bounded time.

A Dask client left to itself waits for a future as long as it takes: if the
scheduler goes away, or every worker does, or a worker never finishes, the
run never ends. :class:`Watchdog` waits in short steps instead and, between
steps, looks at the run's health; it stops the run with one
:class:`~specpar.core.errors.InputError` naming what failed when

- the run has passed its time limit (option ``time_limit``, ``--time-limit``);
- the client has lost its scheduler (futures cancelled by the lost connection,
  or a scheduler that has not answered for :data:`LOST_GRACE_S`);
- the scheduler has had no worker for :data:`LOST_GRACE_S`.

A worker killed while solving is replaced (a nanny restarts it, or the
scheduler gives its piece to another worker) well within the grace, so such a
run goes on and finishes.
"""
from __future__ import annotations

import threading
import time

from ..core.errors import InputError

__all__ = ["Watchdog", "RunStopped", "LOST_GRACE_S", "POLL_S", "HEALTH_EVERY_S"]

#: Seconds a run goes on without an answering scheduler, or with a scheduler that
#: has no worker, before it stops (our choice: longer than a nanny takes to restart
#: a killed worker on a loaded machine, short next to any run worth a cluster).
LOST_GRACE_S = 30.0
#: Seconds between looks at the futures (our choice).
POLL_S = 0.25
#: Seconds between questions to the scheduler about its workers (our choice).
HEALTH_EVERY_S = 2.0


class RunStopped(InputError):
    """The run was stopped by its :class:`Watchdog` (not by a failing piece)."""


class Watchdog:
    """Waits for the futures of one run; raises :class:`RunStopped` when the run
    cannot end well (see the module docstring).

    Parameters
    ----------
    client : distributed.Client
    time_limit : float or None
        Seconds from now after which the run stops; None for no limit.
    n_pieces : int
        Pieces of the run (counted in the messages).
    """

    def __init__(self, client, time_limit, n_pieces):
        self.client, self.time_limit, self.n_pieces = client, time_limit, n_pieces
        self.start = time.monotonic()
        self.done = 0
        self.unwell_since, self.next_health = None, self.start + HEALTH_EVERY_S

    def _address(self) -> str:
        try:
            return str(self.client.scheduler.address)
        except Exception:  # a closed client has no address any more
            return "(unknown address)"

    def workers(self):
        """Workers the scheduler knows (None when it does not answer in time)."""
        try:
            info = self.client.sync(self.client.scheduler.identity, n_workers=-1,
                                    callback_timeout=HEALTH_EVERY_S)
        except Exception:  # not answering: counted as lost
            return None
        return len(info.get("workers", {}))

    def _lost(self) -> RunStopped:
        return RunStopped(f"lost the Dask scheduler at {self._address()} ({self.done} of {self.n_pieces} "
                          f"pieces done); no output written; check that the scheduler runs and run again")

    def check(self) -> None:
        """Raise :class:`RunStopped` if the run is over its time limit or has had no
        scheduler or no worker for :data:`LOST_GRACE_S`."""
        now = time.monotonic()
        if self.time_limit is not None and now - self.start > self.time_limit:
            raise RunStopped(f"the dask run passed its time limit of {self.time_limit:g} s (time_limit, "
                             f"--time-limit) with {self.done} of {self.n_pieces} pieces done; no output "
                             f"written; raise the limit, add workers, or use --engine local")
        if now < self.next_health:
            return
        workers = self.workers() if self.client.status == "running" else None
        self.next_health = time.monotonic() + HEALTH_EVERY_S
        if workers:
            self.unwell_since = None
            return
        self.unwell_since = self.unwell_since or now
        if now - self.unwell_since <= LOST_GRACE_S:
            return
        if workers is None:
            raise self._lost()
        raise RunStopped(f"the Dask scheduler at {self._address()} has had no worker for {LOST_GRACE_S:g} s "
                         f"({self.done} of {self.n_pieces} pieces done); no output written; start workers "
                         f"('dask worker ADDRESS') or use --engine local")

    def result(self, future):
        """The result of ``future``, waiting in steps of :data:`POLL_S` with a
        :meth:`check` between steps. A future cancelled because the connection
        to the scheduler was lost raises :class:`RunStopped`; the piece's own
        errors are raised as they are.

        The wait is on a done-callback, never on ``future.result(timeout=...)``:
        with distributed 2026.8 on Python 3.11, a timed wait now and then lets
        an ``asyncio.CancelledError`` (not an ``Exception``) escape the
        coroutine inside ``Client.sync``, which then fails with "cannot access
        local variable 'result'"; the run reported that as a failing piece
        (seen on 2 of 15 runs of 1-4M rows polled every 0.25 s)."""
        finished = threading.Event()
        future.add_done_callback(lambda _f: finished.set())
        while not (finished.wait(POLL_S) or future.done()):
            self.check()
        if future.cancelled():
            raise self._lost()
        value = future.result()
        self.done += 1
        return value
