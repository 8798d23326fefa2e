"""Two-segment (broken-stick) straight line and its comparison with a single line.

Used to detect thresholds and saturation: beyond a breakpoint where the response flattens,
the feature no longer tells climates apart.

References
----------
.. [1] Hudson, D. J. (1966). Fitting segmented curves whose join points have to be
   estimated. JASA 61:1097-1129.
.. [2] Muggeo, V. M. R. (2003). Estimating regression models with unknown break-points.
   Statistics in Medicine 22:3055-3071 (standard error of the breakpoint).
.. [3] Davies, R. B. (1987). Hypothesis testing when a nuisance parameter is present only
   under the alternative. Biometrika 74:33-43.
.. [4] Kass, R. E. & Raftery, A. E. (1995). Bayes factors. JASA 90:773-795 (BIC
   differences above 10 as "very strong" evidence).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.linalg import _line_xy, _qr

__all__ = ["BrokenStickResult", "fit_broken_stick"]

P_THRESHOLD = 0.01      # common practice: "clearly better" needs p < 0.01 ...
BIC_THRESHOLD = 10.0    # ... and a BIC gain above 10 (Kass & Raftery 1995, "very strong")


@dataclass
class BrokenStickResult:
    """Continuous two-segment line y = b0 + b1 x + b2 (x - c)_+ and its comparison.

    Attributes
    ----------
    breakpoint : float
        c [units of x].
    breakpoint_se : float
        Asymptotic standard error of c (Gauss-Newton / delta method, [2]_) [units of x];
        inf when the slopes barely differ.
    breakpoint_interval : tuple of float
        Profile-likelihood interval of c at ``level`` [units of x]; an end equal to the
        admissible range's end means the interval is open on that side.
    slope_left, slope_right : float
        b1 and b1 + b2 [units of y per unit of x].
    slope_left_se, slope_right_se : float
        Their standard errors (at the estimated c).
    coefficients : ndarray, shape (4,)
        b0, b1, b2, c.
    covariance : ndarray, shape (4, 4)
        s^2 (J'J)^-1 with J the Jacobian of the model in (b0, b1, b2, c).
    rss, rss_line : float
        Residual sums of squares of the segmented and single-line fits [units of y^2].
    f_statistic, f_pvalue : float
        F = ((rss_line - rss)/2) / (rss/(n - 4)) on (2, n - 4) df and its nominal p-value.
    bic, bic_line, delta_bic : float
        BIC = n ln(rss/n) + k ln n with k = 5 (segmented) or 3 (line), both counting
        sigma; delta_bic = bic_line - bic (positive favours the segmented fit).
    clearly_better : bool
        f_pvalue < 0.01 and delta_bic > 10.
    verdict : str
        One sentence for reports.
    level : float
    n : int
    """

    breakpoint: float
    breakpoint_se: float
    breakpoint_interval: tuple
    slope_left: float
    slope_right: float
    slope_left_se: float
    slope_right_se: float
    coefficients: np.ndarray
    covariance: np.ndarray
    rss: float
    rss_line: float
    f_statistic: float
    f_pvalue: float
    bic: float
    bic_line: float
    delta_bic: float
    clearly_better: bool
    verdict: str
    level: float
    n: int


#: elements (rows x candidate breakpoints) of one block of hinge columns in
#: :func:`_profile_rss`: 16 MB of float64 per work array, whatever the table size
PROFILE_BLOCK_ELEMENTS = 1 << 21
#: grid values whose running-sum RSS is re-computed exactly before the minimum is taken
EXACT_CHECKS = 32


def _profile_rss(x, y, cs):
    """RSS of the best line-plus-hinge fit for each breakpoint in ``cs`` (vectorised).

    Adding the column h_c = (x - c)_+ to the line [1, x] lowers the line's RSS by
    (h~' e)^2 / (h~' h~), h~ = h_c with its projection on [1, x] removed, e the line
    residuals (a rank-one update of the least-squares fit). The hinge columns are formed
    in blocks of at most :data:`PROFILE_BLOCK_ELEMENTS` elements (the columns are
    independent, so blocks change no number), which bounds the memory.
    """
    Q, _ = _qr(np.column_stack([np.ones_like(x), x]), "fit_broken_stick")
    e = y - Q @ (Q.T @ y)
    cs = np.atleast_1d(np.asarray(cs, dtype=float))
    gain = np.empty(len(cs))
    step = max(1, PROFILE_BLOCK_ELEMENTS // max(len(x), 1))
    for first in range(0, len(cs), step):
        sl = slice(first, first + step)
        H = np.maximum(x[:, None] - cs[None, sl], 0.0)
        H -= Q @ (Q.T @ H)
        den = np.sum(H**2, axis=0)
        gain[sl] = np.where(den > 0, (H.T @ e) ** 2 / np.where(den > 0, den, 1.0), 0.0)
    return float(e @ e) - gain


def _profile_rss_sums(x, y, cs):
    """As :func:`_profile_rss` for many breakpoints at once, from running sums on sorted x.

    With u = (x - mean) / sd (a hinge in u is the hinge in x times 1/sd, which leaves the
    RSS gain unchanged), ``S`` the rows with u > c and suffix sums over ``S`` of
    1, u, u^2, e, u e: h'e = sum(u e) - c sum(e), h'h = sum(u^2) - 2 c sum(u) + c^2 n_S,
    and the projection on [1, u] (orthogonal, as u is centred) removes
    (h'1)^2 / n + (h'u)^2 / sum_all(u^2). O(n log n + len(cs)) time, O(n) memory.
    Where the hinge is nearly collinear with the line (the denominator is below 1e-8 of
    the size of its terms, so cancellation could spoil it), the exact rank-one update
    of :func:`_profile_rss` is used instead.
    """
    Q, _ = _qr(np.column_stack([np.ones_like(x), x]), "fit_broken_stick")
    e = y - Q @ (Q.T @ y)
    sd = float(np.std(x)) or 1.0
    u = (x - float(np.mean(x))) / sd
    order = np.argsort(u, kind="stable")
    us, es = u[order], e[order]
    cols = np.column_stack([np.ones_like(us), us, us * us, es, us * es])
    tail = np.vstack([np.cumsum(cols[::-1], axis=0)[::-1], np.zeros((1, 5))])
    cu = (np.asarray(cs, dtype=float) - float(np.mean(x))) / sd
    n_s, a1, a2, e0, e1 = tail[np.searchsorted(us, cu, "right")].T
    he = e1 - cu * e0
    h1, hu = a1 - cu * n_s, a2 - cu * a1
    scale = a2 + cu * cu * n_s + 2 * np.abs(cu * a1)
    den = (a2 - 2 * cu * a1 + cu * cu * n_s) - h1 * h1 / len(x) - hu * hu / float(u @ u)
    with np.errstate(divide="ignore", invalid="ignore"):
        rss = float(e @ e) - np.where(den > 0, he * he / den, 0.0)
    shaky = ~(den > 1e-8 * scale)
    if shaky.any():
        rss[shaky] = _profile_rss(x, y, np.asarray(cs, dtype=float)[shaky])
    return rss


def _fit_at(x, y, c):
    """OLS of y on [1, x, (x - c)_+]: coefficients and RSS."""
    X = np.column_stack([np.ones_like(x), x, np.maximum(x - c, 0.0)])
    b = np.linalg.lstsq(X, y, rcond=None)[0]
    r = y - X @ b
    return b, float(r @ r)


def _admissible_range(x, min_points):
    xs = np.sort(x)
    lo, hi = xs[min_points - 1], xs[-min_points]
    if not lo < hi:
        raise InvalidDataError(
            f"fit_broken_stick: with {len(x)} rows there is no breakpoint leaving "
            f"{min_points} rows on each side; add rows spread over x or lower min_points.")
    return float(lo), float(hi)


def _best_breakpoint(x, y, lo, hi, n_grid):
    from scipy.optimize import minimize_scalar

    grid = np.unique(np.r_[np.linspace(lo, hi, n_grid), x[(x >= lo) & (x <= hi)]])
    rss = _profile_rss_sums(x, y, grid)
    best = np.argsort(rss, kind="stable")[:EXACT_CHECKS]  # the minimum from exact values
    rss[best] = _profile_rss(x, y, grid[best])
    i = int(np.argmin(rss))
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    best_c, best_rss = grid[i], rss[i]
    if b > a:
        opt = minimize_scalar(lambda c: _profile_rss(x, y, [c])[0], bounds=(a, b),
                              method="bounded", options={"xatol": 1e-10 * (hi - lo)})
        if opt.fun < best_rss:
            best_c, best_rss = float(opt.x), float(opt.fun)
    return float(best_c), float(best_rss), grid, rss


def _profile_interval(x, y, c, rss_min, lo, hi, grid, rss, level):
    """Connected set around c of {t: RSS(t) <= RSS_min (1 + F_(1, n-4; level)/(n-4))}.

    Ends are found with a bracketing root finder between c and the nearest grid point
    whose RSS exceeds the cut; a side that never exceeds it stops at the range end.
    """
    from scipy import stats
    from scipy.optimize import brentq

    n = len(x)
    cut = rss_min * (1 + stats.f.ppf(level, 1, n - 4) / (n - 4))
    f = lambda t: _profile_rss(x, y, [t])[0] - cut  # noqa: E731
    ends = []
    for side, edge_of_range in ((grid < c, lo), (grid > c, hi)):
        pts, vals = grid[side], rss[side]
        order = np.argsort(np.abs(pts - c))
        above = pts[order][vals[order] > cut]
        if above.size == 0:
            ends.append(edge_of_range)
        else:
            g = above[0]
            ends.append(brentq(f, min(g, c), max(g, c), xtol=1e-12 * (hi - lo)))
    return float(ends[0]), float(ends[1])


def _covariance(x, coef, rss):
    """s^2 (J'J)^-1 at the estimate; J columns: 1, x, (x - c)_+, -b2 1{x > c} [2]_.

    When the two slopes are equal (b2 = 0) the breakpoint is not identified: its
    variance is inf and the other entries are those of the fit at fixed c.
    """
    b0, b1, b2, c = coef
    J = np.column_stack([np.ones_like(x), x, np.maximum(x - c, 0.0), -b2 * (x > c)])
    s2 = rss / (len(x) - 4)
    _, sv, Vt = np.linalg.svd(J, full_matrices=False)
    if sv[-1] > 1e-10 * sv[0]:
        return s2 * (Vt.T / sv**2) @ Vt
    cov = np.full((4, 4), np.nan)
    _, sv3, Vt3 = np.linalg.svd(J[:, :3], full_matrices=False)
    cov[:3, :3] = s2 * (Vt3.T / sv3**2) @ Vt3
    cov[3, 3] = np.inf
    return cov


def fit_broken_stick(x, y, *, level=0.95, min_points=3, n_grid=200) -> BrokenStickResult:
    """Fit a continuous two-segment line and say whether it clearly beats one line.

    Parameters
    ----------
    x : array_like, shape (n,)
        Predictor [units of x].
    y : array_like, shape (n,)
        Response [units of y].
    level : float
        Level of the profile-likelihood interval of the breakpoint.
    min_points : int
        Fewest rows on each side of the breakpoint (at least 2).
    n_grid : int
        Grid size of the breakpoint search (data values are added to the grid).

    Returns
    -------
    BrokenStickResult

    Notes
    -----
    Model y = b0 + b1 x + b2 (x - c)_+ (Hudson [1]_). The profile RSS(c) is computed for a
    grid (running sums on sorted x; the best :data:`EXACT_CHECKS` again by a rank-one
    update of the straight-line fit) and refined between the grid
    neighbours of its minimum with a bounded scalar minimiser. Uncertainty of c: the
    asymptotic standard error s sqrt[(J'J)^-1]_cc [2]_ and a profile-likelihood interval
    from the F(1, n - 4) cut. Comparison with one line: F on (2, n - 4) df and BIC.
    The nominal F p-value is optimistic because c is not defined under a single line
    (Davies [3]_); hence "clearly better" also asks for a BIC gain above 10 [4]_. Both
    thresholds are common practice, not laws.
    """
    who = "fit_broken_stick"
    if not 0 < level < 1:
        raise UsageError(f"{who}: level must lie between 0 and 1; got {level!r}.")
    if not (isinstance(min_points, (int, np.integer)) and min_points >= 2):
        raise UsageError(f"{who}: min_points must be an integer of at least 2; "
                         f"got {min_points!r}.")
    x, y = _line_xy(x, y, who)
    n = len(x)
    if n < max(2 * min_points, 7):
        raise InvalidDataError(
            f"{who}: {n} rows are too few for a two-segment line; at least "
            f"{max(2 * min_points, 7)} are needed (4 coefficients, {min_points} rows on "
            f"each side).")
    from scipy import stats

    lo, hi = _admissible_range(x, min_points)
    c, _, grid, rss_grid = _best_breakpoint(x, y, lo, hi, n_grid)
    b, rss = _fit_at(x, y, c)
    coef = np.r_[b, c]
    cov = _covariance(x, coef, rss)
    interval = _profile_interval(x, y, c, rss, lo, hi, grid, rss_grid, level)
    rss_line = float(_profile_rss(x, y, [x.max()])[0])      # hinge column all zero
    f_stat = ((rss_line - rss) / 2) / (rss / (n - 4)) if rss > 0 else np.inf
    p = float(stats.f.sf(f_stat, 2, n - 4))
    bic = n * np.log(max(rss, 1e-300) / n) + 5 * np.log(n)
    bic_line = n * np.log(max(rss_line, 1e-300) / n) + 3 * np.log(n)
    dbic = float(bic_line - bic)
    better = bool(p < P_THRESHOLD and dbic > BIC_THRESHOLD)
    slope_right = b[1] + b[2]
    var_right = cov[1, 1] + cov[2, 2] + 2 * cov[1, 2]
    verdict = (
        f"The two-segment fit is clearly better than one line (F p = {p:.2g}, BIC lower "
        f"by {dbic:.1f}); breakpoint at {c:.4g} [{interval[0]:.4g}, {interval[1]:.4g}]."
        if better else
        f"The two-segment fit is not better than one line (F p = {p:.2g}, BIC difference "
        f"{dbic:.1f}; needs p < {P_THRESHOLD} and a BIC gain above {BIC_THRESHOLD:g}).")
    return BrokenStickResult(
        breakpoint=float(c), breakpoint_se=float(np.sqrt(cov[3, 3])),
        breakpoint_interval=interval, slope_left=float(b[1]), slope_right=float(slope_right),
        slope_left_se=float(np.sqrt(cov[1, 1])), slope_right_se=float(np.sqrt(var_right)),
        coefficients=coef, covariance=cov, rss=rss, rss_line=rss_line,
        f_statistic=float(f_stat), f_pvalue=p, bic=float(bic), bic_line=float(bic_line),
        delta_bic=dbic, clearly_better=better, verdict=verdict, level=float(level), n=n)
