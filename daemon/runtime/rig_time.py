"""Waiting on the rig's own clock: futures that complete at a sample time or on entering a state.

Sessions and tests wait in rig time, not wall-clock time, so a lockstep
simulated rig runs them as fast as the host can answer and a real rig in real
time. The control cycle feeds this once per answered sample (only when a wait is
due: one comparison otherwise) and on every change of state.
"""

from __future__ import annotations

import asyncio
import heapq
import math

from daemon.supervisor import State


class RigTimeWaiters:
    """The futures waiting for a rig time or a state."""

    __slots__ = ("_order", "_state_waiters", "_time_waiters", "next_due_s", "state")

    def __init__(self, state: State = State.DISCONNECTED):
        self.state = state
        self.next_due_s = math.inf  # the earliest time a future waits for
        self._state_waiters: list[tuple[frozenset[State], asyncio.Future[State]]] = []
        self._time_waiters: list[tuple[float, int, asyncio.Future[float]]] = []
        self._order = 0

    def wait_for_state(self, states: set[State]) -> asyncio.Future[State]:
        """A future that completes with the state once the supervisor is in one of ``states``."""
        future: asyncio.Future[State] = asyncio.get_running_loop().create_future()
        if self.state in states:
            future.set_result(self.state)
        else:
            self._state_waiters.append((frozenset(states), future))
        return future

    def wait_until(self, t_s: float) -> asyncio.Future[float]:
        """A future that completes at the first sample at or after rig time ``t_s``."""
        future: asyncio.Future[float] = asyncio.get_running_loop().create_future()
        self._order += 1
        heapq.heappush(self._time_waiters, (t_s, self._order, future))
        self.next_due_s = self._time_waiters[0][0]
        return future

    def entered(self, state: State) -> None:
        self.state = state
        keep = []
        for states, future in self._state_waiters:
            if future.done():
                continue
            if state in states:
                future.set_result(state)
            else:
                keep.append((states, future))
        self._state_waiters = keep

    def reached(self, t_s: float) -> None:
        """A sample at rig time ``t_s`` (call when ``t_s >= next_due_s``)."""
        waiters = self._time_waiters
        while waiters and waiters[0][0] <= t_s:
            _, _, future = heapq.heappop(waiters)
            if not future.done():
                future.set_result(t_s)
        self.next_due_s = waiters[0][0] if waiters else math.inf
