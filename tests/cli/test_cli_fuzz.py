"""The write commands on arbitrary numbers and strings, one option at a time (hypothesis).

Each case takes a command line that works and replaces one option's value with anything: huge
integers (309 digits and more), floats with NaN and infinity, values at the edges of
``blotter.limits``, times in year 1, text. Whatever it is, ``blotter`` exits 0 (accepted), or 1
or 2 with an ``Error:`` message, never with a traceback; on a refusal the book's rows are
exactly as before. CSV imports get the same treatment cell by cell, and a refusal names the
line and the column.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from blotter.cli import main

HUGE = "1" + "0" * 309
"""310 digits: past float64."""

SPECIAL = (
    HUGE, "-" + HUGE, HUGE + "0" * 100, "1e300", "-1e300", "1e-300", "4e-9", "5e-9", "1e999",
    "nan", "inf", "-inf", "0", "-0", "1", "-1", "0.5", "9223372036854775807",
    "9223372036854775808", "-9223372036854775809", "18446744073709551616", "10000000", "10000001",
    "1000000000000", "0.000001", "0.0000009", "0001-01-01T00:00:00Z", "0999-12-31T23:59:59Z",
    "1899-12-31T23:59:59Z", "2200-01-01T00:00:00Z", "9999-12-31T23:59:59+14:00",
    "0001-01-01T00:00:00", "0001-01-01", "9999-12-31", "2027-02-30", "2027-03-19", "25%",
    "1000%", "-100%", "", " ", "1,000", "0x10", "1_000", "١٢", "\x00", "--help",
)
"""Values at and past the bounds, and texts that trip a naive float() or int()."""

VALUES = st.one_of(
    st.sampled_from(SPECIAL),
    st.integers(min_value=-(10**400), max_value=10**400).map(str),
    st.integers(min_value=-(10**6), max_value=10**6).map(str),
    st.floats().map(repr),
    st.text(max_size=12),
)

SETTINGS = settings(
    max_examples=25,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
"""A fixed set of examples per case, so a run is repeatable and takes a few seconds."""

BOOK = ("--book", "equity-vol")
OPTION = ("--expiry", "2027-03-19", "--strike", "190", "--call")

CASES: dict[str, tuple[tuple[str, ...], str]] = {
    "trade add SYMBOL": (("trade", "add", "{}", "--qty", "1", "--price", "2", *BOOK), "{}"),
    "trade add --qty": (("trade", "add", "DEMOA", "--qty", "{}", "--price", "2", *BOOK), "{}"),
    "trade add --price": (("trade", "add", "DEMOA", "--qty", "1", "--price", "{}", *BOOK), "{}"),
    "trade add --strike": (
        ("trade", "add", "DEMOA", "--qty", "1", "--price", "2", *BOOK, "--expiry", "2027-03-19",
         "--call", "--strike", "{}"),
        "{}",
    ),
    "trade add --expiry": (
        ("trade", "add", "DEMOA", "--qty", "1", "--price", "2", *BOOK, "--strike", "190",
         "--call", "--expiry", "{}"),
        "{}",
    ),
    "trade add --multiplier": (
        ("trade", "add", "DEMOA", "--qty", "1", "--price", "2", *BOOK, *OPTION, "--multiplier",
         "{}"),
        "{}",
    ),
    "trade add --time": (
        ("trade", "add", "DEMOA", "--qty", "1", "--price", "2", *BOOK, "--time", "{}"),
        "{}",
    ),
    "trade add --book": (("trade", "add", "DEMOA", "--qty", "1", "--price", "2", "--book", "{}"),
                         "{}"),
    "trade cancel TRADE_ID": (("trade", "cancel", "{}", "--reason", "fuzz"), "{}"),
    "trade amend TRADE_ID": (("trade", "amend", "{}", "--reason", "fuzz", "--qty", "3"), "{}"),
    "trade amend --qty": (("trade", "amend", "{live}", "--reason", "fuzz", "--qty", "{}"), "{}"),
    "trade amend --price": (("trade", "amend", "{live}", "--reason", "fuzz", "--price", "{}"),
                            "{}"),
    "trade amend --time": (("trade", "amend", "{live}", "--reason", "fuzz", "--time", "{}"),
                           "{}"),
    "mark spot PRICE": (("mark", "spot", "DEMOA", "{}"), "{}"),
    "mark vol EXPIRY": (("mark", "vol", "DEMOA", "{}", "25%"), "{}"),
    "mark vol VOL": (("mark", "vol", "DEMOA", "2027-03-19", "{}"), "{}"),
    "mark vol --strike": (("mark", "vol", "DEMOA", "2027-03-19", "25%", "--strike", "{}"), "{}"),
    "mark rate TENOR_DAYS": (("mark", "rate", "USD", "{}", "4%"), "{}"),
    "mark rate RATE": (("mark", "rate", "USD", "90", "{}"), "{}"),
    "mark divyield Q": (("mark", "divyield", "DEMOA", "{}"), "{}"),
    "mark close --corrects": (("mark", "close", "--corrects", "{}"), "{}"),
    "underlying add --multiplier": (
        ("underlying", "add", "ZZZ", "--kind", "stock", "--currency", "USD", "--multiplier", "{}"),
        "{}",
    ),
    "underlying add --beta": (
        ("underlying", "add", "ZZZ", "--kind", "stock", "--currency", "USD", "--multiplier", "100",
         "--beta", "{}"),
        "{}",
    ),
    "underlying add --div-yield": (
        ("underlying", "add", "ZZZ", "--kind", "stock", "--currency", "USD", "--multiplier", "100",
         "--div-yield", "{}"),
        "{}",
    ),
    "underlying add --cutoff": (
        ("underlying", "add", "ZZZ", "--kind", "stock", "--currency", "USD", "--multiplier", "100",
         "--cutoff", "{}"),
        "{}",
    ),
}
"""Each case: a command that works, with ``{}`` where the fuzzed value goes and ``{live}`` where
the id of a live trade goes (so an amend reaches the value instead of "already cancelled")."""


def book_rows(db: Path) -> list[str]:
    """Every row of every table, as SQL text: equal lists mean an unchanged book."""
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        return list(con.iterdump())
    finally:
        con.close()


def invoke(args: list[str]) -> tuple[int, str, BaseException | None]:
    result = CliRunner().invoke(main, args, catch_exceptions=True)
    exc = result.exception
    return result.exit_code, result.output + result.stderr, (
        None if exc is None or isinstance(exc, SystemExit) else exc
    )


NOT_UTF8 = b"x\xffy".decode("utf-8", "surrogateescape")
"""A command-line word whose bytes were not UTF-8, as Python passes it on."""


def check_refused_or_done(db: Path, args: list[str]) -> tuple[int, str]:
    """Run ``blotter --db DB ARGS``; assert no traceback, and an unchanged book on refusal."""
    before = book_rows(db)
    code, output, exc = invoke(["--db", str(db), *args])
    assert exc is None, f"{args!r} raised {exc!r}"
    assert "Traceback" not in output, (args, output)
    assert code in (0, 1, 2), (args, code, output)
    if code != 0:
        assert "Error" in output, (args, output)
        assert book_rows(db) == before, f"{args!r} was refused but changed the book"
    return code, output


def live_trade(db: Path) -> str:
    """The id of the newest trade that is neither cancelled nor amended."""
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        row = con.execute(
            "SELECT max(trade_id) FROM trade WHERE trade_id NOT IN (SELECT trade_id FROM "
            "trade_cancel)"
        ).fetchone()
    finally:
        con.close()
    return str(row[0])


@pytest.fixture(autouse=True)
def _own_data_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Nothing a command writes lands outside this test's folder."""
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    monkeypatch.delenv("BLOTTER_DB", raising=False)
    monkeypatch.chdir(tmp_path)


