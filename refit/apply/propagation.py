"""Monte Carlo propagation of measurement error through a coefficient file.

Each fossil measurement with a standard deviation is drawn ``N_DRAWS`` times (seeded,
depths kept non-negative by :func:`truncated_normal`); every draw is evaluated with its own
interval, and the interval of the paleosol is the central interval of the mixture of the
draws' predictive distributions (:func:`mixture_interval`). As the measurement SDs go to
zero it becomes the file's own interval. Used by :mod:`refit.apply.estimates`.
"""

from __future__ import annotations

import math

import numpy as np

#: Monte Carlo draws per paleosol and coefficient file
N_DRAWS = 4000
#: a limit this close to a bound, relative to the interval's spread, is the bound
#: (the root finder stops at about 1e-12 of the spread; 1e-9 leaves room for rounding)
SNAP_RELATIVE = 1e-9


def snap_to_bounds(value: float, bounds, spread: float) -> float:
    """``value`` written as the bound it differs from only by float noise.

    A Monte Carlo limit at a physical bound (MAP >= 0) comes back from the root finder
    as 3.5e-14 or -8.1e-12 mm; within ``SNAP_RELATIVE * spread`` of a bound it is that
    bound. Other values, and infinite ones, pass unchanged.

    Parameters
    ----------
    value : float
        A lower or upper limit [response unit].
    bounds : iterable of float or None
        Candidate bounds [response unit] (the file's physical bounds, the draws' extreme
        limits); None and non-finite entries are skipped.
    spread : float
        Size of the interval [response unit] the tolerance is relative to.
    """
    if not math.isfinite(value):
        return value
    tol = SNAP_RELATIVE * max(abs(spread), abs(value) if value else 0.0, 1e-300)
    for b in bounds:
        if b is not None and math.isfinite(float(b)) and abs(value - float(b)) <= tol:
            return float(b)
    return value


def mixture_interval(est, lo, hi, level: float, df: float | None = None):
    """Central ``level`` interval of a mixture of split location-scale distributions.

    Draw ``i`` has centre ``est[i]`` and limits ``lo[i]``, ``hi[i]`` at ``level``; its
    distribution is a Student t with ``df`` (normal if None) scaled by
    ``(hi - est)/q`` above and ``(est - lo)/q`` below, ``q`` the quantile at
    ``0.5 + level/2``. Returns ``(lower, upper, n_used)``; +-inf where the mixture never
    reaches the tail probability (unbounded draws), NaN without usable draws.
    """
    from scipy import optimize, special

    est, lo, hi = (np.asarray(a, dtype=float) for a in (est, lo, hi))
    ok = np.isfinite(est) & ~np.isnan(lo) & ~np.isnan(hi)
    est, lo, hi = est[ok], lo[ok], hi[ok]
    if not len(est):
        return math.nan, math.nan, 0
    p = 0.5 + level / 2.0
    if df is None:
        cdf, q = special.ndtr, float(special.ndtri(p))
    else:
        cdf, q = (lambda z: special.stdtr(df, z)), float(special.stdtrit(df, p))
    su, sl = (hi - est) / q, (est - lo) / q

    def mix(y):
        with np.errstate(invalid="ignore", divide="ignore"):
            z = np.where(y >= est, np.where(su > 0, (y - est) / su, np.inf),
                         np.where(sl > 0, (y - est) / sl, -np.inf))
        return float(np.mean(cdf(z)))

    fin_l, fin_u = np.isfinite(sl), np.isfinite(su)
    span = max(np.max(sl[fin_l], initial=0.0), np.max(su[fin_u], initial=0.0), 1e-12)
    a0, b0 = float(est.min() - 60 * span), float(est.max() + 60 * span)
    out = []
    for target in (1.0 - p, p):
        if mix(a0) > target:
            out.append(-math.inf)
            continue
        if mix(b0) < target:
            out.append(math.inf)
            continue
        out.append(optimize.brentq(lambda y: mix(y) - target, a0, b0, xtol=1e-12 * span,
                                   rtol=4 * np.finfo(float).eps, maxiter=200))
    return out[0], out[1], int(len(est))


def truncated_normal(rng, mean: float, sd: float, n: int, lower: float = 0.0):
    """``n`` draws of N(mean, sd) kept at or above ``lower`` (redrawn; clipped if stuck)."""
    x = rng.normal(mean, sd, n) if sd > 0 else np.full(n, float(mean))
    for _ in range(50):
        bad = x < lower
        if not bad.any():
            break
        x[bad] = rng.normal(mean, sd, int(bad.sum()))
    return np.maximum(x, lower)


