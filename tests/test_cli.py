"""The `poise` command line itself: its version and its sub-commands."""

from __future__ import annotations

from importlib import metadata

import pytest

from daemon.cli import main


def test_version_prints_the_installed_distributions_version(capsys):
    with pytest.raises(SystemExit) as exited:
        main(["--version"])
    assert exited.value.code == 0
    assert capsys.readouterr().out == f"poise {metadata.version('poise')}\n"
