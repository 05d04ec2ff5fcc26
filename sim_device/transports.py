"""Byte links between the simulated rig and a host: one interface, three peers.

- :class:`PtyTransport` — a pseudo-terminal in raw mode; its slave path opens
  with any serial program (``serial.Serial(path)``), exactly like a USB serial port.
- :class:`TcpTransport` — a listener on loopback, reachable with pyserial's
  ``socket://127.0.0.1:PORT`` URL. One host at a time; a new connection
  replaces the old one, as reopening a serial port would.
- :class:`SocketPairTransport` — the device end of a Unix stream socket pair
  whose other end a host in the same process takes (the daemon's built-in rig
  without a pty); again one host at a time.
- :class:`InProcessPipe` — two connected ends inside one event loop, for unit
  tests and benchmarks; delivery is in order and never loses bytes.

Every transport delivers received bytes to an ``on_bytes`` callback from the
event loop (``add_reader`` on raw file descriptors, no streams) and writes
without ever blocking: bytes the other side cannot take right now are dropped
and counted in ``tx_bytes_dropped``, as a UART drops bytes nobody reads.
"""

from __future__ import annotations

import asyncio
import fcntl
import os
import socket
import struct
import termios
import tty
from abc import ABC, abstractmethod
from collections import deque
from collections.abc import Callable

__all__ = [
    "InProcessPipe",
    "PipeEnd",
    "PtyTransport",
    "SocketPairTransport",
    "TcpTransport",
    "Transport",
]

OnBytes = Callable[[bytes], None]
READ_CHUNK = 65536


class Transport(ABC):
    """One end of a byte link."""

    tx_bytes_dropped: int = 0

    @property
    @abstractmethod
    def where(self) -> str:
        """How a host reaches this end (a path or URL pyserial opens); valid after :meth:`open`."""

    @abstractmethod
    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: OnBytes) -> None:
        """Start delivering received bytes to ``on_bytes`` from ``loop``."""

    @abstractmethod
    def write(self, data: bytes) -> None:
        """Send ``data`` now, or drop (and count) what cannot be sent."""

    @abstractmethod
    def close(self) -> None:
        """Stop delivering and release the link. Safe to call twice."""

    def unread_bytes(self) -> int:
        """Bytes sent that the host has not read yet, where the link can tell (else 0)."""
        return 0


class PtyTransport(Transport):
    """The device end (master) of a raw-mode pseudo-terminal.

    The slave end stays open here too, so the master never sees a hang-up
    while hosts open and close the slave path.
    """

    def __init__(self) -> None:
        self._master = -1
        self._slave = -1
        self._path = ""
        self._loop: asyncio.AbstractEventLoop | None = None

    @property
    def where(self) -> str:
        return self._path

    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: OnBytes) -> None:
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        os.set_blocking(self._master, False)
        self._path = os.ttyname(self._slave)
        self._loop = loop
        master = self._master

        def readable() -> None:
            try:
                data = os.read(master, READ_CHUNK)
            except (BlockingIOError, InterruptedError):
                return
            if data:
                on_bytes(data)

        loop.add_reader(master, readable)

    def write(self, data: bytes) -> None:
        try:
            sent = os.write(self._master, data)
        except (BlockingIOError, InterruptedError):
            sent = 0
        if sent < len(data):
            self.tx_bytes_dropped += len(data) - sent

    def unread_bytes(self) -> int:
        """Bytes waiting at the slave end for the host to read (FIONREAD)."""
        if self._slave < 0:
            return 0
        return struct.unpack("i", fcntl.ioctl(self._slave, termios.FIONREAD, b"\0\0\0\0"))[0]

    def close(self) -> None:
        if self._master < 0:
            return
        if self._loop is not None and not self._loop.is_closed():
            self._loop.remove_reader(self._master)
        os.close(self._master)
        os.close(self._slave)
        self._master = self._slave = -1


class _OneHostStream(Transport):
    """A transport whose host end is one connected stream socket at a time.

    A new host replaces the old one, as reopening a serial port would; a host
    that hangs up leaves the device talking to nobody (its bytes are dropped
    and counted) until the next one comes.
    """

    def __init__(self) -> None:
        self._client: socket.socket | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._on_bytes: OnBytes | None = None

    @property
    def connected(self) -> bool:
        return self._client is not None

    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: OnBytes) -> None:
        self._loop, self._on_bytes = loop, on_bytes

    def _take_client(self, client: socket.socket) -> None:
        assert self._loop is not None, "open() the transport first"
        self._drop_client()
        client.setblocking(False)
        self._client = client
        self._loop.add_reader(client.fileno(), self._readable)

    def _readable(self) -> None:
        client = self._client
        assert client is not None and self._on_bytes is not None
        try:
            data = client.recv(READ_CHUNK)
        except (BlockingIOError, InterruptedError):
            return
        except OSError:
            data = b""
        if data:
            self._on_bytes(data)
        else:
            self._drop_client()

    def _drop_client(self) -> None:
        client = self._client
        if client is None:
            return
        self._client = None
        if self._loop is not None and not self._loop.is_closed():
            self._loop.remove_reader(client.fileno())
        client.close()

    def write(self, data: bytes) -> None:
        client = self._client
        if client is None:
            self.tx_bytes_dropped += len(data)
            return
        try:
            sent = client.send(data)
        except (BlockingIOError, InterruptedError):
            sent = 0
        except OSError:
            self._drop_client()
            sent = 0
        if sent < len(data):
            self.tx_bytes_dropped += len(data) - sent

    def close(self) -> None:
        self._drop_client()


