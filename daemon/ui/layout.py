"""Which layout the dashboard uses at which terminal size: full, compact, or "enlarge the terminal".

Textual sets one class from each list of breakpoints on the screen as the
terminal is resized (App.HORIZONTAL_BREAKPOINTS / VERTICAL_BREAKPOINTS), and
dash.tcss picks the layout from them:

- full (``-wide`` and ``-tall``): every panel;
- compact (``-narrow`` or ``-short``): the state, the live values, an
  interlock summary, the rig drawing, the caution and the key bar;
- too small (``-too-narrow`` or ``-too-short``): only a notice asking for a
  larger terminal. The e-stop key works as everywhere; keys that would ask a
  question first (the commands that start motion) are not sent, since the
  question could not be shown properly.
"""

from __future__ import annotations

from textual.geometry import Size

FULL_COLUMNS, FULL_ROWS = 120, 40
MIN_COLUMNS, MIN_ROWS = 70, 22

HORIZONTAL_BREAKPOINTS = [(0, "-too-narrow"), (MIN_COLUMNS, "-narrow"), (FULL_COLUMNS, "-wide")]
VERTICAL_BREAKPOINTS = [(0, "-too-short"), (MIN_ROWS, "-short"), (FULL_ROWS, "-tall")]


def too_small(size: Size) -> bool:
    """Whether a terminal of ``size`` is below the compact layout's minimum."""
    return size.width < MIN_COLUMNS or size.height < MIN_ROWS


def enlarge_request(size: Size) -> str:
    return (
        f"Enlarge the terminal to at least {MIN_COLUMNS}×{MIN_ROWS} "
        f"(it is {size.width}×{size.height})."
    )
