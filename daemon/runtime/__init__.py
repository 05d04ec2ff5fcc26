"""The running daemon: the control cycle, its watchdog, the service around them, sessions.

- :mod:`.cycle` — the per-sample reader callback (read, decode, estimate, control,
  interlocks, encode, write) and the mode switches between samples;
- :mod:`.watchdog` — the asyncio task that stops the rig when telemetry stops;
- :mod:`.service` — :class:`PoiseService`, owner of port, link, supervisor,
  recorder, control API and signal handlers;
- :mod:`.session` — one unattended home/arm/swing-up/balance/stop session;
- :mod:`.embedded_sim` — the built-in simulated rig on a pty.
"""
