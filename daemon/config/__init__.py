"""Rig configuration: TOML files validated by pydantic models.

``load_config(path)`` returns a frozen :class:`PoiseConfig` or raises
:class:`ConfigError` whose ``problems`` are one line each, naming the field path
(``cart.mass_kg``) and what is allowed there (:mod:`daemon.config.problems`).
The types are strict and every number has a range (:mod:`daemon.config.base`);
the fields that describe the plant have no defaults (:mod:`daemon.config.plant`).
Paths in a config file are taken from the file's own folder
(``recording.db_path`` comes back absolute), so a command finds the same run
store whatever its working directory; the built-in demo rig's store, and that
of a config parsed from text, is in the working directory.
Values a file may leave out to have them derived from the rig
(``stop.decel_mps2``, ``swing_up.pump_offset_m``) are filled in once, as the
config is parsed (:mod:`daemon.config.derived`); the config's
:attr:`~PoiseConfig.derived` says which and from what.
"""

from __future__ import annotations

import sys
import tomllib
from importlib import resources
from pathlib import Path

from pydantic import Field, PrivateAttr, ValidationError, model_validator

from daemon.config.base import Section
from daemon.config.control import (
    BalanceSettings,
    CatchSettings,
    EstimatorSettings,
    HomingSettings,
    SwingUpSettings,
)
from daemon.config.derived import DerivedValue, resolve_derived
from daemon.config.problems import ConfigError, ConfigErrors, describe
from daemon.config.rig import (
    CartSettings,
    DriveSettings,
    EncoderSettings,
    PendulumSettings,
    RigIdentity,
    SamplingSettings,
    TrackSettings,
)
from daemon.config.safety import InterlockSettings, StopSettings
from daemon.config.service import ApiSettings, RecordingSettings
from daemon.config.timeouts import timeout_problems

__all__ = [
    "ConfigError",
    "ConfigErrors",
    "PoiseConfig",
    "demo_config_path",
    "load_config",
    "parse_config",
]


class PoiseConfig(Section):
    rig: RigIdentity
    track: TrackSettings
    cart: CartSettings
    pendulum: PendulumSettings
    drive: DriveSettings
    encoders: EncoderSettings
    sampling: SamplingSettings
    estimator: EstimatorSettings = Field(default_factory=EstimatorSettings)
    balance: BalanceSettings = Field(default_factory=BalanceSettings)
    swing_up: SwingUpSettings = Field(default_factory=SwingUpSettings)
    catch: CatchSettings = Field(default_factory=CatchSettings)
    homing: HomingSettings = Field(default_factory=HomingSettings)
    interlocks: InterlockSettings = Field(default_factory=InterlockSettings)
    stop: StopSettings = Field(default_factory=StopSettings)
    recording: RecordingSettings = Field(default_factory=RecordingSettings)
    api: ApiSettings = Field(default_factory=ApiSettings)
    _derived: tuple[DerivedValue, ...] = PrivateAttr(default=())

    @property
    def derived(self) -> tuple[DerivedValue, ...]:
        """The values this config left out and had derived from the rig, in the order they were derived."""
        return self._derived

    @property
    def soft_limit_m(self) -> float:
        """Largest |x| allowed in normal running: inside the limit switches by the soft-limit inset."""
        return self.track.length_m / 2 - self.track.switch_inset_m - self.interlocks.soft_limit_inset_m

    @model_validator(mode="after")
    def _room_between_the_soft_limits(self) -> PoiseConfig:
        if not self.soft_limit_m > 0.0:
            raise ValueError(
                f"interlocks.soft_limit_inset_m: the soft limits come out {self.soft_limit_m:.3f} m from "
                "the track centre, leaving the cart no room (track.length_m / 2 - track.switch_inset_m - "
                "interlocks.soft_limit_inset_m must be above 0)"
            )
        return self

    @model_validator(mode="after")
    def _timeouts_fit_the_track(self) -> PoiseConfig:
        problems = timeout_problems(self)
        if problems:
            raise ValueError("; ".join(problems))
        return self


def _read_toml(text: str, source: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(source, [f"not valid TOML: {exc}"]) from None
    except RecursionError:
        raise ConfigError(source, ["not readable TOML: arrays or inline tables nested too deeply"]) from None
    except ValueError:  # Python refuses to read integers this long (CVE-2020-10735)
        limit = sys.get_int_max_str_digits()
        raise ConfigError(source, [f"not readable TOML: an integer of more than {limit} digits"]) from None


def parse_config(text: str, source: str = "<config>") -> PoiseConfig:
    data = _read_toml(text, source)
    try:
        config = PoiseConfig.model_validate(data)
    except ValidationError as exc:
        raise ConfigError(source, [describe(e, PoiseConfig) for e in exc.errors()]) from None
    config, problems = resolve_derived(config)
    if problems:
        raise ConfigError(source, problems)
    return config


def load_config(path: str | Path) -> PoiseConfig:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(str(path), [f"cannot read file: {exc.strerror}"]) from None
    except UnicodeDecodeError:
        raise ConfigError(str(path), ["not UTF-8 text"]) from None
    config = parse_config(text, str(path))
    if path.resolve() == demo_config_path().resolve():
        return config  # part of the program, not of a rig folder: its store goes where it is run
    return config.model_copy(update={"recording": config.recording.with_db_path_from(path.parent)})


def demo_config_path() -> Path:
    """The demo rig's config shipped inside the package (also in configs/)."""
    return Path(str(resources.files("daemon.config").joinpath("demo_rig.toml")))
