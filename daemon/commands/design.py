"""`poise design`: balance gains for a rig, their margins and predicted step response; optionally saved.

The table and the JSON name the LQR weights the gains came from, say why a predicted step
never settles, and list the config values the file left out and had derived from the rig.
``--json`` is strict JSON: a figure that does not exist (never settles, no margin crossing) is
``null``.
"""

from __future__ import annotations

import argparse
import json
import math
import re

from daemon.commands import add_config_argument, config_path

NAME = "design"
HELP = "design the balance LQR for a rig config and predict how it behaves (--write saves the gains)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    parser.add_argument("--write", action="store_true", help="write the gains into the config's [balance] gains")
    parser.add_argument("--step-m", type=float, default=None, metavar="M",
                        help="cart set-point step for the predicted response (default: balance.step_m)")


_SECTION = re.compile(r"^\s*\[([^\]]+)\]\s*(#.*)?$")
_GAINS = re.compile(r"^\s*gains\s*=")


def gains_line(gains: list[float]) -> str:
    return "gains = [" + ", ".join(f"{g:.8g}" for g in gains) + "]  # written by poise design"


def with_gains(text: str, gains: list[float]) -> str:
    """``text`` with ``[balance] gains`` set to ``gains``; every other line kept as it was."""
    lines = text.splitlines(keepends=True)
    newline = "\n"
    start = end = None
    for i, line in enumerate(lines):
        match = _SECTION.match(line)
        if match:
            if start is not None and end is None:
                end = i
            if match.group(1).strip() == "balance":
                start = i
    if start is None:
        tail = "" if not text or text.endswith("\n") else newline
        return text + tail + newline + "[balance]" + newline + gains_line(gains) + newline
    end = len(lines) if end is None else end
    for i in range(start + 1, end):
        if _GAINS.match(lines[i]):
            lines[i] = gains_line(gains) + newline
            return "".join(lines)
    insert_at = end
    while insert_at > start + 1 and not lines[insert_at - 1].strip():
        insert_at -= 1
    if insert_at == len(lines) and lines and not lines[-1].endswith("\n"):
        lines[-1] += newline
    lines.insert(insert_at, gains_line(gains) + newline)
    return "".join(lines)


def _figure(value: float, unit: str, digits: int = 3) -> str:
    return "never settles" if math.isinf(value) else f"{value:.{digits}f} {unit}"


def _margin(value: float, unit: str) -> str:
    return "none" if math.isinf(value) else f"{value:.1f} {unit}"


def _weights(weights) -> list[tuple[str, str]]:
    """Table rows for the LQR weights the gains were designed with."""
    integral = "off (balance.integral_action)" if weights.integral_weight is None else f"{weights.integral_weight:g}"
    return [
        ("LQR weights Q (x, v, theta, omega)", ", ".join(f"{q:g}" for q in weights.q_diag)),
        ("LQR weight R (drive)", f"{weights.r:g}"),
        ("LQR weight on the integral of x", integral),
    ]


def _print_table(report, source: str) -> None:
    from rich.console import Console
    from rich.table import Table

    data = report.to_json()
    console = Console()
    unit = data["input"]
    gains = Table(title=f"Balance LQR for {source} ({data['sample_rate_hz']} Hz, drive in {unit})")
    gains.add_column("quantity")
    gains.add_column("value", justify="right")
    for name, value in _weights(report.weights):
        gains.add_row(name, value)
    k_names = ("K x (per m)", "K v (per m/s)", "K theta (per rad)", "K omega (per rad/s)")
    for name, value, cont in zip(k_names, data["K"], data["K_continuous"], strict=True):
        gains.add_row(name, f"{value:.4f}   (continuous {cont:.4f})")
    if data["Ki"]:
        gains.add_row("K integral (per m s)", f"{data['Ki']:.4f}")
    gains.add_row("Nbar", f"{data['Nbar']:.4f}")
    gains.add_row("closed-loop poles (z)", ", ".join(f"{re:.4f}{im:+.4f}j" for re, im in data["poles"]))
    m = report.margins
    gains.add_row("phase margin at the plant input", _margin(m.phase_margin_deg, "deg"))
    gains.add_row("gain margin (up / down)", f"{_margin(m.gain_margin_upper_db, 'dB')} / {_margin(m.gain_margin_lower_db, 'dB')}")
    gains.add_row("largest recoverable angle from rest", f"{data['largest_recoverable_angle_deg']:.1f} deg")
    console.print(gains)
    step = Table(title=f"Predicted response to a {report.linear.step_m} m cart set-point step")
    step.add_column("figure")
    step.add_column("linear model", justify="right")
    step.add_column("plant model, saturating", justify="right")
    lin, non = report.linear, report.nonlinear
    step.add_row("rise time (10-90 %)", _figure(lin.rise_time_s, "s"), _figure(non.rise_time_s, "s"))
    step.add_row("settling time (2 %)", _figure(lin.settling_time_s, "s"), _figure(non.settling_time_s, "s"))
    step.add_row("peak pendulum angle", f"{math.degrees(lin.peak_angle_rad):.2f} deg",
                 f"{math.degrees(non.peak_angle_rad):.2f} deg")
    step.add_row("steady-state error", f"{lin.steady_state_error_pct:.2f} %", f"{non.steady_state_error_pct:.2f} %")
    step.add_row("saturated samples", "-", f"{non.saturated_samples} of {non.samples}")
    console.print(step)
    for model, figures in (("linear model", lin), ("plant model", non)):
        if figures.unsettled_reason is not None:
            console.print(f"{model}: never settles: {figures.unsettled_reason}", highlight=False)
    for value in report.derived:
        console.print(f"derived: {value.describe()}", highlight=False)


def run(args: argparse.Namespace) -> int:
    from daemon.config import load_config, parse_config
    from daemon.control.design_report import design_report
    from daemon.errors import OperatorError

    if args.write and not args.config:
        raise OperatorError("design: --write needs --config FILE (the demo rig's config ships with Poise)")
    path = config_path(args)
    config = load_config(path)
    try:
        report = design_report(config, args.step_m)
    except ValueError as exc:
        raise OperatorError(f"design: {path}: {exc}") from None
    if args.json:
        print(json.dumps(report.to_json(), indent=2, allow_nan=False))
    else:
        _print_table(report, str(path))
    if args.write:
        gains = [*report.design.k] + ([report.design.ki] if report.design.ki else [])
        text = with_gains(path.read_text(encoding="utf-8"), gains)
        parse_config(text, str(path))  # never write a file that no longer loads
        path.write_text(text, encoding="utf-8")
        if not args.json:
            print(f"wrote [balance] gains to {path}")
    return 0
