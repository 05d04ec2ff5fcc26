"""Errors reported to the operator as one line (exit status 2), not as a traceback."""


class OperatorError(Exception):
    """Something the operator asked for cannot be done; the message says what and where."""


class CommandRefused(Exception):
    """The supervisor will not carry out an operator command now; nothing changed.

    ``reason`` is one line saying why (for example "not armed"). The control API
    sends it back to the client, and the CLI prints it as
    ``poise: <command> refused: <reason>``.
    """

    def __init__(self, reason: str):
        super().__init__(reason)
        self.reason = reason
