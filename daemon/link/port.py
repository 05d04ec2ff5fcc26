"""The rig's byte link as one thing the daemon reads and writes: a raw, non-blocking descriptor.

Whatever the peer, the daemon holds a :class:`Port`: the descriptor the control
cycle reads and writes directly with ``os.read``/``os.write`` from an
event-loop reader callback, and how to release it. Two ways in:

- :func:`open_port` — pyserial opens and configures a device path such as
  /dev/ttyACM0, a pty path, or a ``socket://host:port`` URL (real rigs, and
  simulated ones on a pty or TCP);
- :func:`adopt_stream` — an already connected stream socket, for a simulated
  rig in the same process (a socket pair: kernel buffers, no pty or TCP).
"""

from __future__ import annotations

import os
import socket
from collections.abc import Callable
from dataclasses import dataclass

import serial

from daemon.errors import OperatorError

# The baud rate matters only on real UARTs; USB CDC devices and ptys ignore it.
BAUD_RATE = 921_600


@dataclass
class Port:
    """An open link: where it goes, the descriptor to read and write, and how to release it."""

    where: str
    fd: int
    release: Callable[[], None]

    def close(self) -> None:
        self.release()


def open_port(url: str) -> Port:
    """Open ``url`` with pyserial; raise OperatorError naming the URL if it cannot be opened."""
    try:
        device = serial.serial_for_url(url, baudrate=BAUD_RATE, timeout=0)
    except (serial.SerialException, ValueError, OSError) as exc:
        raise OperatorError(f"cannot open rig port {url}: {exc}") from None
    sock = getattr(device, "_socket", None)  # socket:// URLs: the connected TCP socket
    fd = sock.fileno() if sock is not None else device.fileno()
    os.set_blocking(fd, False)
    return Port(url, fd, device.close)


def adopt_stream(sock: socket.socket, where: str) -> Port:
    """Take an already connected stream socket as the rig's link (closing the port closes it)."""
    sock.setblocking(False)
    return Port(where, sock.fileno(), sock.close)
