"""The one exception type of the run store: a one-line message naming the database and what failed."""

from __future__ import annotations

from daemon.errors import OperatorError


class RecordingError(OperatorError):
    """The run store cannot be opened, read or written; the message names the file."""
