"""The Reval pane: the book's (or one row's) P&L by full revaluation beside its greeks' estimate.

Across spot (or over days forward), each full curve has its estimate drawn dotted beside it and
the cells between the two shaded: that gap is the estimate's error. A greek (Δ $, Γ 1%, vega,
θ day) is drawn the same way without an estimate. Curves are named by the date they are valued
on. The chart is ``chart.draw``'s braille in the app theme's colours; the numbers come from the
app's profile worker, which asks ``blotter.scenario`` for them.
"""

from __future__ import annotations

from rich.console import RenderableType
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widget import Widget

from blotter.ui.data import ProfileData
from blotter.ui.widgets.chart import DASHED, DOTTED, SOLID, SPARSE, Line, draw

PATTERNS = {
    ("full", False): SOLID,
    ("estimate", False): DOTTED,
    ("full", True): DASHED,
    ("estimate", True): SPARSE,
}
"""Dash pattern by (kind, after the day roll), so curves differ without colour."""

COLOURS = {
    ("full", False): "text-primary",
    ("estimate", False): "text-warning",
    ("full", True): "text-success",
    ("estimate", True): "text-error",
}
"""Theme colour by (kind, after the day roll): the theme's text shades, legible on its ground."""


class RevalChart(Widget):
    """The chart, drawn to the widget's size whenever it is painted."""

    def __init__(self) -> None:
        super().__init__(id="reval-chart")
        self.profile: ProfileData | None = None

    def render(self) -> RenderableType:
        profile = self.profile
        if profile is None:
            return Text("waiting for the book…")
        theme = self.app.get_css_variables()
        lines = []
        for name, ys in profile.series.items():
            kind = profile.kinds.get(name, ("full", False))
            group, short = profile.legend.get(name, ("", name))
            lines.append(Line(short, ys, theme.get(COLOURS[kind], ""), PATTERNS[kind], group))
        names = list(profile.series)
        first = [profile.kinds.get(n, ("full", False)) for n in names]
        gap = None
        if ("full", False) in first and ("estimate", False) in first and len(names) <= 4:
            gap = (first.index(("full", False)), first.index(("estimate", False)))
        return draw(
            profile.xs,
            lines,
            self.size.width,
            self.size.height,
            y_unit=profile.y_label,
            x_tick=_spot_tick if profile.axis == "spot" else _day_tick,
            gap=gap,
            gap_name="gap: the estimate's error",
            note=profile.note,
            gap_style=theme.get("text-error", ""),
            axis_style="dim",
        )


def _spot_tick(x: float) -> str:
    return f"{x:+g}%" if x else "0%"


def _day_tick(x: float) -> str:
    return f"+{x:g}d" if x else "0d"


class RevalPane(Vertical):
    """Title line and the chart."""

    def __init__(self) -> None:
        super().__init__(id="reval-pane", classes="pane")
        self.border_title = "Reval"
        self.profile: ProfileData | None = None

    def compose(self) -> ComposeResult:
        yield RevalChart()

    def show(self, profile: ProfileData, as_of: str = "") -> None:
        """Draw ``profile``; ``as_of`` says when the store was read for it (after the pane's
        name in the title); the note on how vols move ends the chart's legend, so an 80-column title
        keeps its words."""
        self.profile = profile
        chart = self.query_one(RevalChart)
        chart.profile = profile
        chart.refresh()
        title = profile.title.replace("Reval:", f"Reval {as_of}:", 1) if as_of else profile.title
        self.border_title = title
