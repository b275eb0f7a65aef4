"""A small line chart in Unicode braille, drawn as Rich text for the Reval pane.

Each character cell holds 2 × 4 braille dots, so a curve has twice the columns and four times the
rows of the cells it spans. Curves differ by dash pattern as well as by colour, so the chart reads
with NO_COLOR; the cells between a full curve and its estimate can be shaded to show the gap.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from rich.text import Text

BRAILLE = 0x2800
"""The blank braille character; dots are bits added to it."""

DOTS = ((0x01, 0x08), (0x02, 0x10), (0x04, 0x20), (0x40, 0x80))
"""The bit of each dot of a braille cell, by dot row (top first) and dot column."""

SOLID: tuple[int, ...] = (1,)
DOTTED: tuple[int, ...] = (1, 0)
DASHED: tuple[int, ...] = (1, 1, 1, 0, 0, 0)
SPARSE: tuple[int, ...] = (1, 0, 0, 0)
"""Dash patterns along the dot columns: 1 draws the column, 0 leaves it blank."""

GAP = "·"
"""Fills the cells between a full curve and its estimate."""


@dataclass(frozen=True)
class Line:
    """One curve: ``ys`` at the chart's xs (NaN leaves a hole), its colour and dash pattern;
    the legend writes ``group`` (a date, say) once before the names of its curves."""

    name: str
    ys: Sequence[float]
    style: str
    pattern: tuple[int, ...] = SOLID
    group: str = ""


def nice_ticks(lo: float, hi: float, most: int) -> list[float]:
    """Round values (1, 2 or 5 × a power of ten apart) from ``lo`` to ``hi``, at most ``most``."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo or most < 2:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / (most - 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = math.ceil(lo / step - 1e-9)
    ticks = [(first + k) * step for k in range(most + 1)]
    return [0.0 if abs(t) < step * 1e-9 else t for t in ticks if t <= hi + step * 1e-9]


def sample(pattern: tuple[int, ...], width: int = 3) -> str:
    """A flat piece of a curve with this dash pattern, ``width`` cells long, for a legend."""
    out = []
    for c in range(width):
        bits = sum(DOTS[1][k] for k in (0, 1) if pattern[(2 * c + k) % len(pattern)])
        out.append(chr(BRAILLE + bits))
    return "".join(out)


def _rows_of(ys: Sequence[float], xs_px: list[float], n_px: int) -> list[float]:
    """The curve's y at each dot column, by straight lines between its points (NaN outside)."""
    out = [math.nan] * n_px
    for a in range(len(ys) - 1):
        y0, y1 = ys[a], ys[a + 1]
        if not (math.isfinite(y0) and math.isfinite(y1)):
            continue
        x0, x1 = xs_px[a], xs_px[a + 1]
        for col in range(max(0, math.ceil(x0)), min(n_px - 1, math.floor(x1)) + 1):
            share = 0.0 if x1 == x0 else (col - x0) / (x1 - x0)
            out[col] = y0 + (y1 - y0) * share
    if len(ys) == 1 and math.isfinite(ys[0]):
        out[0] = ys[0]
    return out