class TcpTransport(_OneHostStream):
    """A TCP listener on ``host`` (loopback by default); ``port=0`` picks a free port."""

    def __init__(self, port: int, host: str = "127.0.0.1"):
        if not 0 <= port <= 65535:
            raise ValueError(f"TCP port must be 0..65535 (got {port})")
        super().__init__()
        self._host = host
        self._port = port
        self._listener: socket.socket | None = None

    @property
    def where(self) -> str:
        return f"socket://{self._host}:{self._port}"

    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: OnBytes) -> None:
        listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            listener.bind((self._host, self._port))
        except OSError as exc:
            listener.close()
            raise OSError(exc.errno, f"cannot listen on {self._host}:{self._port}: {exc.strerror}") from None
        listener.listen(1)
        listener.setblocking(False)
        self._port = listener.getsockname()[1]
        self._listener = listener
        super().open(loop, on_bytes)
        loop.add_reader(listener.fileno(), self._accept)

    def _accept(self) -> None:
        assert self._listener is not None
        try:
            client, _address = self._listener.accept()
        except (BlockingIOError, InterruptedError):
            return
        client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self._take_client(client)

    def close(self) -> None:
        super().close()
        if self._listener is not None:
            if self._loop is not None and not self._loop.is_closed():
                self._loop.remove_reader(self._listener.fileno())
            self._listener.close()
            self._listener = None


class SocketPairTransport(_OneHostStream):
    """The device end of a Unix stream socket pair; a host in the same process calls
    :meth:`connect_host` for the other end (each call makes a new pair, like reopening a port).
    """

    @property
    def where(self) -> str:
        return "socket pair (in process)"

    def connect_host(self) -> socket.socket:
        """A new connected pair: the device keeps one end, the caller gets the other."""
        device_end, host_end = socket.socketpair(socket.AF_UNIX, socket.SOCK_STREAM)
        self._take_client(device_end)
        return host_end


class InProcessPipe:
    """Two connected :class:`PipeEnd` objects, ``device_end`` and ``host_end``.

    Writes never call the receiver directly: they join one FIFO that a loop
    callback drains, so a receiver may write back (the host answering
    telemetry, the device answering a command) without recursion. Draining
    keeps going while both sides keep talking, which is what makes lockstep
    runs fast, but hands control back to the loop every ``burst`` deliveries so
    timers and other tasks still run.
    """

    def __init__(self, burst: int = 2000):
        self.burst = burst
        self._queue: deque[tuple[PipeEnd, bytes]] = deque()
        self._loop: asyncio.AbstractEventLoop | None = None
        self._scheduled = False
        self.device_end = PipeEnd(self, "in-process pipe (device end)")
        self.host_end = PipeEnd(self, "in-process pipe (host end)")
        self.device_end.peer = self.host_end
        self.host_end.peer = self.device_end

    def _schedule_drain(self) -> None:
        """Have the loop drain the queue soon, unless that is arranged or there is no loop yet."""
        if not self._scheduled and self._loop is not None:
            self._scheduled = True
            self._loop.call_soon(self._drain)

    def _attach(self, loop: asyncio.AbstractEventLoop) -> None:
        if self._loop is not None and self._loop is not loop:
            raise RuntimeError("both ends of an in-process pipe must use the same event loop")
        self._loop = loop
        if self._queue:
            self._schedule_drain()

    def _drain(self) -> None:
        queue = self._queue
        popleft = queue.popleft
        held: list[tuple[PipeEnd, bytes]] = []
        for _ in range(self.burst):
            if not queue:
                break
            receiver, data = popleft()
            on_bytes = receiver.on_bytes
            if on_bytes is None:
                if not receiver.closed:
                    held.append((receiver, data))  # not opened yet: keep until it is
                continue
            on_bytes(data)
        queue.extendleft(reversed(held))
        self._scheduled = bool(queue) and len(queue) > len(held)
        if self._scheduled:
            assert self._loop is not None
            self._loop.call_soon(self._drain)


class PipeEnd(Transport):
    """One end of an :class:`InProcessPipe`."""

    def __init__(self, pipe: InProcessPipe, name: str):
        self._pipe = pipe
        self._queue = pipe._queue
        self._name = name
        self.peer: PipeEnd | None = None
        self.on_bytes: OnBytes | None = None
        self.closed = False

    @property
    def where(self) -> str:
        return self._name

    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: OnBytes) -> None:
        self.on_bytes = on_bytes
        self.closed = False
        self._pipe._attach(loop)

    def write(self, data: bytes) -> None:
        """Queue ``data`` for the peer (one FIFO for both directions; see :class:`InProcessPipe`)."""
        peer = self.peer
        assert peer is not None
        if self.closed or peer.closed:
            self.tx_bytes_dropped += len(data)
            return
        self._queue.append((peer, data))
        if not self._pipe._scheduled:
            self._pipe._schedule_drain()

    def close(self) -> None:
        self.closed = True
        self.on_bytes = None
