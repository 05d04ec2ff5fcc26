"""Make docs/dashboard.svg, README's picture of the dashboard: Kestrel-1 balancing after a set-point step.

Usage: .venv/bin/python docs/make_dashboard_svg.py [--out docs/dashboard.svg]

The daemon runs as `poise run --sim` in its own process, in real time, as in
`poise demo` (bench/sim_daemon.py), so the picture shows the loop lag and
latency of a real session; it is homed, armed and swung up, then the dashboard
runs headless under Textual's pilot at 132x42, the set-point steps to +0.10 m,
and a few seconds later the screen is saved. Being real time, no two pictures
are quite the same.
"""

from __future__ import annotations

import argparse
import asyncio
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO / "bench"))

from sim_daemon import balance, simulated_daemon  # noqa: E402

from daemon.ui.app import PoiseDash  # noqa: E402

SIZE = (132, 42)
SETPOINT_STEP_M = 0.10
AFTER_STEP_S = 4.0


async def main(out: Path) -> None:
    async with simulated_daemon() as (_daemon, client):
        await balance(client)
        app = PoiseDash(client.socket_path)
        async with app.run_test(size=SIZE) as pilot:
            while app.status.get("state") != "BALANCE":
                await pilot.pause(0.05)
            await pilot.pause(6.0)  # ten seconds of plot, most of it still
            await client.request("setpoint", {"x_m": SETPOINT_STEP_M})
            await pilot.pause(AFTER_STEP_S)
            app.save_screenshot(out.name, str(out.parent))
    print(f"wrote {out}")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=REPO / "docs" / "dashboard.svg")
    asyncio.run(main(parser.parse_args().out.resolve()))
