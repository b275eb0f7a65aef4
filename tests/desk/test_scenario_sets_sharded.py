"""A named scenario set run over an executor (positions in shards on a local process pool or a
local Dask cluster started here, each shard's moves summed) equals the set run in one process, to
1e-9 relative: every row of every move (totals, currencies, underlyings, Taylor terms),
per-position changes, options expiring inside the roll and the notes.

The one-process run is checked against QuantLib 1.44 in ``test_scenario_sets.py``; here the two
ways of running a set are held to each other, as ``tests/scenario/test_sharded.py`` holds the
grid.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from books import (
    T0,
    TWO_CCY,
    TWO_CCY_ROWS,
    make_book,
    make_market,
    mixed_american_rows,
    two_ccy_market,
)
from click.testing import CliRunner

from blotter.cli import main
from blotter.config import ScenarioSetText
from blotter.desk.scenario_sets import ScenarioSet, SetError, SetRun, parse_set, run_set
from blotter.risk import BookValuation, value_book
from blotter.scenario import MoveRow
from blotter.scenario.sharded import grid_executor, local_pool

MOVES = (
    ("down 10, vol +8", "spot -10% vol +8"),
    ("three days", "days 3"),
    ("vols crushed", "vol -60"),
    ("STK alone", "STK spot -6% vol -10%"),
    ("smile follows", "spot -4% moneyness"),
    ("weighted vol", "vol +3 weighted"),
    ("rates up", "rate +50bp spot +1%"),
)
"""Moves that reach every path of a move: a roll through an expiry, the vol floor, one
underlying, sticky moneyness, weighted vols and a rate move."""


def _set(moves: tuple[tuple[str, str], ...] = MOVES) -> ScenarioSet:
    return parse_set(ScenarioSetText("sharded", moves, "test"))


def _mixed() -> BookValuation:
    # one STK option expires inside the 3-day roll
    return value_book(make_book(mixed_american_rows()), make_market(), T0)


def _two_currencies() -> BookValuation:
    return value_book(make_book(TWO_CCY_ROWS, TWO_CCY, ref="USI"), two_ccy_market(), T0)


def _close(a: float, b: float) -> bool:
    return (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-9)


def _same_row(a: MoveRow, b: MoveRow) -> None:
    assert (a.label, a.underlying, a.currency, a.n_through_expiry) == (
        b.label,
        b.underlying,
        b.currency,
        b.n_through_expiry,
    )
    for name in ("full", "estimate_1", "estimate_2", "error_1", "error_2"):
        assert _close(getattr(a, name), getattr(b, name)), (a.label, name)
    assert a.terms.keys() == b.terms.keys()
    assert all(_close(a.terms[t], b.terms[t]) for t in b.terms), a.label


def _same_run(got: SetRun, want: SetRun) -> None:
    assert got.worst == want.worst
    assert [r.name for r in got.rows] == [r.name for r in want.rows]
    for g, w in zip(got.rows, want.rows, strict=True):
        a, b = g.result, w.result
        _same_row(a.total, b.total)
        assert len(a.by_currency) == len(b.by_currency)
        for x, y in zip(a.by_currency, b.by_currency, strict=True):
            _same_row(x, y)
        assert len(a.by_underlying) == len(b.by_underlying)
        for x, y in zip(a.by_underlying, b.by_underlying, strict=True):
            _same_row(x, y)
        np.testing.assert_allclose(a.full, b.full, rtol=1e-9, atol=1e-9)
        assert np.array_equal(a.through_expiry, b.through_expiry)
        np.testing.assert_allclose(a.dvol, b.dvol, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(a.spot_move_u, b.spot_move_u, rtol=1e-12)
        assert (a.time_after, a.roll_years) == (b.time_after, b.roll_years)
        assert a.rate_move == b.rate_move
        assert a.notes == b.notes
        assert [e.index for e in a.expiring] == [e.index for e in b.expiring]
        for e, f in zip(a.expiring, b.expiring, strict=True):
            assert (e.label, e.underlying, e.pin_risk) == (f.label, f.underlying, f.pin_risk)
            assert _close(e.settlement, f.settlement) and _close(e.estimate_2, f.estimate_2)


@pytest.mark.parametrize("shards", [1, 2, 5, 40])
def test_threads_give_the_one_process_set(shards: int) -> None:
    v = _mixed()
    want = run_set(v, _set())
    with ThreadPoolExecutor(2) as pool:
        got = run_set(v, _set(), executor=pool, shards=shards)
    assert want is not None and got is not None
    _same_run(got, want)
    days = next(r for r in got.rows if r.name == "three days").result
    assert len(days.expiring) == 1 and days.notes  # the roll passes an expiry: said per move


def test_a_process_pool_gives_the_one_process_set_in_each_currency() -> None:
    eux = tuple(
        ("EUX alone", "EUX spot -6% vol -10%") if n == "STK alone" else (n, t) for n, t in MOVES
    )
    for v, moves in ((_mixed(), MOVES), (_two_currencies(), eux)):
        want = run_set(v, _set(moves))
        with local_pool(2) as pool:
            got = run_set(v, _set(moves), executor=pool, shards=3)
        assert want is not None and got is not None
        _same_run(got, want)
    assert got is not None and len(got.rows[0].result.by_currency) == 2


def test_a_local_dask_cluster_gives_the_one_process_set() -> None:
    distributed = pytest.importorskip("distributed", reason="the cluster extra is not installed")
    v = _mixed()
    want = run_set(v, _set())
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        with grid_executor(len(v), cluster=cluster.scheduler_address) as executor:
            assert executor is not None
            got = run_set(v, _set(), executor=executor, shards=4)
    assert want is not None and got is not None
    _same_run(got, want)


def test_a_move_that_cannot_apply_on_a_shard_is_refused_naming_it() -> None:
    v = _mixed()
    bad = _set((("fine", "spot -1%"), ("to zero", "STK spot -130")))  # STK is at 120
    with pytest.raises(SetError) as serial:
        run_set(v, bad)
    with ThreadPoolExecutor(2) as pool, pytest.raises(SetError) as sharded:
        run_set(v, bad, executor=pool, shards=3)
    assert str(sharded.value) == str(serial.value)
    assert "'to zero'" in str(sharded.value)


def test_whatif_set_takes_workers_and_refuses_them_for_one_move(demo_db: Path) -> None:
    """``whatif --set NAME --workers 2`` prints the table one process prints; ``--workers`` or
    ``--cluster`` with a single move is refused in words."""
    sets = demo_db.parent / "sets.toml"
    sets.write_text('[scenarios.crash]\n"down" = "spot -5% vol +3"\n"roll" = "days 2"\n')
    runner = CliRunner()
    base = ["whatif", "--db", str(demo_db), "--at", "2026-12-01T10:00", "--file", str(sets)]
    base += ["--set", "crash"]
    one = runner.invoke(main, [*base, "--json"], catch_exceptions=False)
    two = runner.invoke(main, [*base, "--json", "--workers", "2"], catch_exceptions=False)
    assert one.exit_code == 0 and two.exit_code == 0, two.output
    assert _json_close(one.output, two.output)
    for extra in (["--workers", "2"], ["--cluster", "tcp://127.0.0.1:9"]):
        refused = runner.invoke(main, ["whatif", "--db", str(demo_db), "spot", "-1%", *extra])
        assert refused.exit_code == 2 and "give --set NAME" in refused.output


def _json_close(a: str, b: str) -> bool:
    """Two JSON outputs equal, numbers to 1e-9 relative."""
    import json

    def same(x: object, y: object) -> bool:
        if isinstance(x, float) or isinstance(y, float):
            return isinstance(x, int | float) and isinstance(y, int | float) and _close(x, y)
        if isinstance(x, dict) and isinstance(y, dict):
            return x.keys() == y.keys() and all(same(x[k], y[k]) for k in x)
        if isinstance(x, list) and isinstance(y, list):
            return len(x) == len(y) and all(same(p, q) for p, q in zip(x, y, strict=True))
        return x == y

    return same(json.loads(a), json.loads(b))
