"""Posterior for climate from one or more forward fits (the model and the rules:
:mod:`refit.models.posterior_inputs`; the grid summaries: :mod:`refit.models.posterior_grid`).

:func:`climate_posterior` tabulates, for each fossil (row), the log posterior

    log prior(x) + Σ_k [ -(df_k+1)/2 log(1 + r_k(x)^2 / (df_k v_k(x))) - log(v_k(x)) / 2 ],
    r_k(x) = y0_k - f_k(x),   v_k(x) = s_k^2 + g_k(x)' V_k g_k(x) + sd_k^2,

on an even grid of the prior's support (``df = inf``: the normal's ``-r^2 / (2 v)``),
normalises it by the trapezoid rule and reads off median, mode, mean, SD, the equal-tailed
interval and the highest-density region; with two or more proxies in a row, the
consistency test below. Blocks of rows run on threads (:func:`refit._util.threads.on_threads`);
every row's numbers depend on that row alone, bit for bit (the same operations in the same
order whatever the other rows of a block hold).

Speed (``benchmarks/posterior.py``): what depends on the grid alone is computed once per
run (f_k, v_k, and for a measurement SD shared by all rows the value-free part of each
term, see :class:`refit.models.posterior_terms._Tables`); proxies with one df share one logarithm; every full-grid pass
is made on blocks of :data:`BLOCK_ROWS` rows that stay in cache; the log density is floored
:data:`LOG_FLOOR` below each row's peak before exp (subnormal results make numpy's exp about
fifty times slower); quantiles come from chunk sums (:mod:`refit.models.posterior_grid`),
never a sort or a full cumulative sum; the HDI from Newton steps, each solved inside the
cell of the step before where it stays there. Threads run side by side only while numpy
has released the interpreter lock: the per-row sums are ``numpy.einsum`` loops (a BLAS
product of a few columns and ``numpy.add.reduceat`` hold a lock), each thread keeps its
buffers, and ``Posterior.hdi`` is a view built per row only when read.

Consistency of the proxies: each proxy's own likelihood, normalised over its own support
(:func:`likelihood_grid`: flat over the calibration range widened by its width on either
side, so an informative prior is not counted once per proxy and a proxy reading a climate
beyond the prior's range is seen where it points), gives
a mean m_k and variance v_k; with the precision-weighted mean m = Σ m_k/v_k / Σ 1/v_k,
``chi2 = Σ (m_k - m)^2 / v_k`` on K - 1 degrees of freedom (the usual test of
homogeneity of independent estimates, e.g. Cochran's Q; from memory). The variances are
the proxies' predictive (new-observation) spreads carried to climate, never an in-sample
standard error. p below :data:`DISAGREE_P` flags ``proxies-disagree``.
"""

from __future__ import annotations

import threading

import numpy as np

from refit._util.flagcodes import bit_codes, joined_names, text_by_code
from refit._util.threads import on_threads
from refit.errors import UsageError
from refit.models import posterior_grid as pg
from refit.models.posterior_inputs import (  # noqa: F401  (the public names)
    BLOCK_ROWS,
    CONSISTENCY_MIN_POINTS,
    CONSISTENCY_STEP,
    CONSISTENCY_WIDEN,
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
    LOG_FLOOR,
    MODE_FRACTION,
    N_GRID,
    OWN_ROWS,
    SUMMARY_ROWS,
    ForwardProxy,
    HdiPieces,
    Posterior,
    Prior,
    calibration_hull,
    check_prior_overlap,
    chi2_sf,
    cut_fraction,
    forward_proxy,
    likelihood_grid,
    log_prior,
    model_scale_inputs,
    normal_prior,
    physical_hull,
    prior_from_dict,
    student_t_logpdf,
    support,
    uniform_prior,
)
from refit.models.posterior_terms import (
    _Even,
    _log_likelihoods,
    _log_likelihoods_apart,
    _mean_sd,
    _row_moments,
    _scratch,
    _Tables,
    chunk_sums,
)


