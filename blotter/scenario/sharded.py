"""The spot × vol grid and what-if moves over an executor: positions split into shards, each
shard's grid (or moves) computed where the executor runs it, the shards' results summed.

A grid is a plain sum over positions (full revaluation, the Taylor estimates and the count of
options expiring in the roll are each a sum of per-position terms), so the sum of the shards'
grids is the serial grid, to rounding. Any ``concurrent.futures.Executor`` serves: a local process
pool (``local_pool``) or a Dask cluster's (``distributed.Client(...).get_executor()``). Each
shard travels pickled with the exercise boundaries solved so far, so no worker solves one the
caller already has.
"""

from __future__ import annotations

import multiprocessing
import os
import warnings
from collections.abc import Iterator, Sequence
from concurrent.futures import Executor, Future, ProcessPoolExecutor
from contextlib import contextmanager
from dataclasses import replace

import numpy as np

from blotter.engine import BoundaryCache
from blotter.risk import BookValuation
from blotter.scenario.grammar import STICKY_RULE, Move
from blotter.scenario.spot_vol_ladder import DEFAULT_SPOT_PCTS, DEFAULT_VOL_PTS, Ladder, ladder
from blotter.scenario.whatif import MoveError, MoveResult, apply_move, joined_result

MIN_SHARD_POSITIONS = 20_000
"""Fewest positions worth a shard of their own: below it, sending the shard costs more than
valuing it."""


def local_pool(workers: int | None = None) -> ProcessPoolExecutor:
    """A pool of ``workers`` processes (default: the cores), started fresh ("spawn") rather than
    forked, so no child inherits the parent's threads or locks."""
    n = workers or os.cpu_count() or 1
    return ProcessPoolExecutor(max_workers=n, mp_context=multiprocessing.get_context("spawn"))


def shard_rows(n: int, shards: int) -> list[np.ndarray]:
    """Row indices 0..n−1 in ``shards`` contiguous runs of nearly equal size (none empty)."""
    shards = max(1, min(int(shards), n)) if n else 1
    return [np.asarray(r, dtype=np.int64) for r in np.array_split(np.arange(n), shards)]


@contextmanager
def _sending() -> Iterator[None]:
    """Submissions of shards: Dask warns of every task larger than 10 MB, which a shard of
    positions is by design, so that warning is not shown to the user."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Sending large graph", category=UserWarning)
        yield


def _grid_of(
    part: BookValuation,
    spot_pcts: tuple[float, ...],
    vol_pts: tuple[float, ...],
    days: float,
    rule: str,
) -> Ladder:
    """One shard's grid (runs in the worker)."""
    return ladder(part, spot_pcts, vol_pts, days, None, rule)


def _summed(parts: list[Ladder]) -> Ladder:
    """The grid of the union of the shards: every cell summed, the worst cell found again."""
    first = parts[0]
    full = np.sum([p.full for p in parts], axis=0)
    estimate = np.sum([p.estimate for p in parts], axis=0)
    estimate_1 = np.sum([p.estimate_1 for p in parts], axis=0)
    error = full - estimate
    i, j = np.unravel_index(int(np.argmin(full)), full.shape)
    return replace(
        first,
        full=full,
        estimate=estimate,
        estimate_1=estimate_1,
        error=error,
        worst=(int(i), int(j)),
        n_through_expiry=sum(p.n_through_expiry for p in parts),
    )