def propagate(eq, draws, lvl, mc_level, df, varied, seed, flags, details) -> dict:
    """Monte Carlo interval of one paleosol under one file.

    Returns the ``lower``, ``upper``, ``lower_untruncated``, ``upper_untruncated`` and
    ``propagation`` fields of the row (:func:`untruncated_mixture` for the two in the
    middle).

    With no usable draw (every draw's estimate NaN, e.g. each lies outside the physical
    bounds: MAP < 0 mm) there is no distribution of estimates to mix: only
    ``propagation`` is returned (saying so), and the row keeps the file's limits at the
    measured value (for a forward line, the part of the confidence set inside the
    bounds, :func:`refit.models.inversion.classical.bound_line_set`)."""
    mp = eq.predict(draws, lvl)
    lo, hi, used = mixture_interval(mp.estimate, mp.lower, mp.upper, mc_level, df)
    if used == 0:
        details.append("no Monte Carlo draw gives an estimate (e.g. every one lies "
                       "outside the physical bounds): the limits are the file's at the "
                       "measured value, not propagated")
        return {"propagation": f"none: {len(draws)} draws (seed {seed}), 0 usable"}
    lo, hi = _snapped(eq, mp, lo, hi)
    lo_u, hi_u = untruncated_mixture(eq, mp, lo, hi, mc_level, df)
    n = len(draws)
    uniq, counts = np.unique(np.asarray(mp.flags, dtype=str), return_counts=True)
    for flag in ("outside-calibration-range", "beyond-turning-point", "unbounded",
                 "two-roots"):
        share = float(np.sum(counts[[flag in str(u).split(";") for u in uniq]]) / n)
        if share > 0 and flag not in flags:
            flags.append(f"some-draws-{flag}")
            details.append(f"{share:.0%} of the Monte Carlo draws are {flag}")
    text = (f"monte-carlo: {n} draws (seed {seed}), {used} usable; varied "
            + ", ".join(varied) + "; per-draw interval as a "
            + ("Student t" if df else "split normal") + " with the draw's limits")
    return {"lower": lo, "upper": hi, "lower_untruncated": lo_u, "upper_untruncated": hi_u,
            "propagation": text}


def _declared_bounds(eq) -> list:
    """The file's physical bounds of climate (``interval.inversion.bounds``; [] when it
    states none)."""
    inv = (eq.record.get("interval") or {}).get("inversion") or {}
    return list(inv.get("bounds") or [])


def untruncated_mixture(eq, mp, lo: float, hi: float, mc_level: float, df):
    """The Monte Carlo limits before a cut at a physical bound, per side; NaN on a side
    whose limit ``lo``/``hi`` is not at its bound.

    A draw whose limit was cut at a bound enters with its limit before the cut
    (``mp.lower_untruncated``), every other draw as it is, and the same mixture is
    solved (:func:`mixture_interval`). When ``lo`` sits on the lower bound (every draw
    cut there puts the mixture's tail on it) and that mixture's limit lies below it,
    the latter is the lower limit before the cut; likewise above."""
    lu, hu = mp.lower_untruncated, mp.upper_untruncated
    if lu is None or not (np.any(~np.isnan(lu)) or np.any(~np.isnan(hu))):
        return math.nan, math.nan
    b = _declared_bounds(eq) + [None, None]
    b_lo = -math.inf if b[0] is None else float(b[0])
    b_hi = math.inf if b[1] is None else float(b[1])
    ulo, uhi, _ = mixture_interval(mp.estimate, np.where(np.isnan(lu), mp.lower, lu),
                                   np.where(np.isnan(hu), mp.upper, hu), mc_level, df)
    return (ulo if lo == b_lo and ulo < b_lo else math.nan,
            uhi if hi == b_hi and uhi > b_hi else math.nan)


def _snapped(eq, mp, lo: float, hi: float) -> tuple[float, float]:
    """The limits with float noise at a bound removed (:func:`snap_to_bounds`): the
    file's physical bounds (``interval.inversion.bounds``) and the draws' own extreme
    limits."""
    declared = _declared_bounds(eq)
    los, his = np.asarray(mp.lower, float), np.asarray(mp.upper, float)
    los, his = los[np.isfinite(los)], his[np.isfinite(his)]
    spread = (hi - lo) if math.isfinite(hi - lo) else 1.0
    lo = snap_to_bounds(lo, declared + ([float(los.min())] if los.size else []), spread)
    hi = snap_to_bounds(hi, declared + ([float(his.max())] if his.size else []), spread)
    return lo, hi


