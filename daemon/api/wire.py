"""JSON lines on the control socket: parsing requests and encoding replies and status lines.

A request is one line holding a JSON object::

    {"id": 7, "cmd": "setpoint", "args": {"x_m": 0.1}, "source": "cli"}

``id`` (an integer or a short string) is echoed in the reply; ``args`` may be
left out when a command takes none; ``source`` says which kind of client sent it
(one of ``CLIENT_SOURCES``, default ``"api"``) and ends up in the supervisor's
event log. Replies are ``{"id": ..., "ok": true, "result": {...}}`` or
``{"id": ..., "ok": false, "code": ..., "error": "<one line>"}``; a refusal also
carries ``"reason"``. Status stream lines are ``{"status": {...}}``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

from daemon.operator_commands import BadRequest, validate_args
from daemon.strict_json import finite_or_null

CLIENT_SOURCES = ("api", "cli", "dashboard")
REQUEST_FIELDS = ("id", "cmd", "args", "source")
ID_MAX_CHARS = 100
ID_MAX_DIGITS = 15  # every such integer is exact as a JSON number in any client (2**53 > 10**15)

# Error codes in replies.
BAD_REQUEST = "bad_request"
REFUSED = "refused"
FAILED = "failed"


@dataclass(frozen=True)
class Request:
    id: int | str
    cmd: str
    args: dict[str, object]
    source: str


class RequestError(BadRequest):
    """A bad request; ``request_id`` is its id when that much could be read, else None."""

    def __init__(self, message: str, request_id: int | str | None):
        super().__init__(message)
        self.request_id = request_id


def parse_request(line: bytes) -> Request:
    """Decode and check one request line (without caring about its trailing newline)."""
    try:
        # UTF-8 only (IETF RFC 8259, section 8.1): json.loads would guess UTF-16 or -32 from bytes.
        text = line.decode()
    except UnicodeDecodeError as exc:
        raise RequestError(
            f"request is not UTF-8 text (byte {exc.start} is 0x{line[exc.start]:02x})", None
        ) from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise RequestError(
            f"request is not valid JSON ({exc.msg} at column {exc.colno})", None
        ) from None
    except RecursionError:
        raise RequestError("request is nested too deeply", None) from None
    except ValueError as exc:  # e.g. an integer past Python's digit limit for int(str)
        raise RequestError(f"request is not valid JSON ({exc})", None) from None
    if not isinstance(data, dict):
        raise RequestError("request must be a JSON object", None)
    request_id = data.get("id")
    if not _valid_id(request_id):
        raise RequestError(
            f"request field 'id' must be an integer of at most {ID_MAX_DIGITS} digits or a string "
            f"of at most {ID_MAX_CHARS} characters",
            None,
        )
    for name in data:
        if name not in REQUEST_FIELDS:
            raise RequestError(
                f"request has unknown field {name!r} (fields: {', '.join(REQUEST_FIELDS)})",
                request_id,
            )
    cmd = data.get("cmd")
    if not isinstance(cmd, str):
        raise RequestError("request field 'cmd' must be a command name", request_id)
    args = data.get("args", {})
    if not isinstance(args, dict):
        raise RequestError(f"{cmd}: 'args' must be a JSON object", request_id)
    source = data.get("source", "api")
    if source not in CLIENT_SOURCES:
        raise RequestError(
            f"request field 'source' must be one of {', '.join(CLIENT_SOURCES)}", request_id
        )
    try:
        clean_args = validate_args(cmd, args)
    except BadRequest as exc:
        raise RequestError(str(exc), request_id) from None
    return Request(id=request_id, cmd=cmd, args=clean_args, source=source)


def _valid_id(value: object) -> bool:
    if isinstance(value, bool):
        return False
    if isinstance(value, int):
        return abs(value) < 10**ID_MAX_DIGITS
    return isinstance(value, str) and len(value) <= ID_MAX_CHARS


def encode_json(message: object) -> bytes:
    """Compact strict JSON. NaN and infinities (a sensor not fitted) go out as null."""
    try:
        text = json.dumps(message, allow_nan=False, separators=(",", ":"))
    except ValueError:
        text = json.dumps(finite_or_null(message), allow_nan=False, separators=(",", ":"))
    return text.encode()


def encode_line(message: dict) -> bytes:
    """One JSON line (see :func:`encode_json`), so every line is strict JSON."""
    return encode_json(message) + b"\n"


def status_reply_line(request_id: int | str, status_json: bytes) -> bytes:
    """The reply to a status request, around an already encoded status object."""
    return b'{"id":' + encode_json(request_id) + b',"ok":true,"result":' + status_json + b"}\n"


def status_stream_line(status_json: bytes) -> bytes:
    """One status stream line, around an already encoded status object."""
    return b'{"status":' + status_json + b"}\n"


def ok_reply(request_id: int | str, result: dict) -> dict:
    return {"id": request_id, "ok": True, "result": result}


def error_reply(
    request_id: int | str | None, code: str, error: str, reason: str | None = None
) -> dict:
    reply: dict = {"id": request_id, "ok": False, "code": code, "error": error}
    if reason is not None:
        reply["reason"] = reason
    return reply
