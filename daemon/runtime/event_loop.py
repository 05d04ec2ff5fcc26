"""The event loop Poise's processes run in: asyncio's, with timers that fire to the microsecond.

asyncio's default loop on Linux waits in epoll, and Python rounds each wait up
to a whole millisecond (``selectors.EpollSelector.select``), so a timer due in
0.3 ms fires after 1 ms. For a simulated rig sampling in real time at 1 kHz
that means falling up to a period behind and catching up with two samples back
to back, which the host then reads together as if it had been late; the
daemon's own timers (its cycle watchdog, the status stream) are late the same
way.

:class:`PreciseEpollSelector` keeps epoll for readiness, so there is no limit
on the number or size of file descriptors, but does the waiting itself in
select(2) on the epoll descriptor alone: select takes its timeout in
microseconds, and an epoll descriptor reads as ready when any descriptor it
watches is. Then one non-blocking epoll poll collects the events.
"""

from __future__ import annotations

import asyncio
import select
import selectors
from collections.abc import Coroutine
from typing import Any, TypeVar

__all__ = ["PreciseEpollSelector", "new_event_loop", "run"]

T = TypeVar("T")

_SELECT_FD_LIMIT = 1024  # FD_SETSIZE on Linux: select(2) cannot watch a descriptor at or above it


if hasattr(selectors, "EpollSelector"):

    class PreciseEpollSelector(selectors.EpollSelector):
        """An epoll selector whose timed waits end within microseconds of their timeout."""

        def select(self, timeout: float | None = None) -> list[tuple[selectors.SelectorKey, int]]:
            epoll_fd = self.fileno()
            if timeout is not None and timeout > 0.0 and epoll_fd < _SELECT_FD_LIMIT:
                select.select([epoll_fd], [], [], timeout)  # a signal wakes it: asyncio's wakeup fd
                timeout = 0.0
            return super().select(timeout)

    def _new_selector() -> selectors.BaseSelector:
        return PreciseEpollSelector()

else:  # kqueue (macOS, BSD) takes its timeout in nanoseconds already

    def _new_selector() -> selectors.BaseSelector:
        return selectors.DefaultSelector()


def new_event_loop() -> asyncio.AbstractEventLoop:
    return asyncio.SelectorEventLoop(_new_selector())


def run(main: Coroutine[Any, Any, T]) -> T:
    """``asyncio.run(main)`` in a loop from :func:`new_event_loop`."""
    with asyncio.Runner(loop_factory=new_event_loop) as runner:
        return runner.run(main)
