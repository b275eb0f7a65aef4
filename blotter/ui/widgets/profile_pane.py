"""The Profile pane: curves of the book's (or one row's) P&L or a greek against spot or days.

Drawn by plotext through textual-plotext. Each series has its own marker character as well as
its own colour, so the chart reads in monochrome; the numbers come from the app's profile worker,
which asks ``blotter.scenario`` and ``blotter.risk`` for them.
"""

from __future__ import annotations

import math

from textual.app import ComposeResult
from textual.containers import Vertical
from textual_plotext import PlotextPlot

from blotter.ui.data import ProfileData

MARKERS = ("•", "+", "x", "o")
"""Marker per series, in order, so series differ without colour."""


class ProfilePane(Vertical):
    """Title line and the chart."""

    def __init__(self) -> None:
        super().__init__(id="profile-pane", classes="pane")
        self.border_title = "Profile"
        self.profile: ProfileData | None = None

    def compose(self) -> ComposeResult:
        yield PlotextPlot(id="profile-plot")

    def show(self, profile: ProfileData) -> None:
        """Draw ``profile``."""
        self.profile = profile
        plot = self.query_one(PlotextPlot)
        plt = plot.plt
        plt.clear_figure()
        plt.xlabel(profile.x_label)
        peak = max(
            (abs(y) for ys in profile.series.values() for y in ys if math.isfinite(y)), default=0.0
        )
        scale, suffix = (
            (1e6, " millions") if peak >= 1e7 else (1e3, " thousands") if peak >= 1e4 else (1.0, "")
        )
        for i, (name, ys) in enumerate(profile.series.items()):
            xs = [x for x, y in zip(profile.xs, ys, strict=True) if math.isfinite(y)]
            clean = [y / scale for y in ys if math.isfinite(y)]
            if xs:
                plt.plot(
                    xs,
                    clean,
                    marker=MARKERS[i % len(MARKERS)],
                    label=f"{MARKERS[i % len(MARKERS)]} {name}",
                )
        plt.ylabel(profile.y_label + suffix)
        plot.refresh()
        self.border_title = profile.title + (f" ─ {profile.note}" if profile.note else "")
