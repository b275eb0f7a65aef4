"""The ``theme`` setting (light and dark) and NO_COLOR: each theme is applied, and with NO_COLOR
the app runs and shows its text with no colour at all (greys only)."""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

import pytest

from blotter.ui.app import make_app

from .conftest import TEST_SETTINGS, frozen_clock, settle


def _luminance(colour: object) -> float:
    r, g, b = colour.rgb  # type: ignore[attr-defined]
    return (0.2126 * r + 0.7152 * g + 0.0722 * b) / 255


@pytest.mark.parametrize("theme,dark", [("dark", True), ("light", False)])
async def test_each_theme_is_applied(demo_db: Path, theme: str, dark: bool) -> None:
    app = make_app(demo_db, replace(TEST_SETTINGS, theme=theme), clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.current_theme.dark is dark
        ground = _luminance(app.screen.styles.background)
        ink = _luminance(app.query_one("#book-table").styles.color)
        assert (ground < 0.5) is dark and (ink > 0.5) is dark, (ground, ink)


async def test_no_color_runs_and_shows_text_in_greys_only(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("NO_COLOR", "1")
    for theme in ("dark", "light"):
        app = make_app(demo_db, replace(TEST_SETTINGS, theme=theme), clock=frozen_clock)
        async with app.run_test(size=(200, 50)) as pilot:
            await settle(app, pilot)
            assert app.no_color
            svg = app.export_screenshot()
        text = svg.replace("&#160;", " ").replace("&amp;", "&")
        grid, reval = "Grid 10:00:00: full revaluation P&L", "Reval 10:00:00: P&L"
        for words in ("DEMOA", "Book by underlying", grid, reval):
            assert words in text, (theme, words)
        colours = set(re.findall(r"(?:fill|color):\s*#([0-9a-fA-F]{6})", svg))
        assert colours, "the screenshot names its colours"
        # c5c8c6 is the SVG export's own default ink for unstyled text, not a colour of the app.
        hues = {c for c in colours - {"c5c8c6"} if len({c[0:2], c[2:4], c[4:6]}) > 1}
        assert not hues, (theme, sorted(hues)[:5])
