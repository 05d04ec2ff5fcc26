"""`poise run`: serve one rig until stopped (SIGINT/SIGTERM: controlled stop, exit 0).

SIGUSR1 is an e-stop (latched; ``poise reset`` clears it). Without ``--port``
the built-in simulated rig runs inside the daemon on a pty (``--sim``, the
default); ``--lockstep`` makes it sample only when the daemon answers.
"""

from __future__ import annotations

import argparse

from daemon.commands import add_config_argument, config_path

NAME = "run"
HELP = "serve one rig: control cycle, interlocks, recording, control API (SIGUSR1 = e-stop)"


def add_port_arguments(parser: argparse.ArgumentParser) -> None:
    """--config, and --port URL or --sim (shared with `poise session`)."""
    add_config_argument(parser)
    where = parser.add_mutually_exclusive_group()
    where.add_argument(
        "--port", metavar="URL",
        help="the rig's serial port: a device path, a pty path or socket://HOST:PORT",
    )
    where.add_argument(
        "--sim", action="store_true",
        help="run the built-in simulated rig on a pty (the default without --port)",
    )
    parser.add_argument("--seed", type=int, default=0, help="simulated rig: random seed")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_port_arguments(parser)
    parser.add_argument(
        "--lockstep", action="store_true",
        help="simulated rig: take a sample per drive command instead of on the wall clock",
    )


def load(args: argparse.Namespace):
    """(config, config text) from --config, or the demo rig."""
    from daemon.config import load_config

    path = config_path(args)
    config = load_config(path)
    return config, path.read_text(encoding="utf-8")


def run(args: argparse.Namespace) -> int:
    import logging

    from daemon.runtime import event_loop
    from daemon.runtime.embedded_sim import SimOptions
    from daemon.runtime.service import PoiseService

    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(name)s %(levelname)s %(message)s")
    config, text = load(args)
    sim = None if args.port else SimOptions(lockstep=args.lockstep, seed=args.seed)

    async def serve() -> None:
        service = PoiseService(config, text, port_url=args.port, sim=sim)
        await service.start()
        service.install_signal_handlers()
        service.start_recording("poise run")
        if service.rig is not None:
            print(f"poise: simulated rig on {service.rig.where}", flush=True)
        print(f"poise: serving rig {config.rig.id} on {config.api.socket_path}", flush=True)
        try:
            await service.wait_for_shutdown_request()
        finally:
            await service.close()

    event_loop.run(serve())
    return 0
