"""Print what a flooded control API costs the control cycle, in real time, and how fast an e-stop gets through.

Usage: .venv/bin/python bench/bench_api_flood.py [--seconds 20.5] [--estops 5]

`poise run --port` runs in its own process on the simulated rig (Kestrel-1, real
time), which runs in this process's event loop, holding the cart at its set-point.
For each phase the API's client limit is filled by idle connections and flooding
clients, each flooder in its own process (tests/api_flooder.py: pipelined status
requests as fast as its socket takes them):

- no flood (the baseline), 1 flooder, 3 flooders: the share of samples the daemon
  answered (the rest were overtaken in their read: the host was late), the
  daemon's loop lag (its watchdog's ticks, 10 ms apart; the ring of 2048 covers
  the last 20.5 s, one phase at the default length: p99, max) and the flooders'
  replies per second;
- then, with 3 flooders, ``--estops`` e-stops from a client beyond the limit: the
  time from the request's send to the Stop frame's arrival at the simulated device
  (its decoder's receive time, the same monotonic clock), and to the reply.

Figures, printed and never asserted: the machine is shared, compare within one run.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO / "tests"))  # the harness and the flooder of the abuse tests

from test_api_abuse import AbusedApi, cycle_counts, daemon_in_its_own_process, homed  # noqa: E402

from daemon.api.client import ApiClient  # noqa: E402
from daemon.runtime import event_loop  # noqa: E402
from protocol import FrameDecoder, Stop  # noqa: E402


async def flood_phase(client: ApiClient, max_clients: int, flooders: int, seconds: float) -> None:
    async with AbusedApi(client.socket_path, max_clients - 1, flooders) as abuse:  # client: one
        before = cycle_counts(await client.request("status"))
        await asyncio.sleep(seconds)  # the phase: the daemon is under the flood meanwhile
        status = await client.request("status")
    answered, missed = (now - then for now, then in zip(cycle_counts(status), before, strict=True))
    replies = sum(json.loads(result)["replies"] for result in abuse.flood_results)
    loop = status["loop"]
    print(
        f"  {flooders} flooder(s): answered {100.0 * answered / (answered + missed):7.3f} % of "
        f"{answered + missed} samples; daemon loop lag p99 {loop['lag_ms_p99']:6.2f} ms, max "
        f"{loop['lag_ms_max']:6.2f} ms; flood replies {replies / seconds:6.0f}/s",
        flush=True,
    )


def first_stop_received_after(rig, t_ns: int) -> int | None:
    """Receive time (monotonic ns) of the first Stop frame the device got after ``t_ns``."""
    decoder = FrameDecoder()
    for t_rx, chunk, _ in rig.device.decoder.counters.rx_frames:
        for message in decoder.feed(chunk + b"\x00"):
            if type(message) is Stop and t_rx >= t_ns:
                return t_rx
    return None


async def estop_times(rig, client: ApiClient, max_clients: int, count: int) -> None:
    to_reply_ms, to_stop_ms = [], []
    async with AbusedApi(client.socket_path, max_clients - 1, 3):
        for _ in range(count):
            sent_ns = time.monotonic_ns()
            async with await ApiClient.connect(client.socket_path, source="api") as estop:
                await estop.request("estop")  # beyond the limit: the e-stop lane
            to_reply_ms.append((time.monotonic_ns() - sent_ns) / 1e6)
            await asyncio.sleep(0.05)  # the Stop is on its way or there; its time is read below
            stop_ns = first_stop_received_after(rig, sent_ns)
            to_stop_ms.append(float("nan") if stop_ns is None else (stop_ns - sent_ns) / 1e6)
            await client.request("reset")
            await client.request("arm")
    print(
        f"  e-stop beyond the limit, 3 flooders, {count} tries: to the Stop frame at the device "
        f"median {statistics.median(to_stop_ms):.2f} ms, max {max(to_stop_ms):.2f} ms; "
        f"to the reply median {statistics.median(to_reply_ms):.2f} ms, max {max(to_reply_ms):.2f} ms",
        flush=True,
    )


async def main(seconds: float, estops: int) -> None:
    folder = Path(tempfile.mkdtemp(prefix="poise-bench-flood-"))
    async with daemon_in_its_own_process(folder) as (rig, client, settings):
        api = settings.api
        print(f"Kestrel-1 simulated in real time ({settings.sampling.rate_hz:g} Hz), api.max_clients "
              f"{api.max_clients}, {api.client_requests_per_s:g} requests/s per client", flush=True)
        await homed(client)
        await client.request("arm")
        for flooders in (0, 1, 3):
            await flood_phase(client, api.max_clients, flooders, seconds)
        await estop_times(rig, client, api.max_clients, estops)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=20.5, help="length of each flood phase")
    parser.add_argument("--estops", type=int, default=5, help="e-stops timed under the flood")
    args = parser.parse_args()
    event_loop.run(main(args.seconds, args.estops))  # the simulated rig's timers to the microsecond
