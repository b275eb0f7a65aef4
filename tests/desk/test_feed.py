"""The feed: quotes parsed from JSON and CSV lines, bad lines counted with their numbers and
writing nothing, the latest quote of each point written at most once per throttle per
underlying, in one mark set per batch. The quotes are invented test data."""

from __future__ import annotations

import io
from pathlib import Path

import pytest

from blotter import store
from blotter.desk.feed import Feed, FeedLineError, Quote, parse_lines, run_feed


class Clock:
    """Monotonic seconds the test moves by hand."""

    def __init__(self) -> None:
        self.t = 1000.0

    def __call__(self) -> float:
        return self.t


def _feed_sets(st: store.Store) -> list[store.MarkSetInfo]:
    return [s for s in st.mark_sets("intraday") if s.source.startswith("file:")]


def test_json_and_csv_lines_parse_to_the_same_quotes() -> None:
    json_lines = [
        '{"symbol": "xyz", "spot": 101.25, "time": "2026-12-03T15:00:00Z"}\n',
        '{"symbol": "XYZ", "vols": [{"expiry": "2027-01-15", "strike": 100, "vol": 0.31},'
        ' {"expiry": "2027-01-15", "vol": 0.3}]}\n',
    ]
    csv_lines = [
        "symbol,spot,time,expiry,strike,vol\n",
        "xyz,101.25,2026-12-03T15:00:00Z,,,\n",
        "\n",
        "XYZ,,,2027-01-15,100,0.31\n",
        "XYZ,,,2027-01-15,,0.3\n",
    ]
    from_json = [q for _, q in parse_lines(json_lines)]
    from_csv = [q for _, q in parse_lines(csv_lines)]
    assert all(isinstance(q, Quote) for q in from_json + from_csv)
    assert from_json[0] == from_csv[0]
    assert from_json[0].symbol == "XYZ" and from_json[0].spot == 101.25
    assert from_json[0].time is not None and from_json[0].time.isoformat().startswith(
        "2026-12-03T15:00:00"
    )
    assert [p for q in from_json[1:] for p in q.points()] == [
        p for q in from_csv[1:] for p in q.points()
    ]
    # the CSV's line numbers count its header and the blank line
    assert [n for n, _ in parse_lines(csv_lines)] == [2, 4, 5]


@pytest.mark.parametrize(
    ("line", "words"),
    [
        ("not json at all", "not JSON"),
        ('{"symbol": "XYZ"}', "needs a spot or a vol point"),
        ('{"symbol": "XYZ", "spot": "abc"}', "spot must be a number"),
        ('{"symbol": "XYZ", "spot": NaN}', "finite"),
        ('{"symbol": "XYZ", "spot": 1, "colour": "red"}', "unknown field"),
        ('{"symbol": "", "spot": 1}', "symbol must be"),
        ('{"symbol": "XYZ", "spot": 1, "time": "yesterday"}', "ISO-8601"),
        ('{"symbol": "XYZ", "spot": 1, "time": "2026-12-03T15:00:00"}', "no time zone"),
        ('{"symbol": "XYZ", "vols": [{"expiry": "2027-13-01", "vol": 0.3}]}', "expiry"),
        ('{"symbol": "XYZ", "vols": [{"vol": 0.3}]}', "needs an expiry"),
        ("[1, 2]", "must be an object"),
    ],
)
def test_a_bad_json_line_is_refused_in_words(line: str, words: str) -> None:
    [(number, item)] = list(parse_lines([line]))
    assert number == 1
    assert isinstance(item, FeedLineError)
    assert words in str(item)


def test_a_csv_header_without_a_symbol_column_stops_the_feed() -> None:
    with pytest.raises(FeedLineError, match="header"):
        list(parse_lines(["sym,px\n", "XYZ,1\n"]))


