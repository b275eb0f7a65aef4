"""Valuation of whole books of vanilla options on NumPy arrays: values, greeks, implied vols.

Public API (arguments broadcast NumPy-style; scalars work; raw units per one unit of
underlying):

- ``price_greeks(is_call, spot, strike, years, rate, carry, vol, american=False) -> Greeks``
- ``price(is_call, spot, strike, years, rate, carry, vol, american=False) -> np.ndarray``
- ``implied_vol(price, is_call, spot, strike, years, rate, carry, american=False) -> ImpliedVol``

``years`` is the time to expiry in years (<= 0 means expired: intrinsic value); ``rate`` the
continuously compounded risk-free rate r; ``carry`` the cost of carry b (stock with dividend
yield q: b = r − q; future: b = 0, Black-76; FX: b = r − r_foreign); ``vol`` an annualised
decimal. ``american`` (a bool or a bool array) selects Bjerksund–Stensland (2002) per row,
otherwise generalized Black–Scholes–Merton. Greeks: ``rho`` = ∂V/∂r holding b fixed, so a stock
option's usual rho is ``rho + carry_rho`` and a futures option's is ``rho``.

Invalid inputs (spot or strike <= 0, vol < 0, any NaN or infinity) raise one ``ValueError`` that
names the field and its first bad index, and compute nothing.
"""

from __future__ import annotations

import numpy as np

from blotter.engine import american as _american
from blotter.engine import black as _black
from blotter.engine import implied as _implied
from blotter.engine._chunks import Kernel, run_chunked
from blotter.engine._validate import Flat, as_bool_array, as_float_array, broadcast_flat
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
    "Greeks",
    "ImpliedVol",
    "IV_ABOVE_UPPER_BOUND",
    "IV_BELOW_INTRINSIC",
    "IV_NO_TIME_VALUE",
    "IV_NOT_CONVERGED",
    "IV_OK",
    "IV_STATUS",
    "implied_vol",
    "price",
    "price_greeks",
]

_AMERICAN_CHUNK = 128
"""Chunk for American greeks: 15 bumped copies of 128 rows and their ~40 stacked terms per
element stay in L2."""
_AMERICAN_PRICE_CHUNK = 1024
"""Chunk for American prices and implied vols."""
_IV_CHUNK = 16384
"""Chunk for European implied vols: large, so the few slow elements cost few Python loops."""


def _inputs(is_call: object, spot: object, strike: object, years: object, rate: object,
            carry: object, vol: object | None, american: object,
            price: object | None = None) -> tuple[Flat, np.ndarray, np.ndarray]:
    """Validated, broadcast columns (ω, S, K, T, r, b[, σ | price]) and the American mask."""
    names = ["is_call", "spot", "strike", "years", "rate", "carry"]
    calls = as_bool_array("is_call", is_call)
    arrays = [
        calls,
        as_float_array("spot", spot, "positive"),
        as_float_array("strike", strike, "positive"),
        as_float_array("years", years, "finite"),
        as_float_array("rate", rate, "finite"),
        as_float_array("carry", carry, "finite"),
    ]
    if vol is not None:
        names.append("vol")
        arrays.append(as_float_array("vol", vol, "nonnegative"))
    if price is not None:
        names.append("price")
        arrays.append(as_float_array("price", price, "finite"))
    amer = as_bool_array("american", american)
    flat = broadcast_flat(tuple(names + ["american"]), tuple(arrays + [amer]))
    cols = list(flat.columns)
    omega = np.where(cols[0], 1.0, -1.0)
    mask = cols[-1]
    return Flat(flat.shape, flat.size, tuple([omega] + cols[1:-1])), mask, calls


