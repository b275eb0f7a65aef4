"""Implied volatility: vectorized safeguarded Newton with a bisection fallback, per chunk.

Each element keeps a bracket [lo, hi] on the vol; a Newton step that leaves the bracket (or
meets a vega too small to trust) is replaced by bisection, so every element converges or is
reported. The first guess is Corrado–Miller's (1996) quadratic approximation on the forward,
else the inflection point √(2 |ln(F/K)| / T) from which Newton on a Black price is monotone.
Only elements not yet converged are iterated. American prices use the converged method of
``american`` with its exact vega; one call's iterations share a ``BoundaryCache``, so an
iterate within the vol nodes already solved for its (τ, r, b) group reuses that boundary.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
from scipy.special import ndtr

from blotter.engine import american, black
from blotter.engine._chunks import Kernel
from blotter.engine._validate import omega
from blotter.engine.results import (
    IV_ABOVE_UPPER_BOUND,
    IV_BELOW_INTRINSIC,
    IV_NO_TIME_VALUE,
    IV_NOT_CONVERGED,
    IV_OK,
)

VOL_MAX = 20.0
"""Upper end of the search, annualised decimal (2,000%); a price needing more does not converge."""
MAX_ITER = 60
"""Iterations per element before it is reported as not converged."""
PRICE_RTOL = 2e-15
"""Relative price match (of the price, or of spot + strike for tiny prices) that ends a search."""
BOUND_RTOL = 1e-9
"""A price within this fraction of itself (or of spot + strike for tiny prices) of a no-arbitrage
bound counts as at the bound. The bounds S e^{(b−r)T} − K e^{−rT} and intrinsic are differences
of larger terms, so the same bound computed elsewhere differs by a few units in their last place."""
_INV_SQRT_2PI = 0.3989422804014327


def _euro_price_vega(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray,
                     r: np.ndarray, b: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """European price and vega (per 1.00 vol) for live rows (t > 0, v > 0), arrays of one shape."""
    sqrt_t = np.sqrt(t)
    vs = np.maximum(v * sqrt_t, black.VOL_SQRT_T_FLOOR)
    d1 = (np.log(s / k) + b * t) / vs + 0.5 * vs
    sf = s * np.exp((b - r) * t)
    kd = k * np.exp(-r * t)
    p = w * (sf * ndtr(w * d1) - kd * ndtr(w * (d1 - vs)))
    vega = sf * np.exp(np.maximum(-0.5 * d1 * d1, black.EXP_FLOOR)) * (_INV_SQRT_2PI * sqrt_t)
    return p, vega


PriceVega = Callable[..., tuple[np.ndarray, np.ndarray]]
"""(ω, S, K, T, r, b, σ) arrays of one shape -> (price, vega per 1.00 vol)."""


def _amer_price_vega(cache: american.BoundaryCache) -> PriceVega:
    """American price and exact vega, the iterations of one call sharing ``cache``."""
    def price_vega(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                   b: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        vals, _ = american.evaluate(w, s, k, t, r, b, v, True, cache)
        return vals[0], vals[3]

    return price_vega


def make_kernel(is_american: bool) -> Kernel:
    """Chunk kernel: ``ins`` = (price, ω, S, K, T, r, b), ``outs`` = (vol, status int8)."""
    price_vega = (_amer_price_vega(american.BoundaryCache()) if is_american
                  else _euro_price_vega)

    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        vol_out, status_out = outs
        m = vol_out.shape[0]
        target, w, s, k, t, r, b = (np.broadcast_to(a, (m,)) for a in
                                    (ins[0], omega(ins[1]), *ins[2:]))
        vol_out[:] = np.nan
        status_out[:] = IV_NOT_CONVERGED
        live = t > 0.0
        te = np.where(live, t, 1.0)
        sf = s * np.exp((b - r) * te)                 # S e^{(b−r)T}
        kd = k * np.exp(-r * te)                      # K e^{−rT}
        lower = np.maximum(w * (sf - kd), 0.0)
        upper = np.where(w > 0, sf, kd)
        if is_american:
            lower = np.maximum(lower, np.maximum(w * (s - k), 0.0))
            upper = np.where(w > 0, np.maximum(sf, s), k)
        tol = PRICE_RTOL * np.maximum(np.abs(target), 1e-4 * (s + k))
        # Prices within the bound tolerance of a bound are "no time value" / "above upper
        # bound"; the test uses only the model-free bounds, so it is the same for American.
        bound_tol = BOUND_RTOL * np.maximum(np.abs(target), 1e-4 * (s + k))
        below = live & (target < lower - bound_tol)
        flat = live & ~below & (target <= lower + bound_tol)
        above = live & (target >= upper - bound_tol)
        status_out[~live] = IV_NO_TIME_VALUE
        status_out[below] = IV_BELOW_INTRINSIC
        status_out[flat & ~above] = IV_NO_TIME_VALUE
        status_out[above & ~below & ~flat] = IV_ABOVE_UPPER_BOUND
        todo = np.flatnonzero(live & ~below & ~flat & ~above)
        if todo.size == 0:
            return
        tw, ts, tk, tt, tr, tb = w[todo], s[todo], k[todo], te[todo], r[todo], b[todo]
        tp, ttol = target[todo], tol[todo]
        # Corrado–Miller first guess on the European call of the same forward.
        f_s, f_k = sf[todo], kd[todo]
        call = np.where(tw > 0, tp, tp + f_s - f_k)
        half = call - 0.5 * (f_s - f_k)
        disc = half * half - (f_s - f_k) ** 2 / np.pi
        cm = np.sqrt(2.0 * np.pi / tt) / (f_s + f_k) * (half + np.sqrt(np.maximum(disc, 0.0)))
        infl = np.sqrt(2.0 * np.abs(np.log(f_s / f_k)) / tt)
        guess = np.where((disc > 0) & (cm > 1e-4), cm, np.maximum(infl, 0.2))
        vol = np.clip(guess, 1e-4, VOL_MAX / 2)
        lo = np.zeros_like(vol)
        hi = np.full_like(vol, VOL_MAX)
        idx = np.arange(todo.size)
        for _ in range(MAX_ITER):
            v_i = vol[idx]
            p, vega = price_vega(tw[idx], ts[idx], tk[idx], tt[idx], tr[idx], tb[idx], v_i)
            f = p - tp[idx]
            tol_i = ttol[idx]
            pos = f > 0
            hi_i = np.where(pos, np.minimum(hi[idx], v_i), hi[idx])
            lo_i = np.where(pos, lo[idx], np.maximum(lo[idx], v_i))
            hi[idx] = hi_i
            lo[idx] = lo_i
            safe_vega = np.where(vega > 0, vega, 1.0)
            newton = v_i - f / safe_vega
            ok = (vega > 0) & (newton > lo_i) & (newton < hi_i)
            nxt = np.where(ok, newton, 0.5 * (lo_i + hi_i))
            close = np.abs(f) <= tol_i
            # A step below rounding, or a bracket no wider than rounding, ends the search: it is
            # a success when the price is matched to 1,000 times the tolerance.
            stuck = (np.abs(nxt - v_i) <= 1e-15 + 1e-14 * v_i) | (hi_i - lo_i <= 1e-14 * hi_i)
            fin = close | stuck
            good = close | (stuck & (np.abs(f) <= 1e3 * tol_i))
            vol_out[todo[idx[good]]] = v_i[good]
            status_out[todo[idx[good]]] = IV_OK
            vol[idx] = nxt
            idx = idx[~fin]
            if idx.size == 0:
                break

    return kernel

