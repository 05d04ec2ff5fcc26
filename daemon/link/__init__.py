"""The link to the rig: the port, the handshake, acknowledged commands, heartbeats, statistics.

:func:`open_port` opens any pyserial URL, :func:`adopt_stream` takes a connected
socket (a simulated rig in the same process); either hands back the raw file
descriptor the control cycle reads; :class:`Link` speaks the protocol's non-telemetry
traffic over it (telemetry is the control cycle's job, see
:mod:`daemon.runtime.cycle`).
"""

from daemon.link.link import Link, LinkDown
from daemon.link.port import Port, adopt_stream, open_port

__all__ = ["Link", "LinkDown", "Port", "adopt_stream", "open_port"]
