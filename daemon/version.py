"""Poise's own version, as installed (recorded with every run, printed by ``poise --version``)."""

from __future__ import annotations

from importlib import metadata


def software_version() -> str:
    try:
        return metadata.version("poise")
    except metadata.PackageNotFoundError:  # run from a source tree that was never installed
        return "unknown (not installed)"