class _Run:
    """One posterior run: grid, tables and the output arrays, filled block by block."""

    def __init__(self, proxies, y, s, prior, grid, level, keep_density, with_hdi=True):
        m, k = y.shape
        self.with_hdi = with_hdi
        self.proxies, self.y, self.s, self.level = proxies, y, s, level
        self.grid, self.h = grid, float(grid[1] - grid[0])
        self.even = _Even(grid)
        self.tab = _Tables(proxies, grid)
        self.lprior = log_prior(prior, grid)
        self.starts = pg.chunk_starts(grid.size)
        self.n_present = (~np.isnan(y)).sum(axis=1)
        if k >= 2 and (self.n_present >= 2).any():
            self.own = _Even(likelihood_grid(prior, proxies, grid.size))
            self.own_tab = _Tables(proxies, self.own.grid, checked=False)
            self.zero_own = np.zeros(self.own.grid.size)
        nan = lambda: np.full(m, np.nan)
        self.out = {key: nan() for key in ("median", "mode", "mean", "sd", "lower", "upper",
                                           "hdi_lower", "hdi_upper", "edge_lo", "edge_hi")}
        self.proxy_mean, self.proxy_sd = np.full((m, k), np.nan), np.full((m, k), np.nan)
        self.several: dict = {}      # rows with their own HDI pieces (screened rows)
        self.multimodal = np.zeros(m, dtype=bool)
        self.peaks = np.zeros(m, dtype=np.int64)
        self.dead = np.zeros(m, dtype=bool)
        self.density = np.full((m, grid.size), np.nan) if keep_density else None

    def densities(self, P, sums, r0, r1, scratch):
        """Unnormalised densities of rows r0..r1 into ``P`` (rows x G, each row's maximum
        1) and their chunk sums into ``sums``, in blocks of :data:`BLOCK_ROWS` rows that
        stay in cache while every full-grid pass is made (moments, chunk sums, edges, the
        peak screen); then mean, SD and mode of the rows, and the proxies' own moments
        for the consistency test."""
        ev, n_all = self.even, r1 - r0
        M = np.empty((n_all, 3))
        idx = np.empty(n_all, dtype=np.int64)
        near = np.empty((3, n_all))
        W = ev.moment_weights
        for a in range(0, n_all, BLOCK_ROWS):
            b = min(n_all, a + BLOCK_ROWS)
            lp = P[a:b]
            y, s_ = self.y[r0 + a:r0 + b], self.s[r0 + a:r0 + b]
            t, tmp = (_scratch(scratch, key, b - a, lp.shape[1]) for key in ("t", "tmp"))
            with np.errstate(over="ignore", invalid="ignore"):   # absurd values: inf
                _log_likelihoods(self.tab, y, s_, self.lprior, lp, t, tmp, pool=scratch)
            rows = np.arange(b - a)
            k = lp.argmax(axis=1)
            if not np.all(np.isfinite(lp[rows, k])):
                bad = np.flatnonzero(~np.isfinite(lp[rows, k]))
                part = lp[bad]
                with np.errstate(over="ignore", invalid="ignore"):
                    _log_likelihoods_apart(self.tab, y[bad], s_[bad], self.lprior, part,
                                           t[:bad.size], tmp[:bad.size])
                lp[bad] = part
                dead = bad[~np.isfinite(part.max(axis=1))]
                if dead.size:   # zero everywhere in floating point: no reading (NaN, flag)
                    self.dead[r0 + a + dead] = True
                    lp[dead] = 0.0
                k = lp.argmax(axis=1)
            idx[a:b] = k
            i = np.clip(k, 1, lp.shape[1] - 2)
            m0 = lp[rows, i]
            near[0, a:b], near[1, a:b], near[2, a:b] = lp[rows, i - 1] - m0, 0.0, \
                lp[rows, i + 1] - m0
            np.subtract(lp.T, lp[rows, k], out=lp.T)    # each row less its peak
            if lp.min() < LOG_FLOOR:     # (a Student t's tails rarely fall that far)
                np.maximum(lp, LOG_FLOOR, out=lp)  # exp then never leaves the normals
            np.exp(lp, out=lp)
            _row_moments(lp, W, M[a:b])
            chunk_sums(lp, self.starts, sums[a:b])
            self.peaks[r0 + a:r0 + b] = pg.raw_peak_counts(lp)
        sl = slice(r0, r1)
        self.out["edge_lo"][sl], self.out["edge_hi"][sl] = P[:, 0], P[:, -1]
        self.out["mean"][sl], self.out["sd"][sl] = _mean_sd(M, ev.centre)
        self.out["mode"][sl] = self._refined_mode(idx, near)
        if len(self.proxies) >= 2:
            multi = np.flatnonzero(self.n_present[sl] >= 2)
            for a in range(0, multi.size, OWN_ROWS):
                self._own_moments(r0 + multi[a:a + OWN_ROWS])

    def _own_moments(self, rows):
        """Each proxy's own likelihood, flat over :func:`likelihood_grid`: its mean and SD
        for ``rows`` (which measured two or more proxies)."""
        own, tab = self.own, self.own_tab
        n, G = rows.size, own.grid.size
        lq, t, tmp = (np.empty((n, G)) for _ in range(3))
        y, s = self.y[rows], self.s[rows]
        for j in range(len(self.proxies)):
            keep = ~np.isnan(y[:, j])
            if not keep.any():
                continue
            with np.errstate(over="ignore", invalid="ignore"):
                _log_likelihoods(tab, y, s, self.zero_own, lq, t, tmp, which=(j,))
            if not tab.finite:                       # beyond where the fit can be read
                lq[:, np.isnan(tab.var[j])] = -np.inf
            with np.errstate(invalid="ignore"):       # a dead row (-inf everywhere): NaN
                np.subtract(lq, lq.max(axis=1)[:, None], out=lq)
            np.maximum(lq, LOG_FLOOR, out=lq)
            np.exp(lq, out=lq)
            mean, sd = _mean_sd(_row_moments(lq, own.moment_weights), own.centre)
            self.proxy_mean[rows, j] = np.where(keep, mean, np.nan)
            self.proxy_sd[rows, j] = np.where(keep, sd, np.nan)

    def _refined_mode(self, idx, near):
        """Grid argmax refined by a parabola through the log density at it and its
        neighbours (``near``: (3, n) log densities at i-1, i, i+1 less the one at i)."""
        G = self.grid.size
        inner = (idx > 0) & (idx < G - 1)
        lm, lp_ = near[0], near[2]
        with np.errstate(divide="ignore", invalid="ignore"):
            curv = lm + lp_                          # l(i-1) - 2 l(i) + l(i+1), l(i) = 0
            delta = np.where(inner & (curv < 0), 0.5 * (lm - lp_) / curv, 0.0)
        delta = np.clip(np.nan_to_num(delta), -0.5, 0.5)
        return self.grid[0] + (idx + delta) * self.h

    def summarise(self, P, sums, r0, r1):
        """Quantiles, HDI and the density-shape flags of rows r0..r1 (``P`` their
        unnormalised densities, each row's maximum 1; ``sums`` their chunk sums)."""
        sl = slice(r0, r1)
        rows = pg.GridRows(P, self.h, self.starts, sums)
        x0, lv = float(self.grid[0]), self.level
        o = self.out
        half_out = 0.5 - lv / 2
        o["median"][sl] = rows.quantile(0.5, x0)
        lower = rows.quantile_index(half_out * rows.total)
        upper = rows.quantile_index((1.0 - half_out) * rows.total)
        o["lower"][sl] = x0 + (lower[0] + lower[1]) * self.h
        o["upper"][sl] = x0 + (upper[0] + upper[1]) * self.h
        screen = self.peaks[sl] > 1
        if self.with_hdi and not screen.all():
            one = np.flatnonzero(~screen)
            lo, hi = pg.hdi_unimodal(rows, lv, x0, one, (lower[0][one], lower[1][one]),
                                     (upper[0][one], upper[1][one]))
            where = r0 + one
            o["hdi_lower"][where], o["hdi_upper"][where] = lo, hi
        for i in np.flatnonzero(screen):
            row = P[i]
            modes = pg.significant_modes(row, MODE_FRACTION, DIP_FRACTION)
            pieces = pg.hdi_pieces(row, self.grid, lv)
            g = r0 + int(i)
            self.multimodal[g] = len(modes) > 1
            self.several[g] = pieces
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
    m, G = run.y.shape[0], run.grid.size
    if m == 0:
        return
    step = min(SUMMARY_ROWS, m)
    mine = threading.local()   # each thread's buffers, made once: a fresh block of this
    # size is new memory from the system every time, and faulting its pages in from two
    # threads at once serialises them

    def block(r0):
        r1 = min(m, r0 + step)
        if not hasattr(mine, "P"):
            mine.P = np.empty((step, G))
            mine.sums = np.empty((step, run.starts.size))
            mine.scratch = {}        # the density blocks' scratch (_scratch keeps it)
        P, sums = mine.P[:r1 - r0], mine.sums[:r1 - r0]
        run.densities(P, sums, r0, r1, mine.scratch)
        run.summarise(P, sums, r0, r1)

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


