"""A control API client that floods the daemon with pipelined status requests, in its own process.

Usage: python tests/api_flooder.py SOCKET_PATH

It connects, prints ``flooding`` once its first reply is back, then sends
``{"id": N, "cmd": "status"}`` lines as fast as the socket takes them (one
thread writes, never waiting for a reply) while another thread reads and
counts the replies. It stops when its standard input closes (or on SIGTERM)
and prints one JSON line: requests sent, replies read, error replies.

The abuse tests (tests/test_api_abuse.py) and bench/bench_api_flood.py run it;
standard library only, so it starts fast and shares nothing with the daemon.
"""

from __future__ import annotations

import json
import signal
import socket
import sys
import threading

BATCH = 64  # requests per write


class Flood:
    def __init__(self, path: str):
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        self.sock.connect(path)
        self.stopping = threading.Event()
        self.sent = 0
        self.replies = 0
        self.errors = 0
        self.first_reply = threading.Event()

    def write(self) -> None:
        next_id = 1
        try:
            while not self.stopping.is_set():
                batch = b"".join(
                    b'{"id":%d,"cmd":"status"}\n' % request_id
                    for request_id in range(next_id, next_id + BATCH)
                )
                self.sock.sendall(batch)
                next_id += BATCH
                self.sent += BATCH
        except OSError:
            self.stopping.set()

    def read(self) -> None:
        pending = b""
        try:
            while True:
                chunk = self.sock.recv(1 << 20)
                if not chunk:
                    break
                lines = (pending + chunk).split(b"\n")
                pending = lines.pop()
                for line in lines:
                    self.replies += 1
                    if b'"ok":false' in line:
                        self.errors += 1
                self.first_reply.set()
        except OSError:
            pass
        self.stopping.set()
        self.first_reply.set()


def main() -> int:
    flood = Flood(sys.argv[1])
    signal.signal(signal.SIGTERM, lambda *_: flood.stopping.set())
    reader = threading.Thread(target=flood.read, daemon=True)
    reader.start()
    flood.sock.sendall(b'{"id":0,"cmd":"status"}\n')
    flood.first_reply.wait()
    print("flooding", flush=True)
    writer = threading.Thread(target=flood.write, daemon=True)
    writer.start()
    watcher = threading.Thread(target=lambda: (sys.stdin.read(), flood.stopping.set()), daemon=True)
    watcher.start()
    flood.stopping.wait()
    # Requests still in the socket buffers are not worth waiting for: cut the connection.
    flood.sock.shutdown(socket.SHUT_RDWR)
    writer.join()
    reader.join()
    print(json.dumps({"sent": flood.sent, "replies": flood.replies, "errors": flood.errors}), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
