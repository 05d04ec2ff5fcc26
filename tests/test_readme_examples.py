"""Every command README.md shows works as written: it parses, and those that need no hardware run.

The examples are read out of README.md itself (inline ``poise ...`` spans and
the ``sh`` blocks), so a renamed option or verb fails here before a user
trips over it.
"""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest
from test_api_support import poise

from daemon.cli import build_parser

REPO = Path(__file__).resolve().parents[1]
README = (REPO / "README.md").read_text(encoding="utf-8")
HANG_GUARD_S = 300.0  # a broken command fails the test instead of hanging it; never a speed check

#: README's placeholders and the values a test can use for them.
PLACEHOLDERS = {
    "configs/my-rig.toml": "configs/kestrel-1.toml",
    "my-rig.toml": "configs/kestrel-1.toml",
    "../rigs/wren-2.toml": "configs/wren-2.toml",
    "FORMAT": "csv",
    "/dev/ttyACM0": "/dev/null",
}


def readme_examples() -> list[str]:
    """Each ``poise ...`` example, with optional ``[...]`` parts both left out and put in."""
    spans = re.findall(r"`(poise [^`<]+)`", README)
    examples: list[str] = []
    for span in spans:
        if "[" in span:
            examples.append(re.sub(r"\s*\[[^]]*\]", "", span))
            examples.append(re.sub(r"\[([^]]*)\]", r"\1", span).replace(" ...", ""))
        else:
            examples.append(span)
    return sorted(set(examples))


def with_placeholders(example: str) -> list[str]:
    words = shlex.split(example)[1:]
    return [PLACEHOLDERS.get(word, word) for word in words]


def readme_shell_commands() -> list[str]:
    return re.findall(r"```sh\n(.*?)\n```", README, re.DOTALL)


EXAMPLES = readme_examples()


def test_the_readme_has_examples_to_check():
    assert len(EXAMPLES) > 25


@pytest.mark.parametrize("example", EXAMPLES)
def test_every_readme_example_parses(example):
    argv = with_placeholders(example)
    if len(argv) == 1:  # prose naming a verb ("poise excite sizes its amplitude"): it must exist
        argv = [*argv, "--help"]
    try:
        build_parser().parse_args(argv)
    except SystemExit as exc:  # argparse's way of saying no (or --help's way of saying yes)
        assert exc.code == 0 and "--help" in argv, f"README example does not parse: {example}"


def test_ci_runs_the_readmes_test_command_verbatim():
    setup, tests = readme_shell_commands()[:2]
    assert setup.endswith("poise demo")
    assert tests in (REPO / ".ci" / "run").read_text(encoding="utf-8").splitlines()


#: Examples that run without hardware, in README's order of the workflow (the later ones read
#: the recording the session before them makes in the test's folder).
RUNNABLE = [
    "poise check-config configs/my-rig.toml",
    "poise design --config configs/my-rig.toml --json",
    "poise session --sim --duration 20 --disturb 5:0.02 --disturb 12:-0.03",
    "poise runs",
    "poise export 3 --format FORMAT",
    "poise export --help",
    "poise demo --headless",
]


async def test_the_readme_examples_that_need_no_hardware_run_and_succeed(tmp_path):
    (tmp_path / "configs").symlink_to(REPO / "configs")
    for example in RUNNABLE:
        assert (
            example in README
            or example.replace(" --json", " [--json]") in README
            or any(example.startswith(shown) for shown in EXAMPLES)
        ), f"{example} is no longer in README"
        argv = with_placeholders(example)
        if argv[0] == "export" and argv[1].isdigit():
            argv[1] = "1"  # README's run id; the test's store holds the session's run only
        code, _out, err = await poise(*argv, cwd=tmp_path, hang_guard_s=HANG_GUARD_S)
        assert code == 0, f"{example}: exit {code}\n{err}"
        assert "Traceback" not in err
    assert list(tmp_path.glob("*.csv")), "the export wrote no file"
