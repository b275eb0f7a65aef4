"""Positions as a struct of arrays: one row per contract with a non-zero net quantity.

Built once from the store (``store.load_book``) and rebuilt only when trades change. Nothing here
knows about SQL or terminals; the risk layer turns a ``Book`` plus a ``Market`` into engine inputs.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

from blotter.arrays import read_only as read_only
from blotter.calendar import DEFAULT_EXCHANGE_TZ, local_dates
from blotter.limits import UNDERLYING_KINDS as UNDERLYING_KINDS
from blotter.ticks import default_tick


@dataclass(frozen=True, eq=False)
class Underlyings:
    """Static facts about each underlying, index i = underlying index used by positions."""

    symbols: tuple[str, ...]
    kinds: tuple[str, ...]            # one of UNDERLYING_KINDS
    currencies: tuple[str, ...]       # ISO 4217 code of the instrument currency
    betas: np.ndarray                 # beta to the book's reference index, shape (n_u,)
    div_yields: np.ndarray            # default dividend yield (stock, index) or foreign rate (fx)
    calendars: tuple[str, ...]        # exchange holiday calendar name, e.g. "NYSE"
    descriptions: tuple[str, ...] = ()
    ticks: tuple[float, ...] = ()     # price tick; empty: each kind's default (``ticks``)

    def __post_init__(self) -> None:
        n = len(self.symbols)
        for name in ("kinds", "currencies", "calendars"):
            if len(getattr(self, name)) != n:
                got = len(getattr(self, name))
                raise ValueError(f"Underlyings.{name} has {got} entries, expected {n}")
        object.__setattr__(self, "betas", read_only(np.asarray(self.betas, dtype=np.float64)))
        divs = read_only(np.asarray(self.div_yields, dtype=np.float64))
        object.__setattr__(self, "div_yields", divs)
        if self.betas.shape != (n,) or self.div_yields.shape != (n,):
            raise ValueError("Underlyings.betas and div_yields must have one entry per symbol")
        if not self.descriptions:
            object.__setattr__(self, "descriptions", ("",) * n)
        if not self.ticks:
            object.__setattr__(self, "ticks", tuple(default_tick(k) for k in self.kinds))
        elif len(self.ticks) != n:
            raise ValueError(f"Underlyings.ticks has {len(self.ticks)} entries, expected {n}")

    def tick_of(self, symbol: str) -> float:
        """The price tick of ``symbol`` (its kind's default for a symbol not here)."""
        try:
            return self.ticks[self.symbols.index(symbol)]
        except ValueError:
            return default_tick("")

    def index_of(self, symbol: str) -> int:
        """Position of ``symbol`` (case-sensitive); KeyError naming it when unknown."""
        try:
            return self.symbols.index(symbol)
        except ValueError:
            raise KeyError(f"unknown underlying {symbol!r}") from None

    def __len__(self) -> int:
        return len(self.symbols)


@dataclass(frozen=True, eq=False)
class Book:
    """Net positions, row i = contract i. Hedges (stock or futures) have ``is_option`` False.

    ``expiries`` are the cut-off instants as UTC ``datetime64[s]`` (NaT for hedges) and
    ``expiry_dates`` the contracts' expiry dates in their exchange's time zone (the date the vol
    marks are keyed by); ``strikes`` are NaN for hedges. Quantities are signed contract counts
    (shares for a stock hedge).
    """

    name: str
    underlyings: Underlyings
    reference_index: str | None       # symbol used for beta-weighted delta, or None
    contract_ids: np.ndarray          # int64 (n,), the store's contract id
    labels: tuple[str, ...]           # human label per row, e.g. "IDXA 2027-03-19 4500 C"
    underlying_idx: np.ndarray        # int64 (n,) into ``underlyings``
    is_option: np.ndarray             # bool (n,)
    is_call: np.ndarray               # bool (n,), False for hedges
    american: np.ndarray              # bool (n,)
    strikes: np.ndarray               # float64 (n,)
    expiries: np.ndarray              # datetime64[s] (n,)
    multipliers: np.ndarray           # float64 (n,), units of underlying per contract
    quantities: np.ndarray            # float64 (n,), signed net quantity
    cash_settled: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    is_trial: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    expiry_dates: np.ndarray = field(
        default_factory=lambda: np.zeros(0, dtype="datetime64[D]")
    )  # datetime64[D] (n,); not given: each cut-off's date in DEFAULT_EXCHANGE_TZ

    def __post_init__(self) -> None:
        n = len(self.contract_ids)
        casts: dict[str, Any] = {
            "contract_ids": np.int64, "underlying_idx": np.int64, "is_option": bool,
            "is_call": bool,
            "american": bool, "strikes": np.float64, "expiries": "datetime64[s]",
            "multipliers": np.float64, "quantities": np.float64,
        }
        for name, dtype in casts.items():
            arr = np.asarray(getattr(self, name), dtype=dtype)
            if arr.shape != (n,):
                raise ValueError(f"Book.{name} has shape {arr.shape}, expected ({n},)")
            object.__setattr__(self, name, read_only(arr))
        for name in ("cash_settled", "is_trial"):
            arr = np.asarray(getattr(self, name), dtype=bool)
            if arr.shape == (0,) and n:
                arr = np.zeros(n, dtype=bool)
            if arr.shape != (n,):
                raise ValueError(f"Book.{name} has shape {arr.shape}, expected ({n},)")
            object.__setattr__(self, name, read_only(arr))
        dates = np.asarray(self.expiry_dates, dtype="datetime64[D]")
        if dates.shape == (0,) and n:
            dates = local_dates(self.expiries, ZoneInfo(DEFAULT_EXCHANGE_TZ))
        if dates.shape != (n,):
            raise ValueError(f"Book.expiry_dates has shape {dates.shape}, expected ({n},)")
        object.__setattr__(self, "expiry_dates", read_only(dates))
        if len(self.labels) != n:
            raise ValueError(f"Book.labels has {len(self.labels)} entries, expected {n}")
        idx = self.underlying_idx
        if n and (idx.min() < 0 or idx.max() >= len(self.underlyings)):
            raise ValueError("Book.underlying_idx points outside the underlyings")

    def __len__(self) -> int:
        return len(self.contract_ids)

    def take(self, rows: np.ndarray | list[int]) -> Book:
        """The positions ``rows`` (indices, in that order) as a book of their own."""
        idx = np.asarray(rows, dtype=np.int64)
        return Book(
            name=self.name, underlyings=self.underlyings, reference_index=self.reference_index,
            contract_ids=self.contract_ids[idx],
            labels=tuple(self.labels[int(i)] for i in idx),
            underlying_idx=self.underlying_idx[idx],
            is_option=self.is_option[idx],
            is_call=self.is_call[idx],
            american=self.american[idx],
            strikes=self.strikes[idx],
            expiries=self.expiries[idx],
            multipliers=self.multipliers[idx],
            quantities=self.quantities[idx],
            cash_settled=self.cash_settled[idx],
            is_trial=self.is_trial[idx],
            expiry_dates=self.expiry_dates[idx],
        )

    def with_trials(self, trials: Book) -> Book:
        """This book with ``trials`` appended as rows marked ``is_trial`` (same underlyings)."""
        if trials.underlyings.symbols != self.underlyings.symbols:
            raise ValueError("trial trades must use the book's underlyings")
        cat = np.concatenate
        return Book(
            name=self.name, underlyings=self.underlyings, reference_index=self.reference_index,
            contract_ids=cat([self.contract_ids, trials.contract_ids]),
            labels=self.labels + trials.labels,
            underlying_idx=cat([self.underlying_idx, trials.underlying_idx]),
            is_option=cat([self.is_option, trials.is_option]),
            is_call=cat([self.is_call, trials.is_call]),
            american=cat([self.american, trials.american]),
            strikes=cat([self.strikes, trials.strikes]),
            expiries=cat([self.expiries, trials.expiries]),
            multipliers=cat([self.multipliers, trials.multipliers]),
            quantities=cat([self.quantities, trials.quantities]),
            cash_settled=cat([self.cash_settled, trials.cash_settled]),
            is_trial=cat([self.is_trial, np.ones(len(trials), dtype=bool)]),
            expiry_dates=cat([self.expiry_dates, trials.expiry_dates]),
        )
