"""Where a daemon serves its control API: one owner-only folder per user, one socket per rig.

Unless ``api.socket_path`` is set, a rig's control socket is
``<runtime dir>/<rig id>.sock``, the runtime dir being ``$XDG_RUNTIME_DIR/poise``
when the session has one (systemd's per-user ``/run/user/UID``) and
``/tmp/poise-UID`` otherwise. The folder is created mode 0700 and refused if
someone else owns it or others may enter it, so two users on one machine
never reach (or command) each other's rig, and each user's commands find their
own daemon without any option.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path
from typing import TYPE_CHECKING

from daemon.errors import OperatorError

if TYPE_CHECKING:
    from daemon.config import PoiseConfig


def runtime_dir() -> Path:
    """This user's folder for control sockets (not created here)."""
    base = os.environ.get("XDG_RUNTIME_DIR")
    if base:
        return Path(base) / "poise"
    return Path("/tmp") / f"poise-{os.getuid()}"


def default_socket_path(rig_id: str) -> Path:
    return runtime_dir() / f"{rig_id}.sock"


def control_socket_path(config: PoiseConfig) -> Path:
    """The socket a rig's daemon serves on: ``api.socket_path``, or this user's default."""
    if config.api.socket_path is not None:
        return Path(config.api.socket_path)
    return default_socket_path(config.rig.id)


def make_private_dir(folder: Path) -> None:
    """Create ``folder`` (mode 0700) if missing; OperatorError if it is not this user's alone."""
    try:
        folder.mkdir(mode=0o700, parents=True, exist_ok=True)
        info = folder.lstat()
    except OSError as exc:
        raise OperatorError(f"cannot create the control socket folder {folder}: {exc.strerror}") from None
    if not stat.S_ISDIR(info.st_mode) or info.st_uid != os.getuid():
        raise OperatorError(
            f"control socket folder {folder} is not a folder of this user's (uid {os.getuid()}); "
            "remove it or set api.socket_path"
        )
    if info.st_mode & 0o077:
        raise OperatorError(
            f"control socket folder {folder} is open to other users (mode "
            f"{stat.S_IMODE(info.st_mode):o}); chmod 700 it or set api.socket_path"
        )