def _run_models(flat: Flat, mask: np.ndarray, euro: Kernel, amer: Kernel, amer_chunk: int,
                n_out: int, ins: tuple[np.ndarray, ...], dtypes: tuple[type, ...],
                euro_chunk: int = 4096) -> list[np.ndarray]:
    """Outputs of ``euro`` on European rows and ``amer`` on American rows, flat (size,)."""
    if len(set(dtypes)) == 1:
        # One block for all outputs: large enough for transparent huge pages, so first touch
        # costs far fewer page faults than ten separate arrays.
        block: np.ndarray = np.empty((n_out, flat.size), dtype=dtypes[0])
        outs = list(block)
    else:
        outs = [np.empty(flat.size, dtype=dt) for dt in dtypes[:n_out]]
    if mask.ndim == 0:
        run_chunked(amer if bool(mask) else euro, flat.size, ins, outs,
                    chunk=amer_chunk if bool(mask) else euro_chunk)
        return outs
    idx_a = np.flatnonzero(mask)
    if idx_a.size == 0:
        run_chunked(euro, flat.size, ins, outs, chunk=euro_chunk)
        return outs
    if idx_a.size == flat.size:
        run_chunked(amer, flat.size, ins, outs, chunk=amer_chunk)
        return outs
    idx_e = np.flatnonzero(~mask)
    for idx, kern, chunk in ((idx_e, euro, euro_chunk), (idx_a, amer, amer_chunk)):
        sub_in = tuple(a if a.ndim == 0 else a[idx] for a in ins)
        sub_out = [np.empty(idx.size, dtype=o.dtype) for o in outs]
        run_chunked(kern, idx.size, sub_in, sub_out, chunk=chunk)
        for o, so in zip(outs, sub_out, strict=True):
            o[idx] = so
    return outs


def price_greeks(is_call: object, spot: object, strike: object, years: object, rate: object,
                 carry: object, vol: object, american: object = False) -> Greeks:
    """Value and greeks of vanilla options, each of the broadcast shape of the inputs.

    Units per one unit of underlying: see ``Greeks``. European rows are closed form with analytic
    greeks; American rows use Bjerksund–Stensland (2002) with central-difference greeks.
    """
    flat, mask, _ = _inputs(is_call, spot, strike, years, rate, carry, vol, american)
    outs = _run_models(flat, mask, _black.greeks_kernel, _american.greeks_kernel,
                       _AMERICAN_CHUNK, len(GREEK_NAMES), flat.columns,
                       (np.float64,) * len(GREEK_NAMES))
    return Greeks(*(o.reshape(flat.shape) for o in outs))


def price(is_call: object, spot: object, strike: object, years: object, rate: object,
          carry: object, vol: object, american: object = False) -> np.ndarray:
    """Values only (currency per unit of underlying), of the broadcast shape of the inputs.

    The fast path for scenario ladders, e.g. spots of shape (n_scen, 1) against (1, n) books.
    """
    flat, mask, _ = _inputs(is_call, spot, strike, years, rate, carry, vol, american)
    (out,) = _run_models(flat, mask, _black.price_kernel, _american.price_kernel,
                         _AMERICAN_PRICE_CHUNK, 1, flat.columns, (np.float64,))
    return out.reshape(flat.shape)


def implied_vol(price: object, is_call: object, spot: object, strike: object, years: object,
                rate: object, carry: object, american: object = False) -> ImpliedVol:
    """Implied vols (annualised decimal) of option prices, with a status per element.

    ``vol`` is NaN wherever ``status`` is not ``IV_OK``; ``IV_STATUS`` names the codes.
    """
    flat, mask, _ = _inputs(is_call, spot, strike, years, rate, carry, None, american,
                            price=price)
    omega, s, k, t, r, b, p = flat.columns
    outs = _run_models(flat, mask, _implied.make_kernel(False), _implied.make_kernel(True),
                       _AMERICAN_PRICE_CHUNK, 2, (p, omega, s, k, t, r, b),
                       (np.float64, np.int8), euro_chunk=_IV_CHUNK)
    return ImpliedVol(vol=outs[0].reshape(flat.shape),
                      status=outs[1].astype(np.int64).reshape(flat.shape))