def draw(
    xs: Sequence[float],
    lines: Sequence[Line],
    width: int,
    height: int,
    *,
    y_unit: str,
    x_tick: Callable[[float], str],
    gap: tuple[int, int] | None = None,
    gap_name: str = "gap",
    gap_style: str = "",
    axis_style: str = "",
    note: str = "",
) -> Text:
    """The chart of ``lines`` over ``xs`` in ``width`` × ``height`` cells: the y unit on top, y
    ticks on the left, x ticks (written by ``x_tick``) and a legend below; ``gap`` names two lines
    whose space between is shaded, named ``gap_name`` in the legend; ``note`` ends the legend."""
    legend: list[tuple[str, str, str]] = []
    for k, ln in enumerate(lines):
        if ln.group and (k == 0 or lines[k - 1].group != ln.group):
            legend.append(("", ln.group + ":", ""))
        legend.append((sample(ln.pattern, 2), ln.name, ln.style))
    if gap is not None:
        legend.append((GAP * 2, gap_name, gap_style))
    if note:
        legend.append(("", note, ""))
    legend_rows = _legend_rows(legend, width)
    plot_h = height - 3 - len(legend_rows)
    finite = [y for ln in lines for y in ln.ys if math.isfinite(y)]
    if plot_h < 3 or width < 24 or not finite or len(xs) < 2:
        return Text("too small for the chart" if finite else "no curve to draw", style=axis_style)
    lo, hi = min(finite), max(finite)
    if hi - lo < 1e-9 * max(1.0, abs(hi)):
        lo, hi = lo - 1.0, hi + 1.0
    pad = (hi - lo) * 0.05
    lo, hi = lo - pad, hi + pad
    y_ticks = nice_ticks(lo, hi, max(2, plot_h // 2 + 1))
    labels = [_short(t) for t in y_ticks]
    left = max(len(s) for s in labels) + 1
    plot_w = width - left
    n_px, n_py = plot_w * 2, plot_h * 4
    x_lo, x_hi = float(xs[0]), float(xs[-1])
    span = (x_hi - x_lo) or 1.0
    xs_px = [(float(x) - x_lo) / span * (n_px - 1) for x in xs]

    def py(y: float) -> int:
        return round((hi - y) / (hi - lo) * (n_py - 1))

    bits = [[0] * plot_w for _ in range(plot_h)]
    owner: list[list[str]] = [[""] * plot_w for _ in range(plot_h)]
    rows_px: list[list[float]] = []
    for ln in lines:
        ys_px = _rows_of(ln.ys, xs_px, n_px)
        rows_px.append(ys_px)
        prev: int | None = None
        for col, y in enumerate(ys_px):
            if not math.isfinite(y):
                prev = None
                continue
            row = py(y)
            span_rows = range(min(row, prev), max(row, prev) + 1) if prev is not None else [row]
            prev = row
            if not ln.pattern[col % len(ln.pattern)]:
                continue
            for r in span_rows:
                bits[r // 4][col // 2] |= DOTS[r % 4][col % 2]
                owner[r // 4][col // 2] = ln.style
    fill: set[tuple[int, int]] = set()
    if gap is not None:
        for c in range(plot_w):
            a, b = rows_px[gap[0]][2 * c], rows_px[gap[1]][2 * c]
            if math.isfinite(a) and math.isfinite(b):
                top, bottom = sorted((py(a) // 4, py(b) // 4))
                fill.update((r, c) for r in range(top + 1, bottom))
    zero = py(0.0) // 4 if lo < 0.0 < hi else None
    tick_rows = {py(t) // 4: s for t, s in zip(y_ticks, labels, strict=True)}

    out = Text(no_wrap=True, overflow="crop")
    out.append(y_unit[:width] + "\n", style=axis_style)
    for r in range(plot_h):
        label = tick_rows.get(r)
        out.append((label or "").rjust(left - 1), style=axis_style)
        out.append("┤" if label is not None else "│", style=axis_style)
        for c in range(plot_w):
            if bits[r][c]:
                out.append(chr(BRAILLE + bits[r][c]), style=owner[r][c])
            elif (r, c) in fill:
                out.append(GAP, style=gap_style)
            elif r == zero:
                out.append("┄", style=axis_style)
            else:
                out.append(" ")
        out.append("\n")
    out.append(" " * (left - 1) + "└", style=axis_style)
    x_ticks = nice_ticks(x_lo, x_hi, max(2, plot_w // 10))
    cols = {round((t - x_lo) / span * (plot_w - 1)): x_tick(t) for t in x_ticks}
    out.append("".join("┬" if c in cols else "─" for c in range(plot_w)) + "\n", style=axis_style)
    tick_line = [" "] * width
    for c, s in sorted(cols.items()):
        start = min(max(0, left + c - len(s) // 2), width - len(s))
        if all(ch == " " for ch in tick_line[max(0, start - 1) : start + len(s) + 1]):
            tick_line[start : start + len(s)] = s
    out.append("".join(tick_line).rstrip(), style=axis_style)
    for entries in legend_rows:
        out.append("\n")
        for k, (mark, name, style) in enumerate(entries):
            out.append(("  " if k and not mark else " " if k else "") + mark, style=style)
            out.append((" " if mark else "") + name)
    return out


def _legend_rows(
    entries: list[tuple[str, str, str]], width: int
) -> list[list[tuple[str, str, str]]]:
    """The legend's entries packed into rows of at most ``width`` cells."""
    rows: list[list[tuple[str, str, str]]] = [[]]
    used = 0
    for mark, name, style in entries:
        sep = (2 if not mark else 1) if rows[-1] else 0
        size = len(mark) + (1 if mark else 0) + len(name) + sep
        if rows[-1] and used + size > width:
            rows.append([])
            used, size = 0, size - sep
        rows[-1].append((mark, name, style))
        used += size
    return rows if rows[0] else []


def _short(y: float) -> str:
    """A tick value in few characters: thousands as k, millions as M."""
    for scale, suffix in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if abs(y) >= scale:
            return f"{y / scale:+.4g}{suffix}"
    return f"{y:+.4g}" if y else "0"
