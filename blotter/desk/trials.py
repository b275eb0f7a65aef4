"""Trial trades: trades held in memory and layered on the live book, written only when promoted.

A trial may be on a contract the store does not have yet: it takes the underlying's defaults
(``store.preview_contract``) with a negative id of its own. Nothing here writes except
``promote``, which books every trial as a real trade.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC
from typing import TYPE_CHECKING, Any

import numpy as np

from blotter.book import Book

if TYPE_CHECKING:
    from blotter.desk.entry import ContractTerms
    from blotter.store import ContractRecord, Store


@dataclass(frozen=True)
class TrialTrade:
    """A trade layered on the live book in memory only, numbered ``trial_id`` from 1."""

    trial_id: int
    contract: ContractRecord
    quantity: int
    price: float
    book: str


class Trials:
    """The trial trades of one session, in the order they were added."""

    def __init__(self) -> None:
        self._trades: list[TrialTrade] = []
        self._last_id = 0

    def __iter__(self) -> Iterator[TrialTrade]:
        return iter(self._trades)

    def __len__(self) -> int:
        return len(self._trades)

    def all(self) -> list[TrialTrade]:
        """The trials as a list (a copy)."""
        return list(self._trades)

    def add(self, contract: ContractRecord, quantity: int, price: float, book: str) -> TrialTrade:
        """Add a trial of ``contract``; its id is one more than any given before."""
        self._last_id += 1
        trial = TrialTrade(self._last_id, contract, quantity, price, book)
        self._trades.append(trial)
        return trial

    def remove(self, trial_id: int) -> bool:
        """Drop the trial ``trial_id``; False when there is none."""
        kept = [t for t in self._trades if t.trial_id != trial_id]
        removed = len(kept) != len(self._trades)
        self._trades = kept
        return removed

    def quit_question(self) -> str:
        """What to ask before quitting while trials are held (empty: none are, just quit)."""
        n = len(self._trades)
        if not n:
            return ""
        them = "them" if n > 1 else "it"
        return (
            f"{n} trial trade{'s are' if n > 1 else ' is'} not booked: quitting drops {them} "
            f"(the store never had {them}). Quit anyway?"
        )

    def clear(self) -> int:
        """Drop every trial; how many there were."""
        n = len(self._trades)
        self._trades = []
        return n


def trial_contract(
    underlyings: Mapping[str, Mapping[str, Any]],
    terms: ContractTerms,
    trials: Sequence[TrialTrade],
) -> ContractRecord:
    """A contract record for a trial on a contract the store does not have yet.

    It takes the underlying's defaults (``store.preview_contract``; ``underlyings`` are
    ``store.underlying_records`` by symbol) and a negative id of its own, the same id as an
    earlier trial of the same new contract. ValueError naming what is wrong.
    """
    from blotter import store

    und = underlyings.get(terms.symbol)
    if und is None:
        raise ValueError(f"symbol: {terms.symbol} is not an underlying of this file")
    label = store.contract_label(
        terms.symbol,
        "U" if terms.expiry is None else ("C" if terms.is_call else "P"),
        terms.expiry,
        terms.strike,
    )
    new_ids = [t.contract.contract_id for t in trials if t.contract.contract_id < 0]
    same = [t.contract.contract_id for t in trials if t.contract.label == label]
    cid = same[0] if same else min(new_ids, default=0) - 1
    try:
        return store.preview_contract(dict(und), terms.expiry, terms.strike, terms.is_call, cid)
    except store.StoreError as exc:
        raise ValueError(str(exc)) from None


def trial_book(live: Book, trials: Sequence[TrialTrade]) -> Book:
    """The live book with the trials appended as ``is_trial`` rows (``Book.with_trials``)."""
    if not trials:
        return live
    und = live.underlyings
    cs = [t.contract for t in trials]
    opt = [c.option_type != "U" for c in cs]
    rows = Book(
        name=live.name,
        underlyings=und,
        reference_index=live.reference_index,
        contract_ids=np.array([c.contract_id for c in cs], dtype=np.int64),
        labels=tuple(c.label for c in cs),
        underlying_idx=np.array([und.index_of(c.symbol) for c in cs], dtype=np.int64),
        is_option=np.array(opt, dtype=bool),
        is_call=np.array([c.option_type == "C" for c in cs], dtype=bool),
        american=np.array([bool(c.american) for c in cs], dtype=bool),
        strikes=np.array([c.strike if c.strike is not None else np.nan for c in cs]),
        expiries=np.array(
            [
                np.datetime64(c.cutoff_utc.astimezone(UTC).replace(tzinfo=None), "s")
                if c.cutoff_utc is not None
                else np.datetime64("NaT", "s")
                for c in cs
            ],
            dtype="datetime64[s]",
        ),
        multipliers=np.array([c.multiplier for c in cs], dtype=np.float64),
        quantities=np.array([t.quantity for t in trials], dtype=np.float64),
        cash_settled=np.array([bool(c.cash_settled) for c in cs], dtype=bool),
        expiry_dates=np.array([c.expiry or "NaT" for c in cs], dtype="datetime64[D]"),
    )
    return live.with_trials(rows)


def promote(st: Store, trials: Sequence[TrialTrade]) -> list[int]:
    """Book every trial as a real trade (a contract new to the store is created); their ids."""
    return [
        st.add_trade(
            t.book,
            t.contract.symbol,
            t.quantity,
            t.price,
            t.contract.expiry,
            t.contract.strike,
            None if t.contract.option_type == "U" else t.contract.option_type == "C",
            note="promoted trial",
            source="typed",
        )
        for t in trials
    ]