def _grid_record(grid: np.ndarray) -> dict:
    return {"low": float(grid[0]), "high": float(grid[-1]), "points": int(grid.size)}


def _spread(values, ok, fill=np.nan):
    out = np.full((ok.size,) + np.shape(values)[1:], fill, dtype=float)
    out[ok] = values
    return out


def _result(run: _Run, ok, prior, missing, invalid, outside, no_sd) -> Posterior:
    """The :class:`Posterior` of all rows (those without a usable value NaN) and its flags."""
    dead = _spread(run.dead, ok, 0.0) > 0
    for key in run.out:
        run.out[key][run.dead] = np.nan
    run.proxy_mean[run.dead], run.proxy_sd[run.dead] = np.nan, np.nan
    for i in np.flatnonzero(run.dead):
        run.several.pop(int(i), None)
        run.multimodal[i] = False
    o = {key: _spread(v, ok) for key, v in run.out.items()}
    pmean, psd = _spread(run.proxy_mean, ok), _spread(run.proxy_sd, ok)
    chi2, dof, p = _consistency(pmean, psd)
    multimodal = _spread(run.multimodal, ok, 0.0) > 0
    where = np.flatnonzero(ok)
    hdi = HdiPieces(o["hdi_lower"], o["hdi_upper"],
                    {int(where[i]): pieces for i, pieces in run.several.items()})
    g0, g1 = float(run.grid[0]), float(run.grid[-1])
    b_lo, b_hi = physical_hull(run.proxies)
    c_lo, c_hi = calibration_hull(run.proxies)
    with np.errstate(invalid="ignore"):
        cut = cut_fraction(run.level)
        lo_cut, hi_cut = o["edge_lo"] >= cut, o["edge_hi"] >= cut
        masks = {
            FLAG_MISSING: ~ok & ~invalid.any(axis=1),
            FLAG_INVALID: invalid.any(axis=1) | dead,
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
        consistency_grid=_grid_record(run.own.grid) if hasattr(run, "own") else None,
        proxies=[p_.name for p_ in run.proxies], density=density)
