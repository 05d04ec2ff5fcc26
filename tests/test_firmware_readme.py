"""firmware/README.md's timing budget is what firmware/wire_budget.py prints, and the frame sizes
it rests on are the ones PROTOCOL.md section 1 states (the protocol specification, document
revision 1.1: Telemetry 41 / 42 / 43 bytes, Drive 13 / 14 / 15 bytes)."""

import re
from pathlib import Path

from firmware.wire_budget import budget_markdown, wire_sizes
from protocol import Drive, Telemetry

ROOT = Path(__file__).resolve().parents[1]


def _section_1_sizes() -> dict[str, tuple[int, int, int]]:
    text = (ROOT / "protocol" / "PROTOCOL.md").read_text(encoding="utf-8")
    telemetry = re.search(r"Telemetry \((\d+)-byte frame, (\d+) bytes after\s+COBS, (\d+) with the delimiter\)", text)
    drive = re.search(r"one Drive \((\d+), (\d+), (\d+) bytes\)", text)
    assert telemetry and drive, "PROTOCOL.md section 1 no longer states the frame sizes in these words"
    return {"Telemetry": tuple(map(int, telemetry.groups())), "Drive": tuple(map(int, drive.groups()))}


def test_encoded_frame_sizes_match_protocol_section_1():
    assert {"Telemetry": wire_sizes(Telemetry), "Drive": wire_sizes(Drive)} == _section_1_sizes()


def test_readme_holds_the_budget_tables_as_printed():
    readme = (ROOT / "firmware" / "README.md").read_text(encoding="utf-8")
    for table in budget_markdown().split("\n\n"):
        assert table in readme
