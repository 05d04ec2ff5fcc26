"""`poise vet`: check that a rig's firmware keeps the wire protocol, clause by clause.

It opens the port as the daemon does (:func:`daemon.link.open_port`), acts as a host and
prints one line per clause of protocol/PROTOCOL.md it can observe: PASS, FAIL or SKIP, the
section, a short name and what it measured (docs/vet.md lists every clause and tolerance).
The rig is armed with small drives (2 % of its drive limit) and once, for a sample each, with
drives beyond its limit: run it with the cart mid-track and the hardware e-stop at hand.
Exit status 0 when no clause fails, 1 when one does, 2 on bad input.
"""

from __future__ import annotations

import argparse

from daemon.errors import OperatorError

NAME = "vet"
HELP = "conformance check of a rig's firmware against the wire protocol (one line per clause)"
WATCHDOG_MS_DEFAULT = 50


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--port", required=True, metavar="PORT",
                        help="serial device or pty path, or tcp://HOST:PORT (socket:// also works)")
    parser.add_argument("--rate", metavar="HZ",
                        help="sample rate to configure (default: the device's highest, at most 500)")
    parser.add_argument("--watchdog-ms", metavar="MS", default=str(WATCHDOG_MS_DEFAULT),
                        help=f"watchdog_ms to configure (default {WATCHDOG_MS_DEFAULT})")


def _whole(option: str, text: str, low: int, high: int) -> int:
    try:
        value = int(text)
    except ValueError:
        raise OperatorError(f"{option}: {text!r} is not a whole number") from None
    if not low <= value <= high:
        raise OperatorError(f"{option}: {value} is not in {low}..{high}")
    return value


def port_url(text: str) -> str:
    """The pyserial URL for ``--port``: tcp://HOST:PORT becomes socket://HOST:PORT."""
    if text.startswith("tcp://"):
        host, _sep, port = text[len("tcp://"):].rpartition(":")
        if not host or not port.isdigit() or not 0 < int(port) <= 65535:
            raise OperatorError(f"--port: {text!r} is not tcp://HOST:PORT")
        return "socket://" + text[len("tcp://"):]
    if not text:
        raise OperatorError("--port: empty")
    return text


def run(args: argparse.Namespace) -> int:
    from daemon.link import open_port
    from daemon.runtime import event_loop
    from daemon.vet import VetOptions, vet

    options = VetOptions(
        rate_hz=None if args.rate is None else _whole("--rate", args.rate, 1, 0xFFFF),
        watchdog_ms=_whole("--watchdog-ms", args.watchdog_ms, 1, 0xFFFF),
    )
    url = port_url(args.port)

    async def check():
        return await vet(open_port(url), options)

    report = event_loop.run(check())
    for outcome in report.outcomes():
        print(outcome.line, flush=True)
    return 0 if report.passed() else 1
