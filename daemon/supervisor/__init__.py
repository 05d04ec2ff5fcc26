"""The supervisor: state machine, interlocks, pre-arm checks and stops of one rig (no I/O)."""

from daemon.operator_commands import Command
from daemon.supervisor.decision import Decision, Output, Transition
from daemon.supervisor.interlocks import (
    Action,
    Checks,
    InterlockLimits,
    LinkErrorMonitor,
    SampleInterlocks,
    Trip,
    link_timeout_trip,
    stopping_distance_m,
)
from daemon.supervisor.machine import Fault, LogEntry, StateMachine
from daemon.supervisor.prechecks import CheckFailure, Health, prearm_failures
from daemon.supervisor.states import TRANSITIONS, Event, State, state_code_table
from daemon.supervisor.stop_ramp import StopRamp
from daemon.supervisor.supervisor import CHECKS_BY_STATE, Supervisor

__all__ = [
    "CHECKS_BY_STATE",
    "TRANSITIONS",
    "Action",
    "CheckFailure",
    "Checks",
    "Command",
    "Decision",
    "Event",
    "Fault",
    "Health",
    "InterlockLimits",
    "LinkErrorMonitor",
    "LogEntry",
    "Output",
    "SampleInterlocks",
    "State",
    "StateMachine",
    "StopRamp",
    "Supervisor",
    "Transition",
    "Trip",
    "link_timeout_trip",
    "prearm_failures",
    "state_code_table",
    "stopping_distance_m",
]
