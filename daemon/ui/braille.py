"""A dot canvas drawn with Unicode braille cells (2 dots wide, 4 dots tall per character).

Each layer is a set of dots with one style; when layers share a cell their dots
are merged and the cell takes the style of the layer listed last. Dot (0, 0) is
the top-left corner; x grows to the right and y grows downward.
"""

from __future__ import annotations

from rich.style import Style

Run = tuple[str, "Style | str | None"]  # characters and their style

BRAILLE_BASE = 0x2800
# Bit of each dot within a braille cell, indexed [row][column]: dots 1-2-3-7 down the
# left column and 4-5-6-8 down the right (Unicode Standard, "Braille Patterns" block U+2800-U+28FF).
DOT_BITS = ((0x01, 0x08), (0x02, 0x10), (0x04, 0x20), (0x40, 0x80))


class BrailleCanvas:
    """``columns`` x ``rows`` character cells, i.e. ``2*columns`` x ``4*rows`` dots."""

    def __init__(self, columns: int, rows: int):
        self.columns = max(columns, 1)
        self.rows = max(rows, 1)
        self.width = 2 * self.columns
        self.height = 4 * self.rows
        self._layers: list[tuple[Style | str, dict[tuple[int, int], int]]] = []

    def layer(self, style: Style | str) -> int:
        """Start a new layer drawn above the previous ones; returns its index."""
        self._layers.append((style, {}))
        return len(self._layers) - 1

    def dot(self, layer: int, x: float, y: float) -> None:
        """Set the dot nearest (x, y); dots outside the canvas are ignored."""
        column, row = round(x), round(y)
        if not (0 <= column < self.width and 0 <= row < self.height):
            return
        cells = self._layers[layer][1]
        key = (column // 2, row // 4)
        cells[key] = cells.get(key, 0) | DOT_BITS[row % 4][column % 2]

    def line(self, layer: int, x0: float, y0: float, x1: float, y1: float) -> None:
        """A straight line of dots from (x0, y0) to (x1, y1), both ends included."""
        steps = max(round(abs(x1 - x0)), round(abs(y1 - y0)), 1)
        for step in range(steps + 1):
            fraction = step / steps
            self.dot(layer, x0 + (x1 - x0) * fraction, y0 + (y1 - y0) * fraction)

    def rectangle(self, layer: int, x0: float, y0: float, x1: float, y1: float) -> None:
        """The outline of the rectangle with corners (x0, y0) and (x1, y1)."""
        self.line(layer, x0, y0, x1, y0)
        self.line(layer, x1, y0, x1, y1)
        self.line(layer, x1, y1, x0, y1)
        self.line(layer, x0, y1, x0, y0)

    def runs(self) -> list[list[Run]]:
        """The canvas row by row, each row as runs of (characters, style), ``columns`` in all.

        Blank cells are spaces with no style of their own.
        """
        bits: dict[tuple[int, int], int] = {}
        styles: dict[tuple[int, int], Style | str] = {}
        for style, cells in self._layers:
            for key, cell_bits in cells.items():
                bits[key] = bits.get(key, 0) | cell_bits
                styles[key] = style
        rows: list[list[Run]] = []
        for row in range(self.rows):
            runs: list[Run] = []
            run: list[str] = []
            run_style: Style | str | None = None
            for column in range(self.columns):
                key = (column, row)
                style = styles.get(key)
                if style != run_style and run:
                    runs.append(("".join(run), run_style))
                    run = []
                run_style = style
                run.append(chr(BRAILLE_BASE + bits[key]) if key in bits else " ")
            runs.append(("".join(run), run_style))
            rows.append(runs)
        return rows
