"""The daemon's control API: a local Unix socket speaking JSON lines.

The commands and their argument checks are in :mod:`daemon.operator_commands`.

- :mod:`daemon.api.wire` — request parsing and line encoding;
- :mod:`daemon.api.server` — :class:`~daemon.api.server.ApiServer`, serving a supervisor;
- :mod:`daemon.api.client` — :class:`~daemon.api.client.ApiClient`, used by the CLI and the dashboard.
"""
