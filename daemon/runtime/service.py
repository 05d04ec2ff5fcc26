"""The daemon service: one rig, and everything that runs around its control cycle.

:class:`PoiseService` owns the config, the port (pyserial, or the built-in
simulated rig on a pty), the link, the control cycle, the supervisor, the
recorder, the control API server, the watchdog and the signal handlers. It is
the object the control API serves: :meth:`execute` and :meth:`status`.

Signals (:meth:`install_signal_handlers`):

- SIGINT, SIGTERM: controlled stop of any motion, drive off, the recording
  closed cleanly, the process exits 0.
- SIGUSR1: e-stop (latched, stop category per ``stop.category``), exactly as the
  ``estop`` command; clear it with ``poise reset``.

Link events: a DeviceHello nobody asked for means the device reset (trip
``device.reset``; the link is configured again so telemetry resumes, the
fault stays latched); a port that fails or closes trips ``link.lost`` and the
service keeps trying to reopen it; the watchdog trips ``link.timeout`` when
telemetry stops. Whatever faults the rig holds latched as its telemetry (re)starts
(F_RESET after its power-up, F_WATCHDOG after a host that died) are latched here
too, each with its reason, so a daemon comes up in FAULT until an operator
``reset``: the only thing that sends ClearFaults to the device; the faults it
clears are not acted on again until the device has answered.
"""

from __future__ import annotations

import asyncio
import contextlib
import gc
import logging
import math
import signal
import sys
import time
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

from daemon.api.paths import control_socket_path
from daemon.api.server import ApiServer
from daemon.config import PoiseConfig
from daemon.control.homing import Homing
from daemon.control.rig_setup import build_control_set
from daemon.control.stop_capability import stop_decel_problem
from daemon.errors import CommandRefused, OperatorError
from daemon.link import Link, LinkDown, Port, open_port
from daemon.recording import Recorder, RecordingError, RunMetadata
from daemon.recording.summary import LINK_AT_RUN_START, LINK_COUNTERS_EVENT
from daemon.runtime.cycle import ControlCycle
from daemon.runtime.embedded_sim import SimOptions, start_embedded_rig
from daemon.runtime.pacing import PacingRefused, pacing_for
from daemon.runtime.timing import LagRing, TimingDigest
from daemon.runtime.watchdog import run_watchdog
from daemon.supervisor import Action, Event, State, Supervisor, Trip, state_code_table
from daemon.supervisor.interlocks import flag_trips
from daemon.supervisor.machine import LogEntry
from daemon.supervisor.states import MOTION_STATES
from daemon.version import software_version
from protocol import (
    DRIVE_KIND_NEWTONS,
    DRIVE_KIND_VOLTS,
    PROTOCOL_VERSION,
    ClearFaults,
    DeviceHello,
    FaultReport,
    Stop,
)
from sim_device.rig import SimulatedRig

log = logging.getLogger("poise.service")

HOUSEKEEPING_S = 0.02
SUMMARY_INTERVAL_S = 10.0
RECONNECT_INTERVAL_S = 1.0
FIRST_TELEMETRY_TIMEOUT_S = 5.0
STOP_WAIT_S = 10.0
TRIP_FRAMES_KEPT = 8
# Status figures from the timing rings are worked out at most this often (status requests and
# stream ticks in between reuse them): a digest costs a fraction of a millisecond, on the loop.
TIMING_DIGEST_MAX_AGE_S = 0.25
# The recorder's writer thread shares the interpreter lock with the control cycle; Python hands
# the lock over every 5 ms by default, a whole overrun budget. 0.5 ms bounds that wait.
GIL_SWITCH_INTERVAL_S = 0.0005  # last link frames each way stored with a trip event


