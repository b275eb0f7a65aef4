"""The Reval pane's braille chart: where the dots land, the ticks, the gap and the legend."""

from __future__ import annotations

from blotter.ui.widgets.chart import (
    BRAILLE,
    DOTTED,
    GAP,
    SOLID,
    Line,
    draw,
    nice_ticks,
    sample,
)


def _plot_rows(text: str) -> list[str]:
    """The plot area's rows: the lines between the unit line and the x axis, after the axis."""
    lines = text.splitlines()
    end = next(i for i, line in enumerate(lines) if "└" in line)
    return [line.split("┤" if "┤" in line else "│", 1)[1] for line in lines[1:end]]


def test_nice_ticks_are_round_and_within_the_range() -> None:
    assert nice_ticks(-15.0, 15.0, 7) == [-15.0, -10.0, -5.0, 0.0, 5.0, 10.0, 15.0]
    assert nice_ticks(-523_000.0, 41_000.0, 4) == [-400_000.0, -200_000.0, 0.0]
    assert nice_ticks(0.0, 1.0, 1) == [0.0]


def test_a_rising_line_runs_from_bottom_left_to_top_right() -> None:
    xs = [0.0, 10.0]
    text = draw(xs, [Line("up", [0.0, 10.0], "")], 40, 10, y_unit="P&L (USD)", x_tick=str).plain
    assert text.splitlines()[0] == "P&L (USD)"
    rows = _plot_rows(text)
    dotted = [[c for c, ch in enumerate(row) if ord(ch) > BRAILLE] for row in rows]
    assert all(dotted), "every row of a line across the whole range has dots"
    starts = [cols[0] for cols in dotted]
    assert starts == sorted(starts, reverse=True)  # higher rows hold later columns
    assert rows[0].rstrip()[-1] != " " and rows[-1][0] != " "


def test_the_gap_between_two_lines_is_shaded_and_named() -> None:
    xs = [0.0, 1.0, 2.0]
    lines = [Line("full", [0.0, -5.0, -20.0], ""), Line("estimate", [0.0, -5.0, 0.0], "", DOTTED)]
    text = draw(
        xs, lines, 40, 14, y_unit="P&L", x_tick=str, gap=(0, 1), gap_name="gap = error"
    ).plain
    rows = _plot_rows(text)
    right = [row[30:] for row in rows]
    assert any(GAP in r for r in right), "cells between the curves where they part are shaded"
    assert not any(GAP in row[:5] for row in rows), "no shade where the curves meet"
    legend = text.splitlines()[-1]
    assert f"{sample(SOLID, 2)} full" in legend and f"{sample(DOTTED, 2)} estimate" in legend
    assert "gap = error" in legend


def test_the_legend_writes_each_date_once() -> None:
    xs = [0.0, 1.0]
    lines = [
        Line("full", [0.0, 1.0], "", SOLID, "2026-12-03"),
        Line("estimate", [0.0, 2.0], "", DOTTED, "2026-12-03"),
    ]
    legend = draw(xs, lines, 60, 10, y_unit="P&L", x_tick=str).plain.splitlines()[-1]
    assert legend.count("2026-12-03") == 1 and legend.startswith("2026-12-03:")


def test_too_small_or_empty_says_so() -> None:
    assert draw([0.0, 1.0], [Line("a", [1.0, 2.0], "")], 10, 3, y_unit="", x_tick=str).plain == (
        "too small for the chart"
    )
    nan = float("nan")
    empty = draw([0.0, 1.0], [Line("a", [nan, nan], "")], 40, 10, y_unit="", x_tick=str)
    assert empty.plain == "no curve to draw"
