"""The close review: points in force beside the last close, what changed, what is missing and what
is stale, in words; the close written as one set, and a second close of the day as a correction."""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import pytest

from blotter import store
from blotter.desk import close_review as cr

from .conftest import EXPIRY


def view_of(db: Path) -> cr.MarksView:
    with store.open_store(db, read_only=True) as st:
        return cr.marks_view(st, st.load_book())


def test_the_points_in_force_and_a_first_close(xyz_db: Path) -> None:
    view = view_of(xyz_db)
    assert [p.label for p in view.points] == [
        "XYZ spot",
        f"XYZ {EXPIRY} ATM",
        "USD rate 365d",
    ]
    assert [p.shown(p.value) for p in view.points] == ["100.00", "30.00%", "4.00%"]
    assert view.last_close_id is None and all(p.close_value is None for p in view.points)
    now = max(p.observed_at for p in view.points if p.observed_at is not None)
    review = cr.close_review(view, now)
    assert review.n_points == 3 and review.corrects is None
    assert review.changed == ("XYZ spot new 100.00", f"XYZ vol {EXPIRY} ATM new 30.00%",
                              "USD rate 365d new 4.00%")
    assert review.missing == () and review.stale == ()
    with store.open_store(xyz_db) as st:
        closed = cr.commit_close(st, review)
        assert closed.set_id == st.mark_sets(kind="close")[-1].id
    assert closed.words == f"close set {closed.set_id} written"
    after = view_of(xyz_db)
    assert after.last_close_id == closed.set_id
    assert [p.change() for p in after.points] == ["0", "0", "0"]


def test_changes_since_the_close_and_a_correction_of_the_day(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        first = st.commit_close()
        st.log_spot("XYZ", 1234.5)
        st.log_vol("XYZ", EXPIRY, 0.3125)
        st.log_rate("USD", 365, 0.0425)
    view = view_of(xyz_db)
    spot, vol, rate = view.points
    assert (spot.change(), vol.change(), rate.change()) == ("+1,134.50", "+1.25 pt", "+25.0 bp")
    review = cr.close_review(view, max(p.observed_at for p in view.points if p.observed_at))
    assert review.changed[0] == "XYZ spot 100.00 → 1,234.50 (+1,134.50)"
    assert review.corrects == first and review.close_day == view.close_day
    with store.open_store(xyz_db) as st:
        closed = cr.commit_close(st, review)
        again = st.mark_sets(kind="close")[-1]
    assert (again.id, again.corrects) == (closed.set_id, first)
    assert closed.words == f"close set {closed.set_id} written, correcting set {first}"


def test_a_close_that_the_store_refuses_writes_nothing(xyz_db: Path) -> None:
    """A review made before another terminal closed the day writes a second close of it: the
    store refuses it in words, and nothing is written."""
    view = view_of(xyz_db)
    review = cr.close_review(view, max(p.observed_at for p in view.points if p.observed_at))
    with store.open_store(xyz_db) as st:
        st.commit_close()
        n = len(st.mark_sets())
        with pytest.raises(store.StoreError, match="a date closes once"):
            cr.commit_close(st, review)
        assert len(st.mark_sets()) == n


def test_missing_and_stale_points(xyz_db: Path) -> None:
    """A EUR name traded without marks: its spot, its expiry's vol and a EUR rate point are
    missing; marks unchanged for over a day are stale."""
    with store.open_store(xyz_db) as st:
        st.add_underlying("ABC", "stock", "EUR", 100.0, description="invented, never marked")
        st.add_trade("desk", "ABC", 1, 1.0, EXPIRY, 50.0, True)
    view = view_of(xyz_db)
    needed = [p.label for p in view.points if p.needed]
    assert needed == ["ABC spot", f"ABC {EXPIRY} ATM", f"EUR rate {cr.MISSING_CURVE_TENOR_DAYS}d"]
    marked = max(p.observed_at for p in view.points if p.observed_at is not None)
    review = cr.close_review(view, marked + cr.STALE_AFTER + timedelta(hours=3))
    assert review.missing == ("ABC spot", f"ABC vol {EXPIRY} ATM", "EUR rate 365d")
    assert review.stale[0].startswith("XYZ spot 100.00 marked ")
    assert review.stale[0].endswith(", 1 day 3 h ago")
    assert len(review.stale) == 3 and review.n_points == 3
