"""The dashboard's braille dot canvas: dot positions, lines, layers."""

from __future__ import annotations

import unicodedata

from daemon.ui.braille import BrailleCanvas


def plain(canvas: BrailleCanvas) -> list[str]:
    return ["".join(text for text, _style in row) for row in canvas.runs()]


def cell(canvas: BrailleCanvas, column: int = 0, row: int = 0) -> str:
    return plain(canvas)[row][column]


def test_each_dot_of_a_cell_is_the_braille_dot_the_unicode_standard_numbers_it():
    # The Unicode Standard, Braille Patterns block U+2800-U+28FF: dots 1,2,3,7 run down the
    # left column and 4,5,6,8 down the right; the character names list the raised dots.
    expected = {
        (0, 0): "BRAILLE PATTERN DOTS-1",
        (0, 1): "BRAILLE PATTERN DOTS-2",
        (0, 2): "BRAILLE PATTERN DOTS-3",
        (0, 3): "BRAILLE PATTERN DOTS-7",
        (1, 0): "BRAILLE PATTERN DOTS-4",
        (1, 1): "BRAILLE PATTERN DOTS-5",
        (1, 2): "BRAILLE PATTERN DOTS-6",
        (1, 3): "BRAILLE PATTERN DOTS-8",
    }
    for (x, y), name in expected.items():
        canvas = BrailleCanvas(1, 1)
        canvas.dot(canvas.layer("white"), x, y)
        assert unicodedata.name(cell(canvas)) == name


def test_a_full_cell_is_all_eight_dots_and_an_empty_one_is_a_space():
    canvas = BrailleCanvas(2, 1)
    layer = canvas.layer("white")
    for x in range(2):
        for y in range(4):
            canvas.dot(layer, x, y)
    assert unicodedata.name(cell(canvas, 0)) == "BRAILLE PATTERN DOTS-12345678"
    assert cell(canvas, 1) == " "


def test_a_vertical_line_fills_the_left_column_of_every_cell_it_crosses():
    canvas = BrailleCanvas(1, 2)
    canvas.line(canvas.layer("white"), 0, 0, 0, 7)
    names = [unicodedata.name(cell(canvas, 0, row)) for row in range(2)]
    assert names == ["BRAILLE PATTERN DOTS-1237", "BRAILLE PATTERN DOTS-1237"]


def test_dots_outside_the_canvas_are_dropped():
    canvas = BrailleCanvas(1, 1)
    layer = canvas.layer("white")
    canvas.line(layer, -5, -5, -1, -1)
    canvas.dot(layer, 2, 0)
    assert plain(canvas) == [" "]


def test_layers_sharing_a_cell_merge_their_dots_and_the_later_layer_sets_the_style():
    canvas = BrailleCanvas(1, 1)
    canvas.dot(canvas.layer("red"), 0, 0)
    canvas.dot(canvas.layer("green"), 1, 3)
    assert canvas.runs() == [[(chr(0x2800 + 0x01 + 0x80), "green")]]
    assert unicodedata.name(plain(canvas)[0]) == "BRAILLE PATTERN DOTS-18"
