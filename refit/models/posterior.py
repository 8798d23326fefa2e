"""Posterior for climate from one or more forward fits (the model and the rules:
:mod:`refit.models.posterior_inputs`; the grid summaries: :mod:`refit.models.posterior_grid`).

:func:`climate_posterior` tabulates, for each fossil (row), the log posterior

    log prior(x) + Σ_k [ -(df_k+1)/2 log(1 + r_k(x)^2 / (df_k v_k(x))) - log(v_k(x)) / 2 ],
    r_k(x) = y0_k - f_k(x),   v_k(x) = s_k^2 + g_k(x)' V_k g_k(x) + sd_k^2,

on an even grid of the prior's support (``df = inf``: the normal's ``-r^2 / (2 v)``),
normalises it by the trapezoid rule and reads off median, mode, mean, SD, the equal-tailed
interval and the highest-density region; with two or more proxies in a row, the
consistency test below. Blocks of rows run on threads (:func:`refit._util.threads.on_threads`);
every row's numbers depend on that row alone.

Consistency of the proxies: each proxy's own likelihood, normalised over the grid (flat
over the prior's support, so an informative prior is not counted once per proxy), gives
a mean m_k and variance v_k; with the precision-weighted mean m = Σ m_k/v_k / Σ 1/v_k,
``chi2 = Σ (m_k - m)^2 / v_k`` on K - 1 degrees of freedom (the usual test of
homogeneity of independent estimates, e.g. Cochran's Q; from memory). The variances are
the proxies' predictive (new-observation) spreads carried to climate, never an in-sample
standard error. p below :data:`DISAGREE_P` flags ``proxies-disagree``.
"""

from __future__ import annotations

import math

import numpy as np

from refit._util.flagcodes import bit_codes, joined_names, text_by_code
from refit._util.threads import on_threads
from refit.errors import UsageError
from refit.models import posterior_grid as pg
from refit.models.posterior_inputs import (  # noqa: F401  (the public names)
    BLOCK_ROWS,
    DIP_FRACTION,
    DISAGREE_P,
    FLAG_CUT_BOUND,
    FLAG_CUT_PRIOR,
    FLAG_DISAGREE,
    FLAG_INVALID,
    FLAG_MISSING,
    FLAG_MULTIMODAL,
    FLAG_NO_SD,
    FLAG_ORDER,
    FLAG_OUTSIDE,
    FLAG_OUTSIDE_MEASUREMENT,
    MODE_FRACTION,
    N_GRID,
    SUMMARY_ROWS,
    ForwardProxy,
    Posterior,
    Prior,
    calibration_hull,
    check_prior_overlap,
    chi2_sf,
    cut_fraction,
    forward_proxy,
    log_prior,
    model_scale_inputs,
    normal_prior,
    physical_hull,
    prior_from_dict,
    student_t_logpdf,
    support,
    uniform_prior,
)


class _Tables:
    """Per-proxy grid tables shared by all rows: location, variance, t constants."""

    def __init__(self, proxies, grid):
        self.loc, self.var, self.half, self.inv = [], [], [], []
        for p in proxies:
            loc, var = p.location_variance(grid)
            self.loc.append(loc)
            self.var.append(var)
            self.half.append(-0.5 * np.log(var))
        self.df = [float(p.df) for p in proxies]


def _proxy_term(tab: _Tables, j: int, y, s, out, tmp):
    """``out[:] =`` proxy j's log predictive density at each row's y0 on the grid (up to a
    constant), rows with no value 0. ``y``, ``s`` (B,) model-scale value and SD."""
    df = tab.df[j]
    present = ~np.isnan(y)
    yv = np.where(present, y, 0.0)
    np.subtract(yv[:, None], tab.loc[j][None, :], out=out)
    np.square(out, out=out)
    if np.all(s == s[0]):                      # one SD for the block: grid-only variance
        var = tab.var[j] + s[0] * s[0]
        half = tab.half[j] if s[0] == 0 else -0.5 * np.log(var)
        if math.isinf(df):
            np.multiply(out, -0.5 / var, out=out)
        else:
            np.multiply(out, 1.0 / (df * var), out=out)
            np.log1p(out, out=out)
            np.multiply(out, -0.5 * (df + 1.0), out=out)
        np.add(out, half, out=out)
    else:
        np.add(tab.var[j][None, :], (s * s)[:, None], out=tmp)
        np.divide(out, tmp, out=out)
        if math.isinf(df):
            np.multiply(out, -0.5, out=out)
        else:
            np.multiply(out, 1.0 / df, out=out)
            np.log1p(out, out=out)
            np.multiply(out, -0.5 * (df + 1.0), out=out)
        np.log(tmp, out=tmp)
        np.multiply(tmp, -0.5, out=tmp)
        np.add(out, tmp, out=out)
    if not present.all():
        out[~present] = 0.0


