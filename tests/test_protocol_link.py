"""Link diagnostics, decoder error reports, the handshake check and acked-command retries."""

import itertools
import os
import socket
import time

import pytest

from daemon.link.link import Link
from protocol import (
    PROTOCOL_VERSION,
    SCHEMA_FINGERPRINT,
    UNPROMPTED_HELLO_SEQ,
    Arm,
    Configure,
    Drive,
    FrameDecoder,
    HandshakeError,
    Heartbeat,
    Identify,
    LinkStats,
    Reply,
    ReplyResult,
    RetryTracker,
    Stop,
    Telemetry,
    check_device_hello,
    cobs_decode,
    cobs_encode,
    encode,
    hello_mismatch,
    seal_frame,
)
from protocol.make_vectors import EXAMPLE_MESSAGES

HELLO = EXAMPLE_MESSAGES[0]


def _telemetry(seq: int) -> Telemetry:
    return Telemetry(seq, 1000 * seq, 0, 0, 0, 0, 0, 0.0, 0.0, 0.0, 0)


def _stepping_clock(step_ns: int = 1_000_000):
    ticks = itertools.count(start=1)
    return lambda: next(ticks) * step_ns


def test_crc_error_names_the_stream_offset_and_both_crcs():
    good = encode(Heartbeat(1))
    raw = bytearray(cobs_decode(good[:-1]))
    raw[-2] ^= 0xFF  # stored CRC low byte wrong; header and payload intact
    bad = cobs_encode(bytes(raw)) + b"\x00"
    decoder = FrameDecoder()
    decoder.feed(good + bad)
    received = raw[-2] | raw[-1] << 8
    computed = received ^ 0x00FF
    assert decoder.last_error == (
        f"frame at stream byte {len(good)}: CRC mismatch "
        f"(got 0x{received:04X}, computed 0x{computed:04X})"
    )
    assert decoder.counters.crc_failures == 1


def test_error_offsets_count_bytes_across_feeds():
    decoder = FrameDecoder()
    decoder.feed(b"\x00" * 10)
    decoder.feed(b"\x05\x01")  # COBS code 5 announces more bytes than follow
    decoder.feed(b"\x00")
    assert decoder.last_error.startswith("frame at stream byte 10: invalid COBS encoding")


def test_telemetry_gap_is_counted_with_the_missing_samples():
    decoder = FrameDecoder()
    stream = b"".join(encode(_telemetry(seq)) for seq in (10, 11, 15, 16))
    assert len(decoder.feed(stream)) == 4
    assert (decoder.counters.gaps, decoder.counters.lost_frames) == (1, 3)
    assert "telemetry seq 15, expected 12 (3 lost)" in decoder.last_error


def test_telemetry_seq_restart_at_zero_is_not_a_gap_but_other_backward_jumps_are():
    decoder = FrameDecoder()
    decoder.feed(b"".join(encode(_telemetry(seq)) for seq in (500, 501, 0, 1, 0, 1)))
    assert decoder.counters.gaps == 0
    decoder.feed(encode(_telemetry(0)) + encode(_telemetry(1)) + encode(_telemetry(1)))
    assert (decoder.counters.gaps, decoder.counters.lost_frames) == (1, 0)


def test_hello_of_another_protocol_version_is_reported_with_both_fingerprints():
    raw = bytearray(cobs_decode(encode(HELLO)[:-1])[:-2])
    raw[0] = 2  # header version
    raw[5] = 2  # DeviceHello.protocol_version
    raw[6:10] = (0x12345678).to_bytes(4, "little")
    decoder = FrameDecoder()
    assert decoder.feed(seal_frame(bytes(raw))) == []
    assert decoder.counters.bad_version == 1
    assert decoder.last_error == (
        "frame at stream byte 0: DeviceHello of protocol version 2 with schema fingerprint "
        f"0x12345678; this host speaks version {PROTOCOL_VERSION} with schema fingerprint "
        f"0x{SCHEMA_FINGERPRINT:08X}"
    )


def test_matching_hello_passes_the_handshake_check():
    assert hello_mismatch(HELLO) is None
    check_device_hello(HELLO)


@pytest.mark.parametrize(
    "changes", [{"schema_fingerprint": 0xDEADBEEF}, {"protocol_version": 7}],
    ids=["fingerprint", "version"],
)
def test_mismatched_hello_is_refused_naming_both_sides(changes):
    hello = HELLO._replace(**changes)
    with pytest.raises(HandshakeError) as error:
        check_device_hello(hello)
    text = str(error.value)
    assert f"protocol version {hello.protocol_version} with schema fingerprint " \
        f"0x{hello.schema_fingerprint:08X}" in text
    assert f"protocol version {PROTOCOL_VERSION} with schema fingerprint " \
        f"0x{SCHEMA_FINGERPRINT:08X}" in text
    assert "\n" not in text


def _writing_link(stats: LinkStats) -> tuple[Link, socket.socket]:
    """The daemon's link on one end of a socket pair, counting into ``stats``; the other end."""
    ours, theirs = socket.socketpair()
    ours.setblocking(False)
    link = Link(ours.detach(), 50, time.monotonic, on_device_reset=print, on_fault_report=print,
                on_write_error=print, stats=stats)
    return link, theirs