@pytest.mark.parametrize("case", sorted(CASES))
def test_a_write_command_refuses_any_value_in_words(demo_db: Path, case: str) -> None:
    template, _ = CASES[case]

    @SETTINGS
    @given(VALUES)
    def one(value: str) -> None:
        fill = {"{}": value, "{live}": live_trade(demo_db)}
        check_refused_or_done(demo_db, [fill.get(a, a) for a in template])

    one()


@pytest.mark.parametrize(
    "column", ["quantity", "price", "strike", "expiry", "trade_time", "multiplier"]
)
def test_a_trade_import_refuses_any_cell_naming_its_line_and_column(
    demo_db: Path, tmp_path: Path, column: str
) -> None:
    good = {
        "book": "equity-vol", "symbol": "DEMOA", "type": "C", "expiry": "2027-03-19",
        "strike": "190", "quantity": "1", "price": "2", "trade_time": "2026-11-30T15:00:00Z",
        "multiplier": "100",
    }
    seen = [0]

    @SETTINGS
    @given(VALUES.filter(lambda v: "\n" not in v and "\r" not in v and "\x00" not in v))
    def one(value: str) -> None:
        seen[0] += 1
        path = tmp_path / f"t{seen[0]}.csv"
        cells = good | {column: value}
        quoted = ['"' + c.replace('"', '""') + '"' for c in cells.values()]
        path.write_text(
            ",".join(cells) + "\n" + ",".join(good.values()) + "\n" + ",".join(quoted) + "\n",
            encoding="utf-8",
        )
        code, output = check_refused_or_done(demo_db, ["trade", "import", str(path)])
        if code == 1 and "nothing imported" in output and "problem" in output:
            assert f"line 3, column '{column}'" in output, output

    one()


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (("trade", "cancel", "9223372036854775808", "--reason", "x"), "trade id must be from 1"),
        (("trade", "amend", "9223372036854775808", "--reason", "x", "--qty", "2"),
         "trade id must be from 1"),
        (("mark", "close", "--corrects", "9223372036854775808"), "must be from 1 to 9,223,372"),
        (("trade", "add", "DEMOA", "--qty", HUGE, "--price", "1", *BOOK),
         "quantity must be from -1e+12 to 1e+12"),
        (("mark", "rate", "USD", HUGE, "4%"), "tenor must be from 1 to 36,500 days"),
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "1", *BOOK, "--multiplier", "1e300"),
         "multiplier must be from 1e-06 to 10,000,000 units per contract"),
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "1", *BOOK, "--expiry", "2027-03-19",
          "--call", "--strike", "4e-9"), "strike must be from 1e-06"),
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "1", *BOOK, "--time",
          "0999-06-01T12:00:00Z"), "time must be from 1900-01-01"),
        (("whatif", f"bdays {HUGE}"), "bdays must be from 0 to 2,520"),
        (("whatif", "bdays 99999999"), "bdays must be from 0 to 2,520"),
        (("whatif", "spot -1%", "--at", "0001-01-01T00:00:00Z"), "time must be from 1900-01-01"),
        (("risk", "--at", "0001-01-01T00:00:00Z"), "time must be from 1900-01-01"),
        (("grid", "--spot", HUGE), "spot must be above -100% and at most +1,000%"),
        (("demo", "--out", "never.db", "--positions", HUGE), "not in the range"),
        (("grid", "--days", "nan"), "is not a finite number"),
        (("trade", "list", "--since", "0001-01-01"),
         "Invalid value for --since: time must be from 1900-01-01 to before 2200-01-01, got "
         "0001-01-01"),
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "1", *BOOK, "--time", "garbage"),
         "Invalid value for --time"),
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "nan", *BOOK), "not a finite number"),
        # Text whose bytes were not UTF-8 (Python holds them as lone surrogates).
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "1", *BOOK, "--note", NOT_UTF8),
         "not valid UTF-8"),
        (("mark", "close", "--note", NOT_UTF8), "not valid UTF-8"),
        (("trade", "cancel", "1", "--reason", NOT_UTF8), "not valid UTF-8"),
        (("underlying", "add", "ZZQ", "--kind", "stock", "--currency", "USD", "--multiplier",
          "100", "--description", NOT_UTF8), "not valid UTF-8"),
        (("trade", "add", "DEMOA", "--qty", "1", "--price", "1", "--new-book", "--book",
          NOT_UTF8), "not valid UTF-8"),
    ],
)
def test_the_reported_inputs_get_a_message_and_change_nothing(
    demo_db: Path, args: tuple[str, ...], fragment: str
) -> None:
    code, output = check_refused_or_done(demo_db, list(args))
    assert code in (1, 2) and fragment in output, output
