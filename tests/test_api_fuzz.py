"""Property-based fuzz of the control API: random request lines to the real daemon's socket.

The daemon is the real one (PoiseService: the supervisor, the control cycle, the
run store) on the simulated rig in lockstep, in its own thread and event loop;
the test talks to its Unix socket with a plain blocking socket. Whatever a line
holds (any JSON, nested deep, numbers past any float, wrong types, unknown
commands and fields, bytes that are not UTF-8, lines past ``api.max_line_bytes``),
every well-framed line gets exactly one reply, an error reply is one line that
names what is wrong, and the daemon logs no error (no traceback) for any of it.

Deterministic: hypothesis derandomized, no example database.
"""

from __future__ import annotations

import asyncio
import json
import logging
import socket
import threading
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_api_support import HANG_GUARD_S
from test_daemon_support import running_service

from daemon.api.wire import CLIENT_SOURCES, REQUEST_FIELDS
from daemon.operator_commands import COMMANDS

EXAMPLES = 3000
MAX_LINE_BYTES = 4096  # api.max_line_bytes for this daemon: over-long lines stay cheap to send
# The fuzz sends requests as fast as it can: lift the per-client rate limit so it runs fast.
API_LINES = f"max_line_bytes = {MAX_LINE_BYTES}\nclient_requests_per_s = 100000\nclient_request_burst = 100000\n"


class ErrorRecords(logging.Handler):
    """Every record at ERROR or above, from any thread, and every record carrying a traceback."""

    def __init__(self) -> None:
        super().__init__(logging.DEBUG)
        self.records: list[logging.LogRecord] = []

    def emit(self, record: logging.LogRecord) -> None:
        if record.levelno >= logging.ERROR or record.exc_info:
            self.records.append(record)


class DaemonThread:
    """The real daemon on the simulated rig (lockstep), serving its API, in a thread of its own."""

    def __init__(self, folder: Path):
        self.folder = folder
        self.socket_path: Path | None = None
        self.ready = threading.Event()
        self.failure: BaseException | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._stop: asyncio.Event | None = None
        self._thread = threading.Thread(target=self._run, name="poise-daemon", daemon=True)

    def start(self) -> None:
        self._thread.start()
        assert self.ready.wait(HANG_GUARD_S), "the daemon did not start"
        if self.failure is not None:
            raise self.failure

    def stop(self) -> None:
        assert self._loop is not None and self._stop is not None
        self._loop.call_soon_threadsafe(self._stop.set)
        self._thread.join(HANG_GUARD_S)

    def _run(self) -> None:
        try:
            asyncio.run(self._serve())
        except BaseException as exc:  # reported to the test thread
            self.failure = exc
            self.ready.set()

    async def _serve(self) -> None:
        self._loop = asyncio.get_running_loop()
        self._stop = asyncio.Event()
        async with running_service(self.folder, api=API_LINES, serve_api=True) as service:
            self.socket_path = Path(service.config.api.socket_path)
            self.ready.set()
            await self._stop.wait()


class LineSocket:
    """A blocking line client that reconnects after the daemon closes the connection."""

    def __init__(self, path: Path):
        self.path = path
        self.sock: socket.socket | None = None
        self.pending = b""
        self.barriers = 0

    def _connected(self) -> socket.socket:
        if self.sock is None:
            self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
            self.sock.settimeout(HANG_GUARD_S)
            self.sock.connect(str(self.path))
            self.pending = b""
        return self.sock

    def _read_line(self) -> bytes | None:
        assert self.sock is not None
        while b"\n" not in self.pending:
            chunk = self.sock.recv(65536)
            if not chunk:
                return None
            self.pending += chunk
        line, self.pending = self.pending.split(b"\n", 1)
        return line

    def exchange(self, line: bytes) -> tuple[list[dict], bool]:
        """Send ``line`` then a barrier request; the replies before the barrier's, and whether the
        daemon closed the connection instead of answering the barrier."""
        sock = self._connected()
        self.barriers += 1
        barrier = f"barrier-{self.barriers}"
        try:
            sock.sendall(line + b"\n" + json.dumps({"id": barrier, "cmd": "status"}).encode() + b"\n")
        except (BrokenPipeError, ConnectionResetError):
            pass  # closed mid-line (an over-long one): its error reply is still there to read
        replies: list[dict] = []
        while True:
            raw = self._read_line()
            if raw is None:
                sock.close()
                self.sock = None
                return replies, True
            message = json.loads(raw)  # strict: every line the daemon sends must parse
            if "status" in message and "id" not in message:
                continue  # a status stream line, after a fuzzed subscribe
            if message.get("id") == barrier:
                assert message["ok"] is True
                return replies, False
            replies.append(message)


@pytest.fixture(scope="module")
def daemon(tmp_path_factory):
    errors = ErrorRecords()
    logging.getLogger().addHandler(errors)
    thread = DaemonThread(tmp_path_factory.mktemp("fuzz"))
    thread.start()
    client = LineSocket(thread.socket_path)
    try:
        yield client, errors
    finally:
        thread.stop()
        logging.getLogger().removeHandler(errors)
    assert thread.failure is None


# --- what a request line may hold -----------------------------------------------------

# Integers past the 15-digit ids, past 2**53 and past any float (within int(str)'s 4300 digits).
HUGE_NUMBERS = st.tuples(st.sampled_from([1, -1]), st.integers(min_value=15, max_value=400)).map(
    lambda sign_exponent: sign_exponent[0] * 10 ** sign_exponent[1]
)
JSON_LEAVES = (
    st.none()
    | st.booleans()
    | st.integers()
    | HUGE_NUMBERS
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=30)
)
ANY_JSON = st.recursive(
    JSON_LEAVES,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3),
    max_leaves=10,
)
# Values an argument of the command table might take, right and wrong.
ARG_VALUES = (
    ANY_JSON
    | HUGE_NUMBERS
    | st.sampled_from(["chirp", "prbs", "step", "sine", "", "x" * 300])
    | st.floats(min_value=-2.0, max_value=2.0)
    | st.integers(min_value=-5, max_value=120)
)
ARG_NAMES = sorted({name for spec in COMMANDS.values() for name in (*spec.required, *spec.optional)})


