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
    parser.add_argument(
        "--encoder-noise-counts", type=float, metavar="SIGMA",
        help="simulated rig: Gaussian noise on both encoders, counts rms (default: half a count)",
    )


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_port_arguments(parser)
    parser.add_argument(
        "--lockstep", action="store_true",
        help="simulated rig: take a sample per drive command instead of on the wall clock",
    )
    parser.add_argument(
        "--socket", metavar="PATH",
        help="serve the control API here (default: the config's api.socket_path, else this "
        "user's socket for the rig)",
    )


def sim_options(args: argparse.Namespace, lockstep: bool):
    """The built-in simulated rig's options from --seed and --encoder-noise-counts."""
    from daemon.errors import OperatorError
    from daemon.runtime.embedded_sim import BUILT_IN_NOISE_COUNTS, SimOptions

    noise = BUILT_IN_NOISE_COUNTS if args.encoder_noise_counts is None else args.encoder_noise_counts
    if not 0.0 <= noise <= 1000.0:
        raise OperatorError(f"--encoder-noise-counts must be in 0..1000 counts (got {noise:g})")
    return SimOptions(lockstep=lockstep, seed=args.seed, encoder_noise_counts=noise)


def load(args: argparse.Namespace):
    """(config, config text) from --config, or the demo rig."""
    from daemon.config import load_config

    path = config_path(args)
    config = load_config(path)
    return config, path.read_text(encoding="utf-8")


def run(args: argparse.Namespace) -> int:
    import logging

    from daemon.runtime import event_loop
    from daemon.runtime.service import PoiseService

    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(name)s %(levelname)s %(message)s")
    config, text = load(args)
    sim = None if args.port else sim_options(args, lockstep=args.lockstep)

    async def serve() -> None:
        service = PoiseService(
            config, text, port_url=args.port, sim=sim, socket_path=args.socket,
            record_from_first_sample="poise run",
        )
        await service.start()
        service.install_signal_handlers()
        if service.rig is not None:
            print(f"poise: simulated rig on {service.rig.where}", flush=True)
        print(f"poise: serving rig {config.rig.id} on {service.socket_path}", flush=True)
        try:
            await service.wait_for_shutdown_request()
        finally:
            await service.close()
        logging.getLogger("poise.service").info(
            "daemon for rig %s shut down: drive off, recording closed", config.rig.id
        )

    event_loop.run(serve())
    return 0
