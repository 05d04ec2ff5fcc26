"""Retry bookkeeping for acknowledged host commands; pure, the caller passes the time in.

The link sends an acked command (Configure, Arm, Stop, ClearFaults, Identify), calls
``track(command, now_s)``, passes every received Reply/DeviceHello to ``resolve``, and calls
``poll(now_s)`` regularly: it returns the commands to send again (same seq, so the device's
Reply matches) and the ones that ran out of attempts.
"""

from dataclasses import dataclass, field

from protocol.messages import ACKED_MESSAGES, DeviceHello, Identify, Message, Reply


@dataclass
class PendingCommand:
    """An acked command waiting for its answer."""

    command: Message
    attempts: int  # transmissions so far
    deadline_s: float  # when to send again (or give up) if still unanswered


@dataclass(frozen=True, slots=True)
class RetryDue:
    """What ``poll`` found: commands to send again and commands given up on."""

    resend: list[Message] = field(default_factory=list)
    failed: list[Message] = field(default_factory=list)


class RetryTracker:
    """Pending acked commands keyed by (type id, seq)."""

    def __init__(self, timeout_s: float, max_attempts: int) -> None:
        if timeout_s <= 0 or max_attempts < 1:
            raise ValueError(
                "retry timeout_s must be > 0 and max_attempts >= 1, "
                f"got {timeout_s} and {max_attempts}"
            )
        self.timeout_s = timeout_s
        self.max_attempts = max_attempts
        self._pending: dict[tuple[int, int], PendingCommand] = {}

    @property
    def pending(self) -> list[Message]:
        """Commands still waiting for an answer, oldest first."""
        return [entry.command for entry in self._pending.values()]

    def track(self, command: Message, now_s: float) -> None:
        """Register the first transmission of an acked command at time ``now_s``."""
        if type(command) not in ACKED_MESSAGES:
            raise ValueError(f"{type(command).__name__} is not an acknowledged command")
        key = (command.TYPE_ID, command.seq)
        self._pending[key] = PendingCommand(command, 1, now_s + self.timeout_s)

    def resolve(self, answer: Message) -> Message | None:
        """Match a Reply (or a DeviceHello, which answers Identify); return the command answered.

        A Reply names the command in ``for_type``/``for_seq``; a DeviceHello answering an
        Identify carries that Identify's seq in its header (PROTOCOL.md section 6). Returns
        None when ``answer`` answers nothing pending (a late duplicate, an unprompted hello,
        or another type).
        """
        if isinstance(answer, Reply):
            key = (answer.for_type, answer.for_seq)
        elif isinstance(answer, DeviceHello):
            key = (Identify.TYPE_ID, answer.seq)
        else:
            return None
        entry = self._pending.pop(key, None)
        return entry.command if entry is not None else None

    def poll(self, now_s: float) -> RetryDue:
        """Commands whose deadline has passed: resend while attempts remain, else give up."""
        due = RetryDue()
        for key, entry in list(self._pending.items()):
            if now_s < entry.deadline_s:
                continue
            if entry.attempts >= self.max_attempts:
                del self._pending[key]
                due.failed.append(entry.command)
            else:
                entry.attempts += 1
                entry.deadline_s = now_s + self.timeout_s
                due.resend.append(entry.command)
        return due
