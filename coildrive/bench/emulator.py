"""Serve a :class:`~coildrive.bench.device.VirtualDevice` on a pseudo-terminal.

The emulator opens a pty pair, sets the slave side raw and keeps it open itself, so a
host can open, close and reopen the device path (:attr:`Emulator.path`) as it would a
USB serial adapter. Device time is the wall clock since :meth:`Emulator.serve` started.
The device paces its own output at the line rate (10 bits per byte); the emulator writes
what the device has put on the line, a few milliseconds at a time, and feeds the bytes
the host writes to the device. When nobody reads and the pty's buffer is full, bytes
wait up to ``write_wait`` s and are then dropped and counted (:attr:`Emulator.unread_dropped`):
a UART sends whether or not anyone listens.
"""

from __future__ import annotations

import errno
import os
import select
import threading
import time
import tty
from typing import Callable

from .device import LogEntry, VirtualDevice

#: Longest sleep between two looks at the device and the pty, s.
MAX_SLEEP = 0.005
#: Shortest sleep, s (below it the loop only burns the CPU).
MIN_SLEEP = 0.0005


class Emulator:
    """A virtual device on a pty.

    Parameters
    ----------
    device : the device to serve.
    write_wait : s that bytes may wait for room in the pty before they are dropped.
    clock : a monotonic clock in s (for tests).
    """

    def __init__(self, device: VirtualDevice, write_wait: float = 0.1,
                 clock: Callable[[], float] = time.monotonic):
        self.device = device
        self.write_wait = float(write_wait)
        self._clock = clock
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        os.set_blocking(self._master, False)
        self.path = os.ttyname(self._slave)
        self.unread_dropped = 0
        self.stop_requested = threading.Event()
        self._pending = bytearray()
        self._blocked_since: float | None = None
        self._closed = False

    def serve(self, duration: float | None = None,
              on_log: Callable[[LogEntry], None] | None = None) -> float:
        """Run until :attr:`stop_requested` is set or ``duration`` s have passed; then switch
        the coil off. ``on_log`` gets each :class:`LogEntry` as its device time passes.
        Returns the device time at the end, s."""
        dev = self.device
        start = self._clock()
        now = 0.0
        report = on_log or (lambda entry: None)
        while not self.stop_requested.is_set():
            now = self._clock() - start
            if duration is not None and now >= duration:
                now = duration
                break
            due = dev.next_due()
            wait = MAX_SLEEP if due is None else min(max(due - now, MIN_SLEEP), MAX_SLEEP)
            if self._pending:
                wait = min(wait, 0.002)
            try:
                readable, _, _ = select.select([self._master], [], [], wait)
            except InterruptedError:   # pragma: no cover - PEP 475 retries select
                readable = []
            now = self._clock() - start
            if readable:
                data = self._read_host()
                if data:
                    dev.receive(data, now)
            self._pending += dev.read(now)
            self._write(now)
            for entry in dev.log():
                report(entry)
        dev.shutdown(now)
        self._pending += dev.read(now)
        self._write(now)
        for entry in dev.log():
            report(entry)
        return now

    def _read_host(self) -> bytes:
        try:
            return os.read(self._master, 4096)
        except BlockingIOError:
            return b""
        except OSError as err:      # EIO: no slave open (we keep ours, so hardly ever)
            if err.errno == errno.EIO:
                return b""
            raise

    def _write(self, now: float) -> None:
        while self._pending:
            try:
                n = os.write(self._master, self._pending[:1024])
            except BlockingIOError:
                n = 0
            except OSError as err:
                if err.errno != errno.EIO:
                    raise
                n = 0
            if n == 0:
                if self._blocked_since is None:
                    self._blocked_since = now
                elif now - self._blocked_since > self.write_wait:
                    self.unread_dropped += len(self._pending)
                    self._pending.clear()
                    self._blocked_since = None
                return
            del self._pending[:n]
            self._blocked_since = None

    def close(self) -> None:
        """Close both ends of the pty (hosts that still have it open see it hang up)."""
        if not self._closed:
            self._closed = True
            os.close(self._master)
            os.close(self._slave)

    def __enter__(self) -> "Emulator":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
