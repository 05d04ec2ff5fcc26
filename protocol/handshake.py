"""The host's check of a DeviceHello: same protocol version and same message set, or refuse."""

from protocol.messages import PROTOCOL_VERSION, SCHEMA_FINGERPRINT, DeviceHello


class HandshakeError(ValueError):
    """The device speaks a different protocol version or message set than this host."""


def hello_mismatch(hello: DeviceHello) -> str | None:
    """One line naming both versions and both fingerprints if they differ, else None."""
    same_version = hello.protocol_version == PROTOCOL_VERSION
    if same_version and hello.schema_fingerprint == SCHEMA_FINGERPRINT:
        return None
    return (
        f"device {hello.device_id!r} speaks protocol version {hello.protocol_version} with "
        f"schema fingerprint 0x{hello.schema_fingerprint:08X}; this host speaks protocol version "
        f"{PROTOCOL_VERSION} with schema fingerprint 0x{SCHEMA_FINGERPRINT:08X}: they were built "
        "from different message sets, update the firmware or Poise"
    )


def check_device_hello(hello: DeviceHello) -> None:
    """Raise HandshakeError (with the :func:`hello_mismatch` text) unless the hello matches."""
    problem = hello_mismatch(hello)
    if problem is not None:
        raise HandshakeError(problem)
