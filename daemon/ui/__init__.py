"""The terminal dashboard (`poise dash`): a Textual client of the daemon's control API.

- :mod:`daemon.ui.app` — :class:`~daemon.ui.app.PoiseDash`, the screen and its keys;
- :mod:`daemon.ui.connection` — keeps one API connection alive, reconnecting with backoff;
- :mod:`daemon.ui.braille` — a dot canvas drawn with Unicode braille cells;
- :mod:`daemon.ui.widgets` — one widget per piece of the screen;
- :mod:`daemon.ui.confirm`, :mod:`daemon.ui.safety` — the modal screens in front of motion.

The dashboard never talks to the rig: everything it shows comes from the
daemon's status stream, and everything it does is a control API command.
"""
