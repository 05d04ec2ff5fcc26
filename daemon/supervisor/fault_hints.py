"""What a latched fault most likely means and what to do about it, one line per interlock.

The dashboard and ``poise status`` show the hint beside the fault's own reason
(which says what was measured), so an operator who sees a fault latch again and
again is told where to look. Names are the interlocks' trip names; faults
without an entry get no hint.
"""

from __future__ import annotations

_HOST_LOAD = (
    "the host did not keep up: close heavy programs (browsers, builds), keep the dashboard's "
    "terminal small, or raise the timeout in the config; a real-time kernel holds it to well "
    "under a millisecond (docs/timeouts.md)"
)

FAULT_HINTS: dict[str, str] = {
    "estop.button": "the rig's own e-stop was pressed: make the rig safe, release the button, "
    "then reset",
    "loop.stall": _HOST_LOAD,
    "loop.overrun": _HOST_LOAD,
    "link.timeout": "no telemetry: a USB cable or adapter came loose, the rig reset, or " + _HOST_LOAD,
    "link.lost": "the port closed: check the USB cable and that no other program holds the port",
    "link.gaps": "frames lost on the wire: a poor cable or USB hub, or the baud rate too low for "
    "the sample rate",
    "link.crc": "frames garbled on the wire: a poor cable, electrical noise from the motor leads, "
    "or a baud-rate mismatch",
    "track.soft_limit": "the cart ran past its soft limit: check the set-point, the controller "
    "gains and cart_counts_per_m",
    "track.stopping_distance": "the cart was too fast for the room left: lower the swing-up "
    "aggression or the set-point steps, or check stop.decel_mps2 against the drive",
    "track.limit_switch": "a limit switch closed outside homing: the cart left the soft limits "
    "or the switch is wired or placed wrong",
    "track.end_stop": "the cart hit a hard end stop: check the homing result and the track "
    "length in the config",
    "cart.overspeed": "the cart ran faster than interlocks.max_cart_speed_mps: a disturbance, "
    "aggressive gains, or a wrong cart_counts_per_m",
    "pendulum.overspeed": "the pendulum spun too fast outside swing-up: a strike on the pole or "
    "a pendulum encoder fault",
    "drive.saturation": "the drive sat at its limit: the controller asks more than the drive "
    "gives (check drive.limit and the gains)",
    "drive.plausibility": "drive applied but the cart did not move: a stuck cart, a slipping "
    "belt, a motor not powered, or a dead cart encoder",
    "encoder.cart_glitch": "the cart's reading jumped further in one sample than the drive can move "
    "it: electrical noise on the encoder lines (screen them, route them away from the motor leads), "
    "a loose connector, or a counter that missed edges; re-home after reset",
    "encoder.pendulum_glitch": "the pendulum's reading jumped further in one sample than the "
    "pendulum can turn: noise on the encoder lines, a loose connector or a slipping shaft coupling; "
    "check the hanging angle reads 180 deg before swinging up again",
    "encoder.cart_dead": "the cart's reading stayed put while the drive must have moved the cart at "
    "least 1 mm: cart encoder unplugged, its belt or pulley slipping, or the cart jammed",
    "encoder.pendulum_dead": "the pendulum's reading stayed put while the cart's motion must have "
    "swung it: pendulum encoder unplugged or its shaft coupling slipping",
    "drive.supply": "the motor supply is outside its range: check the power supply and its "
    "cabling",
    "device.watchdog": "the rig cut its motor because commands stopped: the daemon was killed "
    "or blocked, or the link broke; reset once the cause is clear",
    "device.reset": "the rig's microcontroller has started since its faults were last cleared: "
    "when the daemon has just connected this is its power-up, and a reset takes the rig into "
    "use; while running, a brown-out (check the supply) or a firmware fault",
    "device.driver": "the motor driver reports a fault: over-current or over-temperature; let "
    "it cool and check the wiring",
    "stop.overdue": "the cart did not stop in time under the controlled stop: check the drive "
    "and stop.decel_mps2",
    "recording.failed": "the run store could not be written (disk full?): free space, then "
    "reset and start recording again",
    "homing_failed": "homing did not find the switches where the config says: read the "
    "reason's numbers and check track.length_m, track.switch_inset_m and cart_counts_per_m",
}


def fault_hint(name: str) -> str:
    """The hint for a fault name ('' if there is none)."""
    return FAULT_HINTS.get(name, "")
