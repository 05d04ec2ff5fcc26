"""Open the rig's byte link with pyserial and expose its raw, non-blocking file descriptor.

pyserial opens and configures the port (a device path such as /dev/ttyACM0, a
pty path, or a ``socket://host:port`` URL); the control cycle then reads and
writes the descriptor directly with ``os.read``/``os.write`` from an event-loop
reader callback, without pyserial's timeouts or buffering in the way.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import serial

from daemon.errors import OperatorError

# The baud rate matters only on real UARTs; USB CDC devices and ptys ignore it.
BAUD_RATE = 921_600


@dataclass
class Port:
    """An open link: the pyserial object that owns it and the descriptor to read and write."""

    url: str
    device: serial.SerialBase
    fd: int

    def close(self) -> None:
        self.device.close()


def open_port(url: str) -> Port:
    """Open ``url`` with pyserial; raise OperatorError naming the URL if it cannot be opened."""
    try:
        device = serial.serial_for_url(url, baudrate=BAUD_RATE, timeout=0)
    except (serial.SerialException, ValueError, OSError) as exc:
        raise OperatorError(f"cannot open rig port {url}: {exc}") from None
    sock = getattr(device, "_socket", None)  # socket:// URLs: the connected TCP socket
    fd = sock.fileno() if sock is not None else device.fileno()
    os.set_blocking(fd, False)
    return Port(url, device, fd)