def sharded_ladders(
    valuation: BookValuation,
    executor: Executor,
    spot_pcts: Sequence[float] = DEFAULT_SPOT_PCTS,
    vol_pts: Sequence[float] = DEFAULT_VOL_PTS,
    days: float = 0.0,
    rule: str = STICKY_RULE,
    shards: int | None = None,
) -> list[Ladder]:
    """``spot_vol_ladder.ladders`` computed on ``executor``: one grid per currency, each the sum
    of its positions' shards (``shards`` per currency, default one per ``MIN_SHARD_POSITIONS``
    positions, at least 1). Equal to the serial grids to rounding (about 1e-12 relative)."""
    sp, vp = tuple(float(x) for x in spot_pcts), tuple(float(x) for x in vol_pts)
    if len(valuation.currencies) <= 1:
        groups = [np.arange(len(valuation))]
    else:
        ccy = valuation.position_currencies
        groups = [np.flatnonzero(ccy == c) for c in valuation.currencies]
    pending: list[list[Future[Ladder]]] = []
    for rows in groups:
        count = shards or max(1, rows.size // MIN_SHARD_POSITIONS)
        with _sending():
            futures = [
                executor.submit(_grid_of, valuation.take(rows[idx]), sp, vp, days, rule)
                for idx in shard_rows(rows.size, count)
            ]
        pending.append(futures)
    return [_summed([f.result() for f in futures]) for futures in pending]


def _moves_of(part: BookValuation, moves: tuple[Move, ...]) -> list[MoveResult | MoveError]:
    """One shard's result of each move (runs in the worker), each from its own copy of the
    boundaries the shard came with, as ``apply_move`` of that move alone; a move that cannot
    apply gives its ``MoveError``. Returned without the boundaries, which the caller holds."""
    out: list[MoveResult | MoveError] = []
    for move in moves:
        try:
            res = apply_move(replace(part, boundaries=part.boundaries.copy()), move)
        except MoveError as exc:
            out.append(exc)
            continue
        out.append(replace(res, valuation=replace(res.valuation, boundaries=BoundaryCache())))
    return out


def sharded_moves(
    valuation: BookValuation,
    moves: Sequence[Move],
    executor: Executor,
    shards: int | None = None,
) -> list[MoveResult | MoveError]:
    """Each of ``moves`` applied to ``valuation`` on ``executor``: the positions in ``shards``
    contiguous runs (default one per ``MIN_SHARD_POSITIONS`` positions, at least 1), every move
    run on each shard where the executor puts it, the shards' results joined
    (``whatif.joined_result``). Equal to ``apply_move`` of each move alone to rounding; a move
    that cannot apply gives its ``MoveError`` in its place."""
    n = len(valuation)
    rows = shard_rows(n, shards or max(1, n // MIN_SHARD_POSITIONS))
    sent = tuple(moves)
    with _sending():
        futures = [executor.submit(_moves_of, valuation.take(r), sent) for r in rows]
    per_shard = [f.result() for f in futures]
    out: list[MoveResult | MoveError] = []
    for k, move in enumerate(sent):
        parts = [shard[k] for shard in per_shard]
        refused = next((p for p in parts if isinstance(p, MoveError)), None)
        if refused is not None:
            out.append(refused)
        else:
            results = [p for p in parts if isinstance(p, MoveResult)]
            out.append(joined_result(valuation, move, results, rows))
    return out


POOL_FROM_POSITIONS = 1_000_000
"""Books from this size get a local process pool by default: below it, starting the workers
(each imports the engine) costs more than the grid."""


class ClusterUnavailable(RuntimeError):
    """A cluster was asked for but cannot be reached or its client is not installed."""


@contextmanager
def grid_executor(
    positions: int, workers: int | None = None, cluster: str | None = None
) -> Iterator[Executor | None]:
    """The executor a grid of ``positions`` runs on: the Dask cluster at ``cluster`` when given
    (``tcp://host:port``; needs the ``cluster`` extra), else a local pool of ``workers``
    processes (default: the cores, for books of ``POOL_FROM_POSITIONS`` or more), else None
    (serial, in this process)."""
    if cluster:
        try:
            from distributed import Client
        except ImportError:
            raise ClusterUnavailable(
                'a cluster needs Dask\'s client: pip install "blotter[cluster]"'
            ) from None
        try:
            client = Client(cluster, timeout="10s")
        except (OSError, TimeoutError) as exc:
            raise ClusterUnavailable(f"cannot reach the cluster at {cluster}: {exc}") from None
        try:
            yield client.get_executor()
        finally:
            client.close()
        return
    if workers is None:
        workers = (os.cpu_count() or 1) if positions >= POOL_FROM_POSITIONS else 1
    if workers <= 1:
        yield None
        return
    with local_pool(workers) as pool:
        yield pool
