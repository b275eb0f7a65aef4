"""Valuation of whole books of vanilla options on NumPy arrays: values, greeks, implied vols.

Public API (arguments broadcast NumPy-style; scalars work; raw units per one unit of
underlying):

- ``price_greeks(is_call, spot, strike, years, rate, carry, vol, american=False,
  boundaries=None) -> Greeks``
- ``price(is_call, spot, strike, years, rate, carry, vol, american=False, boundaries=None)
  -> np.ndarray``
- ``implied_vol(price, is_call, spot, strike, years, rate, carry, american=False) -> ImpliedVol``
- ``american_status(is_call, years, rate, carry) -> np.ndarray`` (codes in ``AMERICAN_STATUS``)
- ``BoundaryCache``: exercise boundaries kept between calls of one valuation
- ``kernels_ready() -> bool``, ``warm_up(background=True)``: the compiled kernels' state

``years`` is the time to expiry in years (<= 0 means expired: intrinsic value); ``rate`` the
continuously compounded risk-free rate r; ``carry`` the cost of carry b (stock with dividend
yield q: b = r − q; future: b = 0, Black-76; FX: b = r − r_foreign); ``vol`` an annualised
decimal. ``american`` (a bool or a bool array) selects the converged American method per row
(``american``: the early-exercise-boundary integral equation, Andersen–Lake–Offengenden 2016),
otherwise generalized Black–Scholes–Merton. ``boundaries``, a ``BoundaryCache``, keeps the
American rows' exercise boundaries for the next call (a what-if, a ladder, a profile).
Greeks: ``rho`` = ∂V/∂r holding b fixed, so a stock option's usual rho is ``rho + carry_rho``
and a futures option's is ``rho``.

Invalid inputs (spot or strike <= 0, vol < 0, any NaN or infinity) raise one ``ValueError`` that
names the field and its first bad index (e.g. ``strike must be > 0: strike[17] = -5.0``); no
output is returned and the inputs are not modified.

Books are evaluated in chunks on a pool of one thread per core (``_chunks``); the functions are
safe to call from several threads at once. Accuracy by model: ``ACCURACY.md`` beside this file.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from blotter.engine import american as _american
from blotter.engine import american_grid as _american_grid
from blotter.engine import black as _black
from blotter.engine import implied as _implied
from blotter.engine._chunks import CHUNK, Kernel, run_chunked
from blotter.engine._kernels import kernels_ready
from blotter.engine._validate import (
    Flat,
    as_bool_array,
    as_float_array,
    broadcast_flat,
    quick_ok,
)
from blotter.engine._validate import (
    omega as _omega,
)
from blotter.engine.american import AMERICAN_STATUS, BoundaryCache, warm_up
from blotter.engine.results import (
    GREEK_NAMES,
    IV_ABOVE_UPPER_BOUND,
    IV_BELOW_INTRINSIC,
    IV_NO_TIME_VALUE,
    IV_NOT_CONVERGED,
    IV_OK,
    IV_STATUS,
    Greeks,
    ImpliedVol,
)

__all__ = [
    "AMERICAN_STATUS",
    "BoundaryCache",
    "american_cells",
    "Greeks",
    "ImpliedVol",
    "IV_ABOVE_UPPER_BOUND",
    "IV_BELOW_INTRINSIC",
    "IV_NO_TIME_VALUE",
    "IV_NOT_CONVERGED",
    "IV_OK",
    "IV_STATUS",
    "american_status",
    "implied_vol",
    "kernels_ready",
    "price",
    "price_greeks",
    "warm_up",
]

_AMERICAN_IV_CHUNK = 1 << 30
"""American implied vols run as one kernel call (their pricer groups rows and uses the thread
pool itself)."""
_IV_CHUNK = 16384
"""Chunk for European implied vols: large, so the few slow elements cost few Python loops."""


DEFER_CHECKS = 65536
"""Inputs at least this large (and of the full broadcast shape) are checked chunk by chunk
inside the evaluation, while in cache, instead of in separate passes over memory."""


@dataclass(frozen=True)
class _Prepared:
    """Broadcast columns (is_call, S, K, T, r, b, σ or price), the American mask, the checks
    left to the chunks, and the raw fields to re-check in order when a chunk check fails."""

    flat: Flat
    mask: np.ndarray
    deferred: tuple[tuple[str, np.ndarray], ...]
    fields: tuple[tuple[str, object, str], ...]

    def check(self, start: int, stop: int) -> bool:
        return all(quick_ok(col[start:stop], rule) for rule, col in self.deferred)

    def raise_first_error(self) -> None:
        """Re-check every field in order; raises the ValueError of the first bad one."""
        for name, value, rule in self.fields:
            as_float_array(name, value, rule)
        raise AssertionError("a chunk check failed but no field is invalid")  # pragma: no cover


def _inputs(is_call: object, spot: object, strike: object, years: object, rate: object,
            carry: object, vol: object | None, american: object,
            price: object | None = None) -> _Prepared:
    """Checked (or check-deferred), broadcast inputs; see ``_Prepared``."""
    fields: list[tuple[str, object, str]] = [
        ("spot", spot, "positive"), ("strike", strike, "positive"), ("years", years, "finite"),
        ("rate", rate, "finite"), ("carry", carry, "finite"),
    ]
    if vol is not None:
        fields.append(("vol", vol, "nonnegative"))
    if price is not None:
        fields.append(("price", price, "finite"))
    calls = as_bool_array("is_call", is_call)
    amer = as_bool_array("american", american)
    arrays: list[np.ndarray] = []
    for name, value, _ in fields:
        try:
            arrays.append(np.asarray(value, dtype=np.float64))
        except (TypeError, ValueError) as exc:
            raise ValueError(f"{name} must be numeric: {exc}") from None
    names = ("is_call",) + tuple(f[0] for f in fields) + ("american",)
    flat = broadcast_flat(names, (calls, *arrays, amer))
    deferred: list[tuple[str, np.ndarray]] = []
    try:
        for (name, _, rule), arr, col in zip(fields, arrays, flat.columns[1:-1], strict=True):
            if arr.size >= DEFER_CHECKS and arr.shape == flat.shape and flat.columns[-1].ndim == 0:
                deferred.append((rule, col))
            else:
                as_float_array(name, arr, rule)
    except ValueError:
        _Prepared(flat, amer, (), tuple(fields)).raise_first_error()
    return _Prepared(Flat(flat.shape, flat.size, flat.columns[:-1]), flat.columns[-1],
                     tuple(deferred), tuple(fields))


def _run_models(prep: _Prepared, euro: Kernel, amer: Kernel, amer_chunk: int,
                n_out: int, ins: tuple[np.ndarray, ...], dtypes: tuple[type, ...],
                euro_chunk: int = CHUNK) -> list[np.ndarray]:
    """Outputs of ``euro`` on European rows and ``amer`` on American rows, flat (size,)."""
    flat, mask = prep.flat, prep.mask
    if len(set(dtypes)) == 1:
        # One block for all outputs: large enough for transparent huge pages, so first touch
        # costs far fewer page faults than ten separate arrays.
        block: np.ndarray = np.empty((n_out, flat.size), dtype=dtypes[0])
        outs = list(block)
    else:
        outs = [np.empty(flat.size, dtype=dt) for dt in dtypes[:n_out]]
    check = prep.check if prep.deferred else None
    if mask.ndim == 0:
        if bool(mask) and check is not None and not check(0, flat.size):
            prep.raise_first_error()
        ok = run_chunked(amer if bool(mask) else euro, flat.size, ins, outs,
                         chunk=amer_chunk if bool(mask) else euro_chunk,
                         min_split=amer_chunk if bool(mask) else 4096, check=check)
        if not ok:
            prep.raise_first_error()
        return outs
    idx_a = np.flatnonzero(mask)
    idx_e = np.flatnonzero(~mask)
    for idx, kern, chunk, split in ((idx_e, euro, euro_chunk, 4096),
                                    (idx_a, amer, amer_chunk, amer_chunk)):
        if idx.size == 0:
            continue
        sub_in = tuple(a if a.ndim == 0 else a[idx] for a in ins)
        sub_out = [np.empty(idx.size, dtype=o.dtype) for o in outs]
        run_chunked(kern, idx.size, sub_in, sub_out, chunk=chunk, min_split=split)
        for o, so in zip(outs, sub_out, strict=True):
            o[idx] = so
    return outs


def _cache(boundaries: object) -> BoundaryCache | None:
    """``boundaries`` checked: None or a ``BoundaryCache`` (typed ``object`` so that callers
    passing a dict of arrays by ``**`` still type-check)."""
    if boundaries is None or isinstance(boundaries, BoundaryCache):
        return boundaries
    raise ValueError(f"boundaries must be a BoundaryCache or None, not {type(boundaries).__name__}")


def _american_kernel(greeks: bool, boundaries: BoundaryCache | None) -> Kernel:
    """A kernel valuing all the American rows it is given in one call (``american.evaluate``
    groups them by boundary and runs on the thread pool itself)."""
    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        m = outs[0].shape[0]
        w, s, k, t, r, b, v = (np.broadcast_to(a, (m,)) for a in
                               (_omega(ins[0]), *ins[1:]))
        vals, _ = _american.evaluate(w, s, k, t, r, b, v, greeks, boundaries)
        for o, val in zip(outs, vals, strict=True):
            o[:] = val

    return kernel


def price_greeks(is_call: object, spot: object, strike: object, years: object, rate: object,
                 carry: object, vol: object, american: object = False,
                 boundaries: object = None) -> Greeks:
    """Value and greeks of vanilla options, each of the broadcast shape of the inputs.

    Units per one unit of underlying: see ``Greeks``. European rows are closed form with analytic
    greeks; American rows take exact derivatives of the converged method (``american``).
    """
    prep = _inputs(is_call, spot, strike, years, rate, carry, vol, american)
    outs = _run_models(prep, _black.greeks_kernel, _american_kernel(True, _cache(boundaries)),
                       _AMERICAN_IV_CHUNK, len(GREEK_NAMES), prep.flat.columns,
                       (np.float64,) * len(GREEK_NAMES))
    return Greeks(*(o.reshape(prep.flat.shape) for o in outs))


def price(is_call: object, spot: object, strike: object, years: object, rate: object,
          carry: object, vol: object, american: object = False,
          boundaries: object = None) -> np.ndarray:
    """Values only (currency per unit of underlying), of the broadcast shape of the inputs.

    The fast path for scenario ladders, e.g. spots of shape (n_scen, 1) against (1, n) books;
    pass one ``boundaries`` cache to every call of a valuation so American rows reuse them.
    """
    prep = _inputs(is_call, spot, strike, years, rate, carry, vol, american)
    (out,) = _run_models(prep, _black.price_kernel, _american_kernel(False, _cache(boundaries)),
                         _AMERICAN_IV_CHUNK, 1, prep.flat.columns, (np.float64,))
    return out.reshape(prep.flat.shape)


def american_cells(is_call: object, spot: object, strike: object, years: object, rate: object,
                   carry: object, vols: object, shocks: object, greeks: bool = False,
                   boundaries: object = None, base_vols: object = None,
                   weights: object = None, with_base: bool = True,
                   kept_only: bool = False,
                   exact_near: bool = True,
                   outputs: Sequence[str] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """American values of rows (m,) in every cell of a spot × vol grid: spot × ``shocks[i]``
    (n_s,), vol ``vols[i or 0, j, row]`` ((n_s or 1, n_v, m)); shape (1, n_s, n_v, m), or
    with ``greeks`` (5, n_s, n_v, m) = price, delta, gamma, vega, theta (units of ``Greeks``);
    and the same at the unmoved spot and ``base_vols`` (m,) (default the first vol column),
    shape (1 or 5, m), from the same tables, for P&L that is 0 where nothing moves. With
    ``weights`` (m,), their weighted sums over the rows instead, (1 or 5, n_s, n_v) and
    (1 or 5,), in bounded memory. ``with_base`` False skips the values at the unmoved spot
    (NaN); ``kept_only`` takes only boundaries and premium tables already kept in
    ``boundaries`` and gives NaN cells when any is missing (no ``weights`` then). With
    ``greeks``, cells near the exercise boundary or of a small σ√τ are valued by the
    quadrature, since there the tables' gamma, vega and theta miss the greeks' accuracy;
    ``exact_near`` False keeps the tables' cells there (price and delta are within it).
    ``outputs`` (with ``greeks``) names the ones of the five computed, the others NaN, so
    that a call builds only the premium tables they read (a delta needs no gamma table).

    Each cell equals ``price``/``price_greeks`` with ``american=True`` within the method's
    accuracy, from one premium table per exercise boundary (``american_grid``) instead of one
    quadrature per cell; pass the valuation's ``boundaries`` as for ``price``.
    """
    calls = as_bool_array("is_call", is_call)
    cols = [as_float_array(n, v, "finite") for n, v in
            (("spot", spot), ("strike", strike), ("years", years), ("rate", rate),
             ("carry", carry))]
    flat = broadcast_flat(("is_call", "spot", "strike", "years", "rate", "carry"),
                          (calls, *cols))
    c, s, k, t, r, b = (np.broadcast_to(a, flat.shape).ravel() for a in flat.columns)
    if np.any(s <= 0) or np.any(k <= 0):
        raise ValueError("spot and strike must be positive")
    m = c.size
    sh = as_float_array("shocks", shocks, "finite").ravel()
    if np.any(sh <= 0):
        raise ValueError("spot shocks must be positive multipliers")
    vv = as_float_array("vols", vols, "finite")
    if vv.ndim != 3 or vv.shape[0] not in (1, sh.size) or vv.shape[2] != m:
        raise ValueError(f"vols must have shape (1 or {sh.size}, n_v, {m}), not {vv.shape}")
    if np.any(vv <= 0):
        raise ValueError("vols must be positive")
    bv = None
    if base_vols is not None:
        bv = np.broadcast_to(as_float_array("base_vols", base_vols, "finite"), (m,))
        if np.any(bv <= 0):
            raise ValueError("base vols must be positive")
    wt = None
    if weights is not None:
        wt = np.broadcast_to(as_float_array("weights", weights, "finite"), (m,))
    return _american_grid.american_cells(c, s, k, t, r, b, vv, sh, greeks, _cache(boundaries),
                                         base_vols=bv, weights=wt, with_base=with_base,
                                         kept_only=kept_only, exact_near=exact_near,
                                         outputs=outputs)


def implied_vol(price: object, is_call: object, spot: object, strike: object, years: object,
                rate: object, carry: object, american: object = False) -> ImpliedVol:
    """Implied vols (annualised decimal) of option prices, with a status per element.

    ``vol`` is NaN wherever ``status`` is not ``IV_OK``; ``IV_STATUS`` names the codes.
    """
    prep = _inputs(is_call, spot, strike, years, rate, carry, None, american, price=price)
    calls, s, k, t, r, b, p = prep.flat.columns
    outs = _run_models(prep, _implied.make_kernel(False), _implied.make_kernel(True),
                       _AMERICAN_IV_CHUNK, 2, (p, calls, s, k, t, r, b),
                       (np.float64, np.int8), euro_chunk=_IV_CHUNK)
    return ImpliedVol(vol=outs[0].reshape(prep.flat.shape),
                      status=outs[1].astype(np.int64).reshape(prep.flat.shape))


def american_status(is_call: object, years: object, rate: object, carry: object) -> np.ndarray:
    """Per-row code (``AMERICAN_STATUS`` names them) saying how an American row is valued.

    ``DOUBLE_BOUNDARY`` rows (negative rates on both sides) get a lower bound, not the converged
    value; a screen can show ``AMERICAN_STATUS[code]`` beside them. Boundaries that fail to
    converge are reported by ``price``'s rows only through their value (a lower bound); this
    function classifies by inputs.
    """
    calls = as_bool_array("is_call", is_call)
    cols = [as_float_array(n, v, "finite") for n, v in
            (("years", years), ("rate", rate), ("carry", carry))]
    flat = broadcast_flat(("is_call", "years", "rate", "carry"), (calls, *cols))
    shape = flat.shape
    c, t, r, b = (np.broadcast_to(a, shape).ravel() for a in flat.columns)
    r_p = np.where(c, r - b, r)
    q_p = np.where(c, r, r - b)
    out = _american.status_of(r_p, q_p).astype(np.int64)
    out[t <= 0.0] = _american.EXPIRED
    return out.reshape(shape)