class PoiseService:
    """One rig under supervision. ``await start()``, then serve; ``await close()`` to finish."""

    def __init__(
        self,
        config: PoiseConfig,
        config_text: str,
        *,
        port_url: str | None = None,
        sim: SimOptions | None = None,
        serve_api: bool = True,
        socket_path: str | Path | None = None,
        record_from_first_sample: str | None = None,
    ):
        """``record_from_first_sample``: a note; the run it names opens once the rig has said who
        it is, before it is configured, so the run holds the rig's stream from its first sample."""
        if (port_url is None) == (sim is None):
            raise ValueError("give exactly one of port_url and sim")
        self.config = config
        self.config_text = config_text
        self.port_url = port_url
        self.sim_options = sim
        self.serve_api = serve_api
        self.record_from_first_sample = record_from_first_sample
        self.socket_path = Path(socket_path) if socket_path else control_socket_path(config)
        self.rig: SimulatedRig | None = None
        # how to (re)open the rig's port: the URL given, or the built-in rig's link once started
        self._open_port: Callable[[], Port] = lambda: open_port(port_url or "")
        self.port: Port | None = None
        self.link: Link | None = None
        self.hello: DeviceHello | None = None
        self.recorder: Recorder | None = None
        self.api: ApiServer | None = None
        self.run_id: int | None = None
        self.handshaking = False
        self.closing = False
        self.trips: list[tuple[str, float, int]] = []  # name, device time, telemetry seq
        self.supervisor = Supervisor(config, clock=self._device_time_s, on_entry=self._on_log_entry)
        controls = build_control_set(config)
        problem = stop_decel_problem(config, controls.params)
        if problem is not None:
            raise OperatorError(problem)
        self.cycle = ControlCycle(
            self.supervisor,
            controls,
            Homing(controls.params, config.homing),
            put_sample=_discard_sample,
            on_trip=self._record_trip,
            on_link_lost=self._link_lost,
            on_telemetry_resumed=self._telemetry_resumed,
        )
        self.loop_lag = LagRing()
        self._digest: TimingDigest | None = None
        self._digest_at_s = -math.inf
        self._tasks: list[asyncio.Task] = []
        self._reconnect_task: asyncio.Task | None = None
        self._shutdown_requested: asyncio.Event | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self.rate_known: asyncio.Event | None = None
        self._default_switch_interval_s = sys.getswitchinterval()

    # ------------------------------------------------------------------ life cycle

    async def start(self) -> None:
        """Open the port (or start the simulated rig), handshake, serve; raises OperatorError."""
        self._loop = loop = asyncio.get_running_loop()
        self._shutdown_requested = asyncio.Event()
        self.rate_known = asyncio.Event()
        if self.sim_options is not None:
            embedded = start_embedded_rig(self.config, self.sim_options, loop)
            self.rig, self._open_port = embedded.rig, embedded.open_port
        url = self.rig.where if self.rig is not None else self.port_url
        try:
            self.recorder = Recorder.from_settings(
                self.config.recording, on_error=self._recording_failed_threadsafe
            )
        except RecordingError as exc:
            await self._release()
            raise OperatorError(str(exc)) from None
        self.cycle.put_sample = self.recorder.put_sample
        # Collect once now, before telemetry flows, and keep the start-up objects out of later
        # collections: automatic collection is off while the drive may move (see the cycle).
        gc.collect()
        gc.freeze()
        self._tasks.append(asyncio.create_task(self._housekeeping(), name="poise-housekeeping"))
        try:
            await self._connect()
        except (LinkDown, OperatorError) as exc:
            await self._release()
            raise OperatorError(str(exc)) from None
        self._tasks.append(
            asyncio.create_task(
                run_watchdog(self.cycle, self.supervisor, self._expecting_telemetry,
                             self._watchdog_trip, self.rate_known, self.loop_lag),
                name="poise-watchdog",
            )
        )
        try:
            async with asyncio.timeout(FIRST_TELEMETRY_TIMEOUT_S):
                await self.cycle.waiters.wait_for_state(set(State) - {State.DISCONNECTED})
                await self.rate_known.wait()
        except TimeoutError:
            await self._release()
            raise OperatorError(
                f"rig at {url} accepted Configure but sent no telemetry in "
                f"{FIRST_TELEMETRY_TIMEOUT_S:g} s"
            ) from None
        if self.serve_api:
            self.api = ApiServer(self, self.config.api, path=self.socket_path)
            try:
                await self.api.start()
            except OperatorError:
                self.api = None
                await self._release()
                raise
        gc.freeze()  # everything made since the collection below is start-up state too
        sys.setswitchinterval(GIL_SWITCH_INTERVAL_S)
        log.info("serving rig %s on %s", self.config.rig.id, url)

    async def _connect(self) -> None:
        loop = asyncio.get_running_loop()
        port = self._open_port()
        link = Link(
            port.fd,
            self.config.sampling.device_watchdog_ms,
            loop.time,
            on_device_reset=self._device_reset,
            on_fault_report=self._fault_report,
            on_write_error=lambda exc: self._link_lost(
                f"writing the rig port failed: {exc.strerror or exc}"
            ),
        )
        self.port, self.link = port, link
        self.cycle.attach(link, loop)
        try:
            await self._handshake(link)
        except LinkDown:
            self.cycle.detach(loop)
            port.close()
            self.port = self.link = None
            raise

    async def _handshake(self, link: Link) -> None:
        """Identify, settle the pacing and the config check from the hello, then configure."""
        sampling = self.config.sampling
        self.handshaking = True
        try:
            self.hello = hello = await link.identify()
            if self.record_from_first_sample is not None and self.run_id is None:
                self.start_recording(self.record_from_first_sample)
            try:
                pacing = pacing_for(hello, self.supervisor.limits)
            except PacingRefused as refused:
                raise LinkDown(f"refusing the rig: {refused}") from None
            self.cycle.set_pacing(pacing)
            self.supervisor.config_problems = config_mismatches(self.config, hello)
            for problem in self.supervisor.config_problems:
                log.warning("rig and config disagree: %s", problem)
            await link.configure(sampling.rate_hz, sampling.device_watchdog_ms)
        finally:
            self.handshaking = False
        log.info(
            "rig paced by %s", "the host's answers (lockstep)" if pacing.lockstep else "its own clock"
        )

    def request_shutdown(self) -> None:
        if self._shutdown_requested is not None:
            self._shutdown_requested.set()

    async def wait_for_shutdown_request(self) -> None:
        assert self._shutdown_requested is not None
        await self._shutdown_requested.wait()

    def install_signal_handlers(self) -> None:
        loop = asyncio.get_running_loop()
        loop.add_signal_handler(signal.SIGINT, self.request_shutdown)
        loop.add_signal_handler(signal.SIGTERM, self.request_shutdown)
        loop.add_signal_handler(signal.SIGUSR1, self._signal_estop)

    def _signal_estop(self) -> None:
        try:
            self.execute("estop", {}, "signal")
        except CommandRefused as refused:
            log.error("e-stop by signal refused: %s", refused.reason)

    async def stop_motion(self, source: str) -> None:
        """Controlled stop of any motion; returns once the drive is off (or after STOP_WAIT_S)."""
        machine = self.supervisor.machine
        if machine.state in MOTION_STATES and machine.state is not State.STOPPING:
            with contextlib.suppress(CommandRefused):
                self.execute("stop", {}, source)
        if machine.state in MOTION_STATES or machine.ramp is not None:
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout(STOP_WAIT_S):
                    await self.cycle.waiters.wait_for_state(set(State) - MOTION_STATES)

    async def close(self, outcome: str = "completed") -> None:
        """Controlled stop, drive off, recording closed, port and API closed."""
        if self.closing:
            return
        self.closing = True
        if self.link is not None and self.cycle.telemetry_flowing:
            await self.stop_motion("signal")
            with contextlib.suppress(LinkDown, TimeoutError):
                async with asyncio.timeout(1.0):
                    await self.link.request(Stop)
        if self.run_id is not None:
            self.end_recording(outcome)
        await self._release()

    async def _release(self) -> None:
        """Free everything start() took, whatever state it got to."""
        self.closing = True
        for task in [*self._tasks, self._reconnect_task]:
            if task is not None:
                task.cancel()
        for task in [*self._tasks, self._reconnect_task]:
            if task is not None:
                with contextlib.suppress(asyncio.CancelledError):
                    await task
        self._tasks.clear()
        if self.api is not None:
            await self.api.close()
            self.api = None
        if self._loop is not None and self.link is not None:
            self.cycle.detach(self._loop)
            self.link.fail_pending("the daemon is shutting down")
        if self.port is not None:
            self.port.close()
            self.port = self.link = None
        if self.recorder is not None:
            self.recorder.close()
            self.cycle.put_sample = _discard_sample
            self.recorder = None
        if self.rig is not None:
            self.rig.close()
            self.rig = None
        gc.enable()
        sys.setswitchinterval(self._default_switch_interval_s)

    # ------------------------------------------------------------------ recording

    def start_recording(self, note: str = "") -> int:
        """Open a new run (ending the open one first); returns its id."""
        assert self.recorder is not None, "start() first"
        if self.run_id is not None:
            self.end_recording("completed")
        firmware = "unknown"
        if self.hello is not None:
            h = self.hello
            firmware = f"{h.firmware_major}.{h.firmware_minor}.{h.firmware_patch}"
        run_id = self.recorder.start_run(
            RunMetadata(
                rig_id=self.config.rig.id,
                config_text=self.config_text,
                software_version=software_version(),
                protocol_version=str(PROTOCOL_VERSION),
                firmware_version=firmware,
                drive_kind=self.config.drive.kind,
                mode_names=state_code_table(),
                operator_notes=note,
            )
        )
        self.run_id = run_id
        self._record_link_counters(LINK_AT_RUN_START)
        return run_id

    def end_recording(self, outcome: str, summary: dict | None = None) -> None:
        """End the open run; the recorder stores its summary (``summary`` in it as ``reported``)."""
        if self.recorder is not None and self.run_id is not None:
            self._record_link_counters("run end")
            self.recorder.end_run(outcome, summary)
        self.run_id = None

    def _record_link_counters(self, at: str) -> None:
        """Store the live link's counters with the run: the run summary's ``link`` adds them up."""
        if self.link is not None and self.run_id is not None and self.recorder is not None:
            counters = self.link.stats.counters()
            self.recorder.put_event(LINK_COUNTERS_EVENT, "link", {"at": at, "counters": counters})

    def record_event(self, kind: str, source: str, data: dict) -> None:
        """Store an event with the open run (and with none if nothing is recording)."""
        if self.recorder is not None:
            self.recorder.put_event(kind, source, data)

    def _recording_failed_threadsafe(self, reason: str) -> None:
        if self._loop is not None and not self._loop.is_closed():
            self._loop.call_soon_threadsafe(self._recording_failed, reason)

    def _recording_failed(self, reason: str) -> None:
        trip = Trip("recording.failed", Action.CONTROLLED_STOP, reason, {})
        self._trip(trip)

    # ------------------------------------------------------------------ control API target

    def execute(self, command: str, args: dict, source: str) -> dict:
        if command == "record":
            if args.get("on"):
                try:
                    return {"run_id": self.start_recording(str(args.get("note", "")))}
                except RecordingError as exc:  # the store failed: no run can start
                    raise CommandRefused(str(exc)) from None
            self.end_recording("completed")
            return {"run_id": None}
        faults_to_clear = 0
        if command == "reset" and self.cycle.last_telemetry is not None:
            faults_to_clear = self.cycle.last_telemetry.faults
        result, transition = self.supervisor.execute(command, args, source)
        if command == "reset" and self.link is not None:
            self._clear_device_faults(faults_to_clear)
        self.cycle.apply(transition)
        return result

    def _clear_device_faults(self, faults: int) -> None:
        cycle = self.cycle
        cycle.fault_mask = ~faults & 0xFFFF
        # A motion command right after the reset is judged on the flags as they are now, not on
        # the last sample's (which may be all the daemon has seen since the reset).
        self.supervisor.faults &= cycle.fault_mask

        def answered(future: asyncio.Future) -> None:
            cycle.fault_mask = 0xFFFF
            if not future.cancelled() and future.exception() is not None:
                log.error("ClearFaults unanswered: %s", future.exception())

        self.link.send(ClearFaults).add_done_callback(answered)

    def timing_digest(self) -> TimingDigest:
        """The cycle's timing figures, at most TIMING_DIGEST_MAX_AGE_S old."""
        now_s = time.monotonic()
        if self._digest is None or now_s - self._digest_at_s >= TIMING_DIGEST_MAX_AGE_S:
            self._digest = self.cycle.timing.digest()
            self._digest_at_s = now_s
        return self._digest

    def status(self) -> dict:
        digest = self.timing_digest()
        status = self.supervisor.status()
        status["homing"] = self.homing_status()
        status["link"] = self.link_status(digest)
        status["loop"] = self.loop_status(digest)
        status["recording"] = self.recording_status()
        status["cycle"] = {
            "samples": self.cycle.samples,
            "missed": self.cycle.missed,
            "compute_us": {"p50": digest.compute_p50_us, "p99": digest.compute_p99_us},
            "stages_us": digest.stages_us,
        }
        return status

    def homing_status(self) -> dict:
        """Where homing is: its phase, how far the cart has gone, and its result."""
        homing = self.cycle.homing
        return {
            "phase": homing.phase.value if homing.started else None,
            "travel_m": homing.travelled_m,
            "expected_travel_m": homing.expected_travel_m,
            "measured_travel_m": homing.measured_travel_m,
            "message": homing.message,
        }

    def loop_status(self, digest: TimingDigest) -> dict:
        """How late the event loop ran (the watchdog's ticks) and the longest wait between reads."""
        lag = self.loop_lag.figures_ms()
        limits = self.supervisor.limits
        return {
            "lag_ms_p50": lag["p50"],
            "lag_ms_p99": lag["p99"],
            "lag_ms_max": lag["max"],
            "lag_ms_worst": lag["worst"],
            "stall_limit_ms": limits.loop_stall_s * 1000.0,
            "read_gap_ms_worst": digest.worst_gap_us / 1000.0,
            "link_timeout_ms": limits.link_timeout_s * 1000.0,
        }

    def link_status(self, digest: TimingDigest | None = None) -> dict:
        link, cycle = self.link, self.cycle
        digest = digest or self.timing_digest()
        stats = link.stats if link is not None else None
        return {
            "connected": self.supervisor.machine.link_up and link is not None,
            "rate_hz": self.supervisor.link_rate_hz,
            "latency_us_p50": digest.latency_p50_us,
            "latency_us_p99": digest.latency_p99_us,
            "gaps": stats.gaps if stats else 0,
            "crc_failures": stats.crc_failures if stats else 0,
            "frames_rx": stats.frames_rx if stats else 0,
            "frames_tx": stats.frames_tx if stats else 0,
            "missed": cycle.missed,
            "summary": self.link_summary(digest),
        }

    def link_summary(self, digest: TimingDigest | None = None) -> str:
        """One line for logs and bug reports: link counters, misses, latency, loop lag."""
        if self.link is None:
            return "link: not connected"
        digest = digest or self.timing_digest()
        lag = self.loop_lag.figures_ms()
        return (
            f"{self.link.stats.summary()} missed={self.cycle.missed} "
            f"stale_telemetry={self.cycle.stale_telemetry} "
            f"heartbeats={self.link.heartbeats_sent} device_resets={self.link.device_resets} "
            f"tx_bytes_dropped={self.link.tx_bytes_dropped} latency_us p50={digest.latency_p50_us:.1f} "
            f"p99={digest.latency_p99_us:.1f} max={digest.latency_max_us:.1f} "
            f"loop_lag_ms p99={lag['p99']:.2f} max={lag['max']:.2f} "
            f"read_gap_ms max={digest.worst_gap_us / 1000.0:.2f}"
        )

    def recording_status(self) -> dict:
        if self.recorder is None:
            return {"run_id": None, "samples": 0, "dropped": 0, "path": None, "active": False}
        stats = self.recorder.stats()
        return {
            "run_id": self.run_id,
            "samples": stats.written,
            "dropped": stats.dropped,
            "path": self.recorder.db_path,
            "active": stats.active,
            "error": stats.error,
        }

    # ------------------------------------------------------------------ events

    def _device_time_s(self) -> float:
        return self.cycle.t_s

    def _on_log_entry(self, entry: LogEntry) -> None:
        if self.recorder is not None:
            self.recorder.put_event(
                f"supervisor.{entry.kind}", entry.source, {"t_s": entry.t_s, "text": entry.text}
            )

    def _record_trip(self, trip: Trip, t_s: float) -> None:
        """Store a trip with the last link frames each way (the latch itself is the supervisor's)."""
        tm = self.cycle.last_telemetry
        self.trips.append((trip.name, t_s, tm.seq if tm is not None else -1))
        log.warning("interlock %s tripped: %s", trip.name, trip.reason)
        if self.recorder is None:
            return
        data: dict = {"name": trip.name, "reason": trip.reason, "t_s": t_s,
                      "action": trip.action.name, "values": trip.values}
        if self.link is not None:
            stats = self.link.stats
            data["rx_frames"] = [chunk.hex(" ") for _, chunk, _ in list(stats.rx_frames)[-TRIP_FRAMES_KEPT:]]
            data["tx_frames"] = [frame[:-1].hex(" ") for _, frame, _ in list(stats.tx_frames)[-TRIP_FRAMES_KEPT:]]
        self.recorder.put_event("interlock.trip", "interlock", data)

    def _trip(self, trip: Trip) -> None:
        """A trip found outside the per-sample check: latch it, record it, act on it now."""
        t_s = self.cycle.t_s
        transition = self.supervisor.trip(trip, t_s)
        self._record_trip(trip, t_s)
        self.cycle.apply(transition)

    def _notify(self, event: Event, cause: str) -> None:
        """A link event: to the supervisor, and what it changed to the cycle's transition handler."""
        self.cycle.apply(self.supervisor.notify(event, "link", self.cycle.t_s, cause=cause))

    def _watchdog_trip(self, trip: Trip) -> None:
        self._trip(trip)
        if trip.name == "link.timeout":
            self.cycle.telemetry_flowing = False
            self._notify(Event.LINK_DOWN, trip.reason)

    def _telemetry_resumed(self) -> None:
        if not self.supervisor.machine.link_up:
            self._notify(Event.LINK_UP, "telemetry flowing")
        self._latch_held_faults()

    def _latch_held_faults(self) -> None:
        """Latch every fault the rig holds as its telemetry (re)starts, each under its own name.

        The handshake clears nothing, so a rig just powered up shows F_RESET and one whose last
        host died shows F_WATCHDOG: the daemon comes up in FAULT (or ESTOP) saying so, and only
        an operator reset clears them (the per-sample check would latch only the first).
        """
        tm = self.cycle.last_telemetry
        faults = 0 if tm is None else tm.faults & self.cycle.fault_mask  # not those being cleared
        if not faults:
            return
        log.warning("the rig holds faults 0x%04x as telemetry starts: a reset is needed", faults)
        latched = {fault.name for fault in self.supervisor.machine.faults}
        for held in flag_trips(self.supervisor.limits, 0, 0.0, 0.0, 0, faults):
            if held.name in latched:  # latched already (a device reset said so as it happened)
                continue
            self._trip(replace(held, reason=f"held latched by the rig as its telemetry started: "
                               f"{held.reason}"))

    def _expecting_telemetry(self) -> bool:
        return self.link is not None and not self.handshaking and not self.closing

    def _device_reset(self, hello: DeviceHello) -> None:
        trip = Trip(
            "device.reset",
            Action.DRIVE_OFF,
            f"device {hello.device_id!r} said hello unasked: it has reset",
            {"resets": float(self.link.device_resets if self.link else 0)},
        )
        self._trip(trip)
        self.cycle.telemetry_flowing = False
        self.cycle.device_armed = False
        if self.link is not None and not self.closing:
            self._tasks.append(asyncio.create_task(self._reconfigure(self.link)))

    async def _reconfigure(self, link: Link) -> None:
        try:
            await self._handshake(link)
        except LinkDown as exc:
            self._link_lost(f"device reset and did not take its configuration again: {exc}")

    def _fault_report(self, report: FaultReport) -> None:
        log.warning("device reports faults 0x%04x (code %d, detail %g)", report.faults,
                    report.code, report.detail)
        if self.recorder is not None:
            self.recorder.put_event(
                "device.fault_report", "device",
                {"faults": report.faults, "code": report.code, "detail": report.detail},
            )

    def _link_lost(self, reason: str) -> None:
        if self.link is None:
            return
        loop = asyncio.get_running_loop()
        self.cycle.detach(loop)
        self.link.fail_pending(reason)
        self._record_link_counters("link lost")
        if self.port is not None:
            self.port.close()
        self.port = self.link = None
        self._trip(Trip("link.lost", Action.DRIVE_OFF, reason, {}))
        self._notify(Event.LINK_DOWN, reason)
        if not self.closing:
            self._reconnect_task = asyncio.create_task(self._reconnect(), name="poise-reconnect")

    async def _reconnect(self) -> None:
        url = self.rig.where if self.rig is not None else self.port_url
        while not self.closing:
            await asyncio.sleep(RECONNECT_INTERVAL_S)
            try:
                await self._connect()
            except (LinkDown, OperatorError) as exc:
                log.info("rig port %s not back yet: %s", url, exc)
                continue
            log.info("rig port %s reconnected", url)
            return

    async def _housekeeping(self) -> None:
        """Retries and heartbeats every HOUSEKEEPING_S; a one-line link summary every so often."""
        loop = asyncio.get_running_loop()
        next_summary = loop.time() + SUMMARY_INTERVAL_S
        while True:
            await asyncio.sleep(HOUSEKEEPING_S)
            if self.link is not None:
                self.link.poll()
            if loop.time() >= next_summary:
                next_summary += SUMMARY_INTERVAL_S
                digest = self.timing_digest()
                line = self.link_summary(digest)
                log.info("%s", line)
                if self.recorder is not None:
                    self.recorder.put_event("link.summary", "link", {"summary": line})
                    self.recorder.put_event("loop.lag", "daemon", self.loop_status(digest))


