"""The clauses of PROTOCOL.md a host can observe, and the report of one conformance run.

Each clause collects facts (what was measured) and failures; it passes when it has facts and
no failure, fails on any failure, and is skipped only when the device's state made it
impossible to check, or because the run was abandoned after a clause failed (the reason is
printed). A clause left unchecked for no reason fails.
"""

from __future__ import annotations

from dataclasses import dataclass, field

# (key, section, short name), in the order the report prints them
CLAUSES: tuple[tuple[str, str, str], ...] = (
    ("hello_seq", "6", "DeviceHello seq"),
    ("version", "10.3", "version"),
    ("capabilities", "10.7", "capabilities"),
    ("rejected_frames", "3", "bad frames ignored"),
    ("resync", "2", "resynchronisation"),
    ("unknown_type", "7", "unknown type"),
    ("bad_payload", "7", "wrong length"),
    ("arm_unconfigured", "9.2", "Arm while unconfigured"),
    ("configure_range", "6", "Configure out of range"),
    ("configure", "6", "Configure accepted"),
    ("telemetry_seq", "5", "telemetry seq"),
    ("rate", "8.1", "telemetry rate"),
    ("jitter", "8.5", "jitter"),
    ("device_clock", "8.1", "device clock"),
    ("disarmed_zero", "9.2", "disarmed drive is zero"),
    ("arm_faulted", "9.2", "Arm while faulted"),
    ("arm", "9.2", "Arm"),
    ("clamp", "6", "Drive clamp"),
    ("late", "8.2", "late commands"),
    ("heartbeat", "9.1", "Heartbeat feeds watchdog"),
    ("watchdog", "9.1", "watchdog"),
    ("fault_latch", "9.4", "fault latching"),
    ("disarm", "9.2", "disarm"),
    ("stop", "6", "Stop"),
    ("seq_counters", "5", "device seq counters"),
    ("reconfigure", "8.1", "Configure restarts stream"),
)
SECTIONS = {key: (section, name) for key, section, name in CLAUSES}


@dataclass
class Finding:
    facts: list[str] = field(default_factory=list)
    failures: list[str] = field(default_factory=list)
    skipped: str | None = None


@dataclass(frozen=True)
class Outcome:
    key: str
    verdict: str  # PASS, FAIL or SKIP
    line: str


class Report:
    """Findings by clause; :meth:`outcomes` turns them into one printed line each."""

    def __init__(self) -> None:
        self.findings = {key: Finding() for key, _section, _name in CLAUSES}
        self.not_run: str | None = None  # why the rest of the run was abandoned

    def fact(self, key: str, text: str) -> None:
        self.findings[key].facts.append(text)

    def fail(self, key: str, text: str) -> None:
        self.findings[key].failures.append(text)

    def check(self, key: str, ok: bool, text: str) -> bool:
        """Record ``text`` as a fact if ``ok``, else as a failure; returns ``ok``."""
        (self.fact if ok else self.fail)(key, text)
        return ok

    def skip(self, key: str, reason: str) -> None:
        self.findings[key].skipped = reason

    def outcomes(self) -> list[Outcome]:
        result = []
        for key, section, name in CLAUSES:
            finding = self.findings[key]
            if finding.failures:
                verdict, text = "FAIL", "; ".join(finding.failures)
            elif finding.facts:
                verdict, text = "PASS", "; ".join(finding.facts)
            elif finding.skipped is not None:
                verdict, text = "SKIP", finding.skipped
            elif self.not_run is not None:
                verdict, text = "SKIP", f"not run: {self.not_run}"
            else:
                verdict, text = "FAIL", "not checked"
            result.append(Outcome(key, verdict, f"{verdict} §{section} {name}: {text}"))
        return result

    def passed(self) -> bool:
        return all(outcome.verdict != "FAIL" for outcome in self.outcomes())
