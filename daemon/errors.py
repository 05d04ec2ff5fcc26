"""Errors reported to the operator as one line (exit status 2), not as a traceback."""


class OperatorError(Exception):
    """Something the operator asked for cannot be done; the message says what and where."""
