"""The desk's limits (``[alerts]`` of the settings) applied to a valuation, and what expires soon.

Book limits apply to the book's total (and each currency's total when there are several),
per-underlying limits to each underlying: |Δ $|, |vega| per vol point and the worst cell of the
spot × vol grid. A limit of 0 is no limit. Breaches come back in words, for the app's header,
its Book rows and the Flags screen alike. The Flags screen also names the options expiring by
the end of the coming Sunday, with pin risk flagged (``scenario.apply_move`` rolled that far).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import numpy as np

from blotter import risk

if TYPE_CHECKING:
    from blotter.config import Alerts
    from blotter.scenario import ExpiringPosition, Ladder


def exposure_breach(
    alerts: Alerts, row: risk.ExposureRow, ladder_words: Mapping[str, str] | None = None
) -> str:
    """The limits ``row`` breaches, in words (empty when none).

    A total row (``key`` "total": the book, or one currency of it) is held to the book limits,
    an underlying's row to the per-underlying ones and its ladder breach from ``ladder_words``
    (underlying -> words); other rows have no limits.
    """
    if row.key == "total":
        delta_limit, vega_limit = alerts.delta_cash, alerts.vega_pt
    elif row.underlying is not None:
        delta_limit, vega_limit = alerts.underlying_delta_cash, alerts.underlying_vega_pt
    else:
        return ""
    words = []
    if delta_limit and abs(row.delta_cash) > delta_limit:
        words.append(f"|Δ $| over {delta_limit:,.0f}")
    if vega_limit and abs(row.vega_pt) > vega_limit:
        words.append(f"|vega| over {vega_limit:,.0f}")
    ladder = (ladder_words or {}).get(row.label) if row.key != "total" else None
    if ladder:
        words.append(ladder)
    return "; ".join(words)


@dataclass(frozen=True)
class LadderBreaches:
    """Worst ladder cells beyond their limits, in words: the book's, and each underlying's."""

    book: str = ""
    by_underlying: dict[str, str] = field(default_factory=dict)


def ladder_breaches(
    valuation: risk.BookValuation,
    grids: Sequence[Ladder],
    alerts: Alerts,
    spot_pcts: Sequence[float],
    vol_pts: Sequence[float],
    days: float = 0.0,
    cancelled: Callable[[], bool] = lambda: False,
) -> LadderBreaches | None:
    """The book's ladders (``grids``, one per currency) against the book's ladder limit, and each
    underlying's own ladder against the per-underlying one; None once ``cancelled()`` is true.

    An underlying's ladder values its positions alone (``risk.value_book`` on them, then
    ``scenario.ladder`` with the same shocks and ``days`` roll), one underlying at a time.
    """
    from blotter import scenario

    breached = []
    for grid in grids:
        worst = float(grid.full[grid.worst])
        if alerts.ladder_loss and -worst > alerts.ladder_loss:
            ccy = f" {grid.currency}" if len(grids) > 1 else ""
            breached.append(
                f"book{ccy} worst grid cell {worst:+,.0f} beyond −{alerts.ladder_loss:,.0f}"
            )
    by_underlying: dict[str, str] = {}
    if alerts.underlying_ladder_loss:
        book = valuation.book
        for j in np.unique(book.underlying_idx):
            if cancelled():
                return None
            rows = np.flatnonzero(book.underlying_idx == j)
            alone = risk.value_book(
                book.take(rows), valuation.market, valuation.valuation_time, tz=valuation.tz
            )
            g = scenario.ladder(alone, spot_pcts, vol_pts, days=days)
            w = float(g.full[g.worst])
            if -w > alerts.underlying_ladder_loss:
                by_underlying[book.underlyings.symbols[int(j)]] = (
                    f"worst grid cell {w:+,.0f} beyond −{alerts.underlying_ladder_loss:,.0f}"
                )
    return LadderBreaches("; ".join(breached), by_underlying)


def breaches(
    valuation: risk.BookValuation, alerts: Alerts, ladder: LadderBreaches | None = None
) -> list[str]:
    """Every limit breach in words: the book's (each currency's when there are several), the
    book's ladder, then each underlying's."""
    by_underlying = ladder.by_underlying if ladder is not None else {}
    out = []
    total = exposure_breach(alerts, risk.total(valuation))
    if total:
        out.append(f"book {total}")
    if len(valuation.currencies) > 1:
        for row in risk.currency_totals(valuation):
            words = exposure_breach(alerts, row)
            if words:
                out.append(f"book {row.currency} {words}")
    if ladder is not None and ladder.book:
        out.append(ladder.book)
    for row in risk.aggregate(valuation, by="underlying"):
        words = exposure_breach(alerts, row, by_underlying)
        if words:
            out.append(f"{row.label} {words}")
    return out


def days_to_week_end(now: datetime, tz: ZoneInfo) -> float:
    """Calendar days (fractional) from ``now`` to the end of the coming Sunday, desk time."""
    local = now.astimezone(tz)
    monday = datetime.combine(
        local.date() + timedelta(days=7 - local.weekday()), datetime.min.time(), tzinfo=tz
    )
    return (monday - local).total_seconds() / 86400.0


@dataclass(frozen=True)
class WeekExpiries:
    """The options expiring by the end of Sunday, ``days`` from the valuation time."""

    days: float
    expiring: tuple[ExpiringPosition, ...]

    @property
    def pin_risk(self) -> tuple[ExpiringPosition, ...]:
        """Those whose moved spot ends within ``scenario.PIN_BAND_PCT`` of the strike."""
        return tuple(e for e in self.expiring if e.pin_risk)


def week_expiries(valuation: risk.BookValuation, now: datetime, tz: ZoneInfo) -> WeekExpiries:
    """Roll the book to the end of Sunday (``scenario.apply_move``) and list what expires."""
    from blotter import scenario

    days = days_to_week_end(now, tz)
    move = scenario.Move(text=f"days {days:.2f}", days=days)
    result = scenario.apply_move(valuation, move)
    return WeekExpiries(days, tuple(result.expiring or ()))