def test_link_stats_keep_the_last_100_frames_each_way():
    stats = LinkStats(clock=_stepping_clock())
    decoder = FrameDecoder(stats)
    link, peer = _writing_link(stats)
    for seq in range(150):
        decoder.feed(encode(_telemetry(seq)))
        assert link.write(encode(Drive(seq, 0.0, seq)))
        peer.recv(4096)
    assert (stats.frames_rx, stats.frames_tx) == (150, 150)
    assert len(stats.rx_frames) == len(stats.tx_frames) == 100
    assert stats.rx_frames[0][1] + b"\x00" == encode(_telemetry(50))
    assert stats.tx_frames[0][1] == encode(Drive(50, 0.0, 50))  # as sent, delimiter included
    assert stats.bytes_tx == 150 * len(encode(Drive(0, 0.0, 0)))
    os.close(link.fd)
    peer.close()


async def test_the_host_keeps_one_seq_counter_per_command_type():
    """PROTOCOL.md section 5: every sender keeps a separate u16 counter per message type."""
    stats = LinkStats(clock=_stepping_clock())
    link, peer = _writing_link(stats)
    for make in (Identify, lambda seq: Arm(seq, 1), Stop, lambda seq: Arm(seq, 0), Stop):
        link.send(make)
    link.send_unacked(Heartbeat)
    link.send_unacked(Heartbeat)
    sent = FrameDecoder().feed(peer.recv(4096))
    link.fail_pending("test over")
    os.close(link.fd)
    peer.close()
    assert [(type(m).__name__, m.seq) for m in sent] == [
        ("Identify", 0), ("Arm", 0), ("Stop", 0), ("Arm", 1), ("Stop", 1), ("Heartbeat", 0),
        ("Heartbeat", 1),
    ]


def test_dump_lists_frames_in_time_order_as_wire_hex_then_errors():
    stats = LinkStats(clock=_stepping_clock())
    decoder = FrameDecoder(stats)
    link, peer = _writing_link(stats)
    decoder.feed(encode(Heartbeat(1)))
    assert link.write(encode(Stop(2)))
    decoder.feed(b"\x05\x01\x00")
    os.close(link.fd)
    peer.close()
    lines = stats.dump().splitlines()
    assert lines[0] == stats.summary()
    assert lines[1] == "0.001000 rx " + encode(Heartbeat(1)).hex(" ")
    assert lines[2] == "0.002000 tx " + encode(Stop(2)).hex(" ")
    assert lines[3] == "0.003000 rx 05 01 00"
    assert lines[4].startswith("0.004000 error frame at stream byte 9: invalid COBS encoding")


def test_summary_is_one_line_with_every_counter():
    stats = LinkStats()
    FrameDecoder(stats).feed(b"\x01\x00" + encode(Heartbeat(1)))
    summary = stats.summary()
    assert "\n" not in summary
    assert "frames_rx=1" in summary and "runts=1" in summary and "resyncs=1" in summary
    assert "bytes_rx=11" in summary


# ---- retries ----------------------------------------------------------------------------------


def test_retry_tracker_resends_after_the_timeout_then_gives_up():
    tracker = RetryTracker(timeout_s=0.125, max_attempts=3)  # binary-exact times
    configure = Configure(seq=4, sample_rate_hz=500, watchdog_ms=50)
    tracker.track(configure, now_s=0.0)
    assert tracker.poll(0.1).resend == []
    assert tracker.poll(0.125).resend == [configure]  # 2nd transmission
    assert tracker.poll(0.2).resend == []
    assert tracker.poll(0.25).resend == [configure]  # 3rd transmission
    due = tracker.poll(0.375)
    assert (due.resend, due.failed) == ([], [configure])
    assert tracker.pending == []


def test_reply_resolves_only_the_command_it_names():
    tracker = RetryTracker(timeout_s=0.1, max_attempts=3)
    arm, stop = Arm(seq=1, arm=1), Stop(seq=1)
    tracker.track(arm, 0.0)
    tracker.track(stop, 0.0)
    assert tracker.resolve(Reply(9, Stop.TYPE_ID, 2, ReplyResult.ACCEPTED)) is None  # wrong seq
    assert tracker.resolve(Reply(9, Stop.TYPE_ID, 1, ReplyResult.NOT_NOW)) == stop
    assert tracker.pending == [arm]
    assert tracker.poll(0.1).resend == [arm]


def test_device_hello_resolves_the_identify_whose_seq_it_carries():
    """PROTOCOL.md section 6: a DeviceHello answering an Identify carries its seq; an
    unprompted hello (seq 0xFFFF, after a device reset) answers nothing."""
    tracker = RetryTracker(timeout_s=0.1, max_attempts=2)
    tracker.track(Identify(seq=3), 0.0)
    assert tracker.resolve(HELLO._replace(seq=2)) is None  # a late answer to an older Identify
    assert tracker.resolve(HELLO._replace(seq=UNPROMPTED_HELLO_SEQ)) is None
    assert tracker.pending == [Identify(seq=3)]
    assert tracker.resolve(HELLO._replace(seq=3)) == Identify(seq=3)
    assert tracker.pending == []


def test_retry_tracker_refuses_unacknowledged_messages():
    with pytest.raises(ValueError, match="Drive is not an acknowledged command"):
        RetryTracker(timeout_s=0.1, max_attempts=3).track(Drive(1, 0.0, 1), 0.0)