def _exp_moments(lp, xc, wts, out_p=None):
    """exp(lp - row max) (into ``out_p`` if given), row argmax, and the trapezoid moments
    (mass, Σ x, Σ x^2 with x centred)."""
    idx = lp.argmax(axis=1)
    mx = lp[np.arange(lp.shape[0]), idx]
    p = np.subtract(lp, mx[:, None], out=out_p if out_p is not None else lp)
    np.exp(p, out=p)
    M = p @ np.column_stack([wts, wts * xc, wts * xc * xc])
    return p, idx, M


def _mean_sd(M, centre):
    mean = M[:, 1] / M[:, 0]
    var = np.maximum(M[:, 2] / M[:, 0] - mean * mean, 0.0)
    return mean + centre, np.sqrt(var)


class _Run:
    """One posterior run: grid, tables and the output arrays, filled block by block."""

    def __init__(self, proxies, y, s, prior, grid, level, keep_density, with_hdi=True):
        m, k = y.shape
        self.with_hdi = with_hdi
        self.proxies, self.y, self.s, self.level = proxies, y, s, level
        self.grid, self.h = grid, float(grid[1] - grid[0])
        self.tab = _Tables(proxies, grid)
        self.lprior = log_prior(prior, grid)
        self.centre = 0.5 * (grid[0] + grid[-1])
        self.xc = grid - self.centre
        self.wts = np.full(grid.size, self.h)
        self.wts[[0, -1]] *= 0.5
        self.starts = pg.chunk_starts(grid.size)
        self.n_present = (~np.isnan(y)).sum(axis=1)
        nan = lambda: np.full(m, np.nan)
        self.out = {key: nan() for key in ("median", "mode", "mean", "sd", "lower", "upper",
                                           "hdi_lower", "hdi_upper", "edge_lo", "edge_hi")}
        self.proxy_mean, self.proxy_sd = np.full((m, k), np.nan), np.full((m, k), np.nan)
        self.hdi = [[] for _ in range(m)]
        self.multimodal = np.zeros(m, dtype=bool)
        self.density = np.full((m, grid.size), np.nan) if keep_density else None

    def densities(self, P, r0, r1, scratch):
        """Unnormalised densities of rows r0..r1 into ``P`` (rows x G), in blocks of
        :data:`BLOCK_ROWS`; fills mean, SD, mode index and the per-proxy moments."""
        k = len(self.proxies)
        terms = scratch["terms"]
        for a in range(r0, r1, BLOCK_ROWS):
            b = min(r1, a + BLOCK_ROWS)
            n = b - a
            lp = P[a - r0:b - r0]
            lp[:] = self.lprior
            for j in range(k):
                t = terms[j][:n]
                _proxy_term(self.tab, j, self.y[a:b, j], self.s[a:b, j], t,
                            scratch["tmp"][:n])
                np.add(lp, t, out=lp)
            multi = self.n_present[a:b] >= 2
            if multi.any() and k >= 2:
                for j in range(k):
                    _, _, M = _exp_moments(terms[j][:n], self.xc, self.wts)
                    mean, sd = _mean_sd(M, self.centre)
                    keep = multi & ~np.isnan(self.y[a:b, j])
                    self.proxy_mean[a:b, j] = np.where(keep, mean, np.nan)
                    self.proxy_sd[a:b, j] = np.where(keep, sd, np.nan)
            p, idx, M = _exp_moments(lp, self.xc, self.wts)
            self.out["mean"][a:b], self.out["sd"][a:b] = _mean_sd(M, self.centre)
            self.out["mode"][a:b] = self._refined_mode(p, idx)

    def _refined_mode(self, p, idx):
        """Grid argmax refined by a parabola through the log density at its neighbours."""
        G = p.shape[1]
        rows = np.arange(p.shape[0])
        inner = (idx > 0) & (idx < G - 1)
        i = np.clip(idx, 1, G - 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            l0, lm, lp_ = (np.log(p[rows, i]), np.log(p[rows, i - 1]), np.log(p[rows, i + 1]))
            curv = lm - 2.0 * l0 + lp_
            delta = np.where(inner & (curv < 0), 0.5 * (lm - lp_) / curv, 0.0)
        delta = np.clip(np.nan_to_num(delta), -0.5, 0.5)
        return self.grid[0] + (idx + delta) * self.h

    def summarise(self, P, r0, r1):
        """Quantiles, HDI and the density-shape flags of rows r0..r1 (``P`` their
        unnormalised densities, each row's maximum 1)."""
        sl = slice(r0, r1)
        rows = pg.GridRows(P, self.h, self.starts)
        x0, lv = float(self.grid[0]), self.level
        o = self.out
        o["median"][sl] = rows.quantile(0.5, x0)
        o["lower"][sl] = rows.quantile(0.5 - lv / 2, x0)
        o["upper"][sl] = rows.quantile(0.5 + lv / 2, x0)
        o["edge_lo"][sl], o["edge_hi"][sl] = P[:, 0], P[:, -1]
        screen = pg.raw_peak_counts(P) > 1
        if self.with_hdi and not screen.all():
            one = rows if not screen.any() else pg.GridRows(P[~screen], self.h, self.starts)
            lo, hi = pg.hdi_unimodal(one, lv, x0)
            where = np.arange(r0, r1)[~screen]
            o["hdi_lower"][where], o["hdi_upper"][where] = lo, hi
            for i, a, b in zip(where, lo, hi):
                self.hdi[i] = [(float(a), float(b))]
        for i in np.flatnonzero(screen):
            row = P[i]
            modes = pg.significant_modes(row, MODE_FRACTION, DIP_FRACTION)
            pieces = pg.hdi_pieces(row, self.grid, lv)
            g = r0 + i
            self.multimodal[g] = len(modes) > 1
            self.hdi[g] = pieces
            o["hdi_lower"][g], o["hdi_upper"][g] = pieces[0][0], pieces[-1][1]
        if self.density is not None:
            self.density[sl] = P / rows.total[:, None]


def _grid(prior: Prior, proxies, n_grid: int) -> np.ndarray:
    if int(n_grid) != n_grid or n_grid < 16:
        raise UsageError(f"n_grid must be a whole number >= 16; got {n_grid!r}")
    lo, hi = support(prior, proxies)
    return np.linspace(lo, hi, int(n_grid))


def climate_posterior(proxies, values, sd=None, *, prior: Prior | None = None,
                      level: float = 0.95, n_grid: int = N_GRID,
                      keep_density: bool = False, hdi: bool = True) -> Posterior:
    """Posterior for climate of each fossil given its measured features.

    Parameters
    ----------
    proxies : list of ForwardProxy
        One per feature (:func:`forward_proxy` of a fit, or
        :func:`refit.coefficients.posterior.proxy_from_record` of a coefficient file), all
        for the same climate variable.
    values : array_like, shape (m, K)
        Measured features, column k for proxy k [each feature's unit]; NaN: not measured
        (that proxy is left out of the row). One proxy takes shape (m,).
    sd : float or array_like, optional
        Measurement SDs of the values [their units]: one number, one per proxy, or (m, K).
        NaN beside a value: taken as 0, flagged ``measurement-sd-missing``.
    prior : Prior, optional
        Default: uniform over the smallest interval holding the proxies' calibration
        ranges of climate. Always cut to the physical bounds.
    level : float
        Probability of the equal-tailed interval and the highest-density region.
    n_grid : int
        Grid points over the prior's support.
    keep_density : bool
        Keep the normalised density (m x n_grid) in the result.
    hdi : bool
        Compute the highest-density region of unimodal rows (about a third of the time
        for many rows); multimodal rows always get theirs.

    Returns
    -------
    Posterior

    Raises
    ------
    UsageError
        No proxy, a level outside (0, 1), a prior that excludes the calibration range or
        the physical bounds, a proxy with zero predictive variance.
    InvalidDataError
        An infinite measurement, a negative or infinite measurement SD.
    """
    proxies = list(proxies)
    if not proxies:
        raise UsageError("the posterior needs at least one proxy (a forward fit)")
    if not 0.0 < float(level) < 1.0:
        raise UsageError(f"level must lie strictly between 0 and 1; got {level!r}")
    if prior is None:
        prior = uniform_prior(*calibration_hull(proxies))
    grid = _grid(prior, proxies, n_grid)
    check_prior_overlap(prior, proxies, grid)
    y, s, missing, invalid, outside, no_sd = model_scale_inputs(proxies, values, sd)
    ok = (~np.isnan(y)).any(axis=1)               # rows with at least one usable value
    run = _Run(proxies, y[ok], s[ok], prior, grid, float(level), keep_density, hdi)
    _compute(run)
    return _result(run, ok, prior, missing, invalid, outside, no_sd)


def _compute(run: _Run) -> None:
    """Densities and summaries, in blocks of :data:`SUMMARY_ROWS` rows on threads."""
    m, G, k = run.y.shape[0], run.grid.size, len(run.proxies)
    if m == 0:
        return
    step = min(SUMMARY_ROWS, m)

    def block(r0):
        r1 = min(m, r0 + step)
        P = np.empty((r1 - r0, G))
        scratch = {"terms": [np.empty((BLOCK_ROWS, G)) for _ in range(k)],
                   "tmp": np.empty((BLOCK_ROWS, G))}
        run.densities(P, r0, r1, scratch)
        run.summarise(P, r0, r1)

    on_threads(block, range(0, m, step))


def _consistency(mean: np.ndarray, sd: np.ndarray):
    """chi2, degrees of freedom and p-value of the proxies' own means against their
    precision-weighted mean (NaN where fewer than two proxies were measured)."""
    w = 1.0 / (sd * sd)
    present = np.isfinite(w) & np.isfinite(mean)
    w, mean = np.where(present, w, 0.0), np.where(present, mean, 0.0)
    dof = present.sum(axis=1) - 1
    with np.errstate(invalid="ignore", divide="ignore"):
        pooled = (w * mean).sum(axis=1) / w.sum(axis=1)
        chi2 = (w * (mean - pooled[:, None]) ** 2).sum(axis=1)
    chi2 = np.where(dof >= 1, chi2, np.nan)
    p = np.where(dof >= 1, chi2_sf(np.nan_to_num(chi2), np.maximum(dof, 1)), np.nan)
    return chi2, np.where(dof >= 1, dof, 0), p


def _spread(values, ok, fill=np.nan):
    out = np.full((ok.size,) + np.shape(values)[1:], fill, dtype=float)
    out[ok] = values
    return out


def _result(run: _Run, ok, prior, missing, invalid, outside, no_sd) -> Posterior:
    """The :class:`Posterior` of all rows (those without a usable value NaN) and its flags."""
    o = {key: _spread(v, ok) for key, v in run.out.items()}
    pmean, psd = _spread(run.proxy_mean, ok), _spread(run.proxy_sd, ok)
    chi2, dof, p = _consistency(pmean, psd)
    multimodal = _spread(run.multimodal, ok, 0.0) > 0
    hdi = [[] for _ in range(ok.size)]
    for i, r in enumerate(np.flatnonzero(ok)):
        hdi[r] = run.hdi[i]
    g0, g1 = float(run.grid[0]), float(run.grid[-1])
    b_lo, b_hi = physical_hull(run.proxies)
    c_lo, c_hi = calibration_hull(run.proxies)
    with np.errstate(invalid="ignore"):
        cut = cut_fraction(run.level)
        lo_cut, hi_cut = o["edge_lo"] >= cut, o["edge_hi"] >= cut
        masks = {
            FLAG_MISSING: ~ok & ~invalid.any(axis=1),
            FLAG_INVALID: invalid.any(axis=1),
            FLAG_OUTSIDE_MEASUREMENT: outside.any(axis=1),
            FLAG_OUTSIDE: (o["median"] < c_lo) | (o["median"] > c_hi),
            FLAG_MULTIMODAL: multimodal,
            FLAG_DISAGREE: p < DISAGREE_P,
            FLAG_CUT_PRIOR: (lo_cut & (g0 > b_lo)) | (hi_cut & (g1 < b_hi)),
            FLAG_CUT_BOUND: (lo_cut & (g0 <= b_lo)) | (hi_cut & (g1 >= b_hi)),
            FLAG_NO_SD: no_sd.any(axis=1),
        }
    codes = bit_codes([masks[f] for f in FLAG_ORDER], ok.size)
    flags = text_by_code(codes, lambda code: joined_names(FLAG_ORDER, code))
    density = None if run.density is None else _spread(run.density, ok)
    return Posterior(
        median=o["median"], mode=o["mode"], mean=o["mean"], sd=o["sd"], lower=o["lower"],
        upper=o["upper"], hdi_lower=o["hdi_lower"], hdi_upper=o["hdi_upper"], hdi=hdi,
        flags=flags, chi2=chi2, chi2_dof=dof, chi2_p=p, proxy_mean=pmean, proxy_sd=psd,
        outside=outside, level=run.level, prior=prior.to_dict(),
        grid={"low": g0, "high": g1, "points": int(run.grid.size)},
        proxies=[p_.name for p_ in run.proxies], density=density)