def own_args(command: str) -> st.SearchStrategy[dict]:
    """Arguments named as ``command`` takes them, each value right or wrong, some left out."""
    spec = COMMANDS[command]
    return st.fixed_dictionaries(
        {name: ARG_VALUES for name in spec.required},
        optional={name: ARG_VALUES for name in spec.optional},
    )


def right_or_wrong(draw, right: st.SearchStrategy, wrong: st.SearchStrategy) -> object:
    """Mostly a right value (so the request gets as far as the command's own checks), else a wrong one."""
    return draw(right if draw(st.integers(0, 3)) else wrong)


@st.composite
def request_objects(draw) -> dict:
    """A JSON object shaped like a request, each field mostly right, sometimes wrong or missing."""
    request: dict = {}
    good_id = st.integers(min_value=-(10**15) + 1, max_value=10**15 - 1) | st.text(max_size=20)
    if draw(st.integers(0, 9)):
        request["id"] = right_or_wrong(draw, good_id, HUGE_NUMBERS | ANY_JSON)
    if draw(st.integers(0, 9)):
        request["cmd"] = right_or_wrong(draw, st.sampled_from(sorted(COMMANDS)), st.text(max_size=20) | ANY_JSON)
    if draw(st.booleans()):
        cmd = request.get("cmd")
        known = isinstance(cmd, str) and cmd in COMMANDS
        names = st.sampled_from(ARG_NAMES) | st.text(max_size=8)
        other_args = st.dictionaries(names, ARG_VALUES, max_size=3) | ANY_JSON
        request["args"] = right_or_wrong(draw, own_args(cmd), other_args) if known else draw(other_args)
    if draw(st.booleans()):
        request["source"] = right_or_wrong(draw, st.sampled_from(CLIENT_SOURCES), ANY_JSON)
    if not draw(st.integers(0, 9)):
        request[draw(st.text(max_size=8))] = draw(ANY_JSON)
    return request


def as_line(message: object) -> bytes:
    """JSON as Python writes it (NaN and Infinity included), on one line, text as raw UTF-8: a lone
    surrogate in a string becomes bytes that are not UTF-8."""
    return json.dumps(message, ensure_ascii=False).encode(errors="surrogatepass")


def nested(depth: int) -> bytes:
    return b'{"id": 1, "cmd": "setpoint", "args": {"x_m": ' + b"[" * depth + b"]" * depth + b"}}"


MALFORMED_LINES = st.one_of(
    ANY_JSON.map(as_line),
    st.integers(min_value=1, max_value=1900).map(nested),
    st.binary(max_size=200).map(lambda raw: raw.replace(b"\n", b" ")),  # often not UTF-8
    st.tuples(request_objects().map(as_line), st.binary(min_size=1, max_size=4)).map(
        lambda parts: parts[0][:-1] + parts[1].replace(b"\n", b" ") + b"}"
    ),
    st.integers(min_value=MAX_LINE_BYTES + 1, max_value=2 * MAX_LINE_BYTES).map(
        lambda size: b'{"id": 1, "cmd": "' + b"x" * size + b'"}'
    ),
)
# Half the lines are request objects, half anything else (a choice made first, so hypothesis
# does not flatten the two into one list of equally likely alternatives).
REQUEST_LINES = st.booleans().flatmap(
    lambda shaped: request_objects().map(as_line) if shaped else MALFORMED_LINES
)


@given(line=REQUEST_LINES)
@settings(
    max_examples=EXAMPLES,
    derandomize=True,
    database=None,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
def test_every_request_line_gets_one_reply_and_the_daemon_logs_no_error(daemon, line):
    client, errors = daemon
    replies, closed = client.exchange(line)
    if not line.strip():
        assert replies == [] and not closed  # a blank line is ignored
        return
    assert len(replies) == 1, replies
    [reply] = replies
    if len(line) > MAX_LINE_BYTES:
        assert closed and reply["id"] is None
        assert reply["error"] == f"request line longer than {MAX_LINE_BYTES} bytes; closing the connection"
    else:
        assert not closed
    assert isinstance(reply["ok"], bool)
    if not reply["ok"]:
        assert isinstance(reply["error"], str) and reply["error"]
        assert "\n" not in reply["error"]
        assert reply["code"] in ("bad_request", "refused")
        check_error_names_its_place(line, reply)
    assert not errors.records, [errors.format(record) for record in errors.records]


def check_error_names_its_place(line: bytes, reply: dict) -> None:
    """A bad request's error names what is wrong and where: the command and argument, or the field."""
    try:
        request = json.loads(line)
    except (ValueError, RecursionError):
        return
    if not isinstance(request, dict) or reply["code"] != "bad_request" or reply["id"] is None:
        return
    error = reply["error"]
    unknown_fields = [name for name in request if name not in REQUEST_FIELDS]
    cmd = request.get("cmd")
    if unknown_fields:
        assert error.startswith("request has unknown field"), error
    elif not isinstance(cmd, str):
        assert error.startswith("request field 'cmd'"), error
    elif cmd in COMMANDS and not error.startswith("request field 'source'"):
        assert error.startswith(f"{cmd}: "), error
        args = request.get("args", {})
        if isinstance(args, dict) and args:
            assert "'args'" in error or any(repr(name) in error for name in args) or "missing" in error