def test_bad_lines_are_counted_with_their_numbers_and_write_nothing(xyz_db: Path) -> None:
    st = store.open_store(xyz_db)
    try:
        before = st.load_market()
        sets_before = len(st.mark_sets())
        heard: list[int] = []
        feed = Feed(st, 0.0, Clock(), on_bad=lambda n, _r: heard.append(n))
        lines = [
            '{"symbol": "NOPE", "spot": 5}',  # unknown underlying
            "{broken",
            '{"symbol": "XYZ", "spot": -1}',  # below the store's spot range
            '{"symbol": "XYZ", "vols": [{"expiry": "2027-01-15", "vol": 0}]}',  # a zero vol
        ]
        report = run_feed(feed, io.StringIO("\n".join(lines) + "\n"))
        assert report.bad == 4 and heard == [1, 2, 3, 4]
        assert [n for n, _ in report.bad_lines] == [1, 2, 3, 4]
        assert "unknown underlying NOPE" in report.bad_lines[0][1]
        assert report.points_written == 0 and report.batches == 0
        assert len(st.mark_sets()) == sets_before
        assert st.load_market().spots == before.spots
    finally:
        st.close()


def test_a_bad_line_among_good_ones_does_not_stop_the_feed(xyz_db: Path) -> None:
    st = store.open_store(xyz_db)
    try:
        feed = Feed(st, 0.0, Clock())
        text = '{"symbol": "XYZ", "spot": 101}\nxx\n{"symbol": "XYZ", "spot": 102}\n'
        report = run_feed(feed, io.StringIO(text))
        assert report.bad == 1 and report.bad_lines[0][0] == 2
        assert report.quotes == 2
        assert st.load_market().spots["XYZ"] == 102.0
    finally:
        st.close()


def test_quotes_within_the_throttle_wait_and_the_latest_is_written(xyz_db: Path) -> None:
    st = store.open_store(xyz_db)
    try:
        st.add_underlying("ABC", "stock", "USD", 100.0, description="invented for the tests")
        clock = Clock()
        feed = Feed(st, 1.0, clock)
        for n, (sym, px) in enumerate([("XYZ", 101.0), ("ABC", 50.0)], start=1):
            feed.take(n, Quote(sym, px))
        assert feed.flush() == 2  # nothing written yet for either: both due at once
        sets = _feed_sets(st)
        assert len(sets) == 1  # one batch, one mark set, one transaction
        clock.t += 0.4
        feed.take(3, Quote("XYZ", 101.5))
        feed.take(4, Quote("XYZ", 101.7))
        assert feed.flush() == 0  # XYZ was written 0.4 s ago: it waits
        assert feed.due_in() == pytest.approx(0.6)
        clock.t += 0.6
        assert feed.flush() == 1  # the latest of the two quotes, once
        assert st.load_market().spots["XYZ"] == 101.7
        assert len(_feed_sets(st)) == 2
        assert feed.report.points_written == 3 and feed.report.batches == 2
    finally:
        st.close()


def test_what_waits_at_the_end_of_the_source_is_written(xyz_db: Path) -> None:
    st = store.open_store(xyz_db)
    try:
        feed = Feed(st, 3600.0, Clock())
        text = "".join(f'{{"symbol": "XYZ", "spot": {100 + i}}}\n' for i in range(5))
        report = run_feed(feed, io.StringIO(text))
        assert report.quotes == 5
        # the first quote went at once, the other four waited for the hour: the last is kept
        assert report.batches == 2 and report.points_written == 2
        assert st.load_market().spots["XYZ"] == 104.0
    finally:
        st.close()


def test_a_vol_quote_moves_the_marked_vol(xyz_db: Path) -> None:
    st = store.open_store(xyz_db)
    try:
        feed = Feed(st, 0.0, Clock())
        text = '{"symbol": "XYZ", "vols": [{"expiry": "2027-01-15", "vol": 0.35}]}\n'
        report = run_feed(feed, io.StringIO(text))
        assert report.points_written == 1 and report.bad == 0
        marks = st.marks(mark_set_id=_last_feed_set(st))
        assert [(m.kind, m.value) for m in marks] == [("vol", 0.35)]
    finally:
        st.close()


def _last_feed_set(st: store.Store) -> int:
    """The id of the newest feed mark set."""
    return max(s.id for s in _feed_sets(st))


def test_a_negative_throttle_is_refused(xyz_db: Path) -> None:
    st = store.open_store(xyz_db)
    try:
        with pytest.raises(ValueError, match="throttle"):
            Feed(st, -1.0, Clock())
    finally:
        st.close()
