"""The commands' event loop: epoll for readiness, select(2) for microsecond timeouts."""

from __future__ import annotations

import asyncio
import os
import selectors
import threading
import time

import pytest

from daemon.runtime import event_loop

pytestmark = pytest.mark.skipif(
    not hasattr(selectors, "EpollSelector"), reason="the precise epoll selector is for Linux"
)


def test_a_timed_wait_with_nothing_ready_returns_no_events():
    selector = event_loop.PreciseEpollSelector()
    read_end, write_end = os.pipe()
    try:
        selector.register(read_end, selectors.EVENT_READ)
        assert selector.select(0.001) == []
    finally:
        selector.close()
        os.close(read_end)
        os.close(write_end)


def test_a_long_wait_ends_when_a_watched_descriptor_becomes_ready():
    # Liveness, not speed: the wait is 30 s and the pipe is written after 20 ms; a selector
    # that only woke at its timeout would take the whole 30 s.
    selector = event_loop.PreciseEpollSelector()
    read_end, write_end = os.pipe()
    writer = threading.Timer(0.02, os.write, (write_end, b"x"))
    try:
        key = selector.register(read_end, selectors.EVENT_READ, data="pipe")
        writer.start()
        started = time.monotonic()
        events = selector.select(30.0)
        waited_s = time.monotonic() - started
        assert events == [(key, selectors.EVENT_READ)]
        assert waited_s < 15.0
    finally:
        writer.join()
        selector.close()
        os.close(read_end)
        os.close(write_end)


def test_the_loop_runs_timers_in_order_readers_and_signal_handlers():
    import signal

    order: list[str] = []

    async def main() -> list[str]:
        loop = asyncio.get_running_loop()
        read_end, write_end = os.pipe()
        got_signal = loop.create_future()
        loop.add_signal_handler(signal.SIGUSR2, got_signal.set_result, "signal")
        loop.add_reader(read_end, lambda: order.append(os.read(read_end, 10).decode()))
        try:
            loop.call_later(0.0004, order.append, "timer 0.4 ms")
            loop.call_later(0.0002, order.append, "timer 0.2 ms")
            await asyncio.sleep(0.002)
            os.write(write_end, b"pipe")
            await asyncio.sleep(0.002)
            os.kill(os.getpid(), signal.SIGUSR2)
            order.append(await got_signal)
        finally:
            loop.remove_signal_handler(signal.SIGUSR2)
            loop.remove_reader(read_end)
            os.close(read_end)
            os.close(write_end)
        return order

    assert event_loop.run(main()) == ["timer 0.2 ms", "timer 0.4 ms", "pipe", "signal"]