def config_mismatches(config: PoiseConfig, hello: DeviceHello) -> tuple[str, ...]:
    """Where the device's own description disagrees with the rig config (each blocks arming)."""
    problems = []
    kind = DRIVE_KIND_VOLTS if config.drive.kind == "voltage" else DRIVE_KIND_NEWTONS
    if hello.drive_kind != kind:
        problems.append(
            f"drive.kind: config says {config.drive.kind!r}, the device drives in "
            f"{'volts' if hello.drive_kind == DRIVE_KIND_VOLTS else 'newtons'}"
        )
    if config.drive.limit > hello.drive_limit * (1 + 1e-6):
        problems.append(
            f"drive.limit: config {config.drive.limit:g} exceeds the device's {hello.drive_limit:g}"
        )
    if abs(hello.cart_counts_per_m - config.encoders.cart_counts_per_m) > 1e-3 * config.encoders.cart_counts_per_m:
        problems.append(
            f"encoders.cart_counts_per_m: config {config.encoders.cart_counts_per_m:g}, "
            f"device {hello.cart_counts_per_m:g}"
        )
    if hello.pendulum_counts_per_rev != config.encoders.pendulum_counts_per_rev:
        problems.append(
            f"encoders.pendulum_counts_per_rev: config {config.encoders.pendulum_counts_per_rev}, "
            f"device {hello.pendulum_counts_per_rev}"
        )
    if abs(hello.track_length_m - config.track.length_m) > 1e-3:
        problems.append(
            f"track.length_m: config {config.track.length_m:g} m, device {hello.track_length_m:g} m"
        )
    return tuple(problems)


def _discard_sample(row: tuple) -> bool:
    return False
