"""Shared pieces for the config tests: rig configs as dicts, written back as TOML text.

The config tests edit a shipped config as data (drop a key, swap a value) and
hand the text to :func:`daemon.config.parse_config`, the path a file takes.
"""

from __future__ import annotations

import datetime
import json
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
KESTREL = REPO / "configs" / "kestrel-1.toml"
WREN = REPO / "configs" / "wren-2.toml"


@dataclass(frozen=True)
class RawToml:
    """TOML value text written as it is (nesting too deep to build as lists, integers too long to print)."""

    text: str


def config_dict(path: Path) -> dict:
    return tomllib.loads(path.read_text())


def _key(key: str) -> str:
    return key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else json.dumps(key, ensure_ascii=False)


def _value(value: object) -> str:
    if isinstance(value, RawToml):
        return value.text
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and not math.isfinite(value):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, str):  # JSON's escapes are TOML's for the strings the tests use
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, datetime.datetime | datetime.date):
        return value.isoformat()
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_value(item) for item in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(f"no TOML for {type(value).__name__}")


def toml_text(doc: dict) -> str:
    """``doc`` as TOML: tables as ``[sections]``, everything else as top-level keys before them."""
    lines = [f"{_key(k)} = {_value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    for name, table in doc.items():
        if isinstance(table, dict):
            lines.append(f"\n[{_key(name)}]")
            lines.extend(f"{_key(k)} = {_value(v)}" for k, v in table.items())
    return "\n".join(lines) + "\n"
