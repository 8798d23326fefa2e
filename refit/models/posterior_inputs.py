"""Posterior for climate from one or more forward fits: numpy and the standard library only.

A forward fit models a feature on climate, ``y = f(x; b) + e``. Given fossil measurements
``y0_k`` of K features (proxies) of one paleosol, all recording the one climate value x,

    p(x | y0_1..y0_K) ∝ prior(x) × Π_k t_{df_k}(y0_k; f_k(x; b_k), sigma_k(x)),
    sigma_k(x)^2 = s_k^2 + g_k(x)' V_k g_k(x) + sd_k^2,

where ``t_df(y; m, s)`` is the Student t density with location m and scale s; under the
standard noninformative prior on (b, log s) of a least-squares fit the predictive of a new
feature value is exactly this t with ``sd_k = 0`` (Brown 1982, JRSS B 44:287; Osborne 1991,
International Statistical Review 59:309; both from memory). ``s_k`` is the new
observation's SD (``prediction_sd`` where the estimator gives one, else the residual SE)
and ``V_k`` the coefficient covariance; for a mixed fit ``s_k`` is the within-source SE and
``V_k = C + B`` with B the between-source covariance, as
:func:`refit.models.predict.new_observation_variance`. ``sd_k`` is the fossil's
measurement SD, added to the variance: a normal approximation (a t plus a normal is not a
t). Proxies are independent given x (their residuals are taken as uncorrelated: two
features of the same soil can share error, which this does not model).

ln-scale forms (``ln y = f(x)``) use the density of ``ln y0`` with the measurement SD
carried to ``sd / y0`` (delta method); the Jacobian ``1 / y0`` does not depend on x, so it
cancels when the posterior is normalised.

The posterior is tabulated on an even grid of ``n_grid`` points over the prior's support
(exact up to the grid; no sampler) and normalised by the trapezoid rule; its summaries come
from :mod:`refit.models.posterior_grid`. The rules (multimodal, cut by the prior,
disagreeing proxies, a missing measurement SD) are the module constants below and are
documented in the README section "Posterior for climate (any language)".

References
----------
.. [1] Brown, P. J. (1982). Multivariate calibration. JRSS B 44:287-321 (from memory).
.. [2] Osborne, C. (1991). Statistical calibration: a review. International Statistical
   Review 59:309-336 (from memory).
.. [3] Hoadley, B. (1970). A Bayesian look at inverse linear regression. JASA 65:356-369
   (from memory).
"""

from __future__ import annotations

import math
import operator
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from refit.errors import UsageError

#: grid points over the prior's support
N_GRID = 2000
#: a second local maximum counts as a mode from this fraction of the highest density
MODE_FRACTION = 0.05
#: two modes are distinct when the density between them falls below this share of the lower
DIP_FRACTION = 0.9
#: the prior (or a physical bound) cuts the posterior when the density at the grid's edge
#: is at least ``exp(-z^2 / 2)`` of the peak, z the normal quantile of the level (0.146 at
#: 95 %): where an uncut normal posterior would still be inside its equal-tailed interval



def cut_fraction(level: float) -> float:
    """Density at an edge, as a share of the peak, from which the edge cuts the
    posterior: ``exp(-z^2 / 2)``, ``z = Phi^-1(0.5 + level / 2)``."""
    from statistics import NormalDist

    z = NormalDist().inv_cdf(0.5 + level / 2.0)
    return math.exp(-0.5 * z * z)
#: proxies disagree when the chi-square consistency p-value is below this (common practice)
DISAGREE_P = 0.05
#: the prior must put at least this mass on the proxies' calibration range
MIN_PRIOR_MASS_IN_RANGE = 1e-3
#: a normal prior's grid reaches this many SDs either side of its mean
NORMAL_PRIOR_SDS = 8.0
#: rows per block of the density: a block of rows x 2,000 points stays in the processor's
#: caches, and is long enough that threads running blocks side by side spend little time
#: handing numpy's calls the interpreter lock (measured: 64 beat 32 and 16 on 2 cores)
BLOCK_ROWS = 64
#: each proxy's own likelihood (the consistency test's estimates) is read over the proxies'
#: calibration range of climate widened by this many times its width on either side (and
#: joined with the prior's support, cut at the physical bounds): the likelihood's own
#: support, not the prior's, so a proxy pointing outside the prior's range is seen there
CONSISTENCY_WIDEN = 1.0
#: spacing of that reading, as a share of the narrowest spread sqrt(v(x)) / |f'(x)| of any
#: proxy's likelihood in climate (the trapezoid rule on a smooth density is then exact far
#: below the test's needs: for a normal, relative error about exp(-2 pi^2 / 0.25^2))
CONSISTENCY_STEP = 0.25
#: fewest and most points of that reading (the most: the posterior's own n_grid)
CONSISTENCY_MIN_POINTS = 129
#: log densities are floored at this below each row's peak before exp (exp(-700) = 1e-304
#: of the peak: below anything a summary can see, and above the underflow to subnormal
#: numbers, which runs numpy's exp about fifty times slower)
LOG_FLOOR = -700.0
#: rows per block of the proxies' own likelihoods (on the consistency test's grid)
OWN_ROWS = 512
#: rows per block of the summaries (their per-call cost is shared by many rows)
SUMMARY_ROWS = 2048

FLAG_MULTIMODAL = "multimodal"
FLAG_DISAGREE = "proxies-disagree"
FLAG_OUTSIDE_MEASUREMENT = "measurement-outside-range"
FLAG_OUTSIDE = "outside-calibration-range"
FLAG_CUT_PRIOR = "cut-by-prior"
FLAG_CUT_BOUND = "cut-at-physical-bound"
FLAG_NO_SD = "measurement-sd-missing"
FLAG_MISSING = "missing-value"
FLAG_INVALID = "invalid-value"
FLAG_ORDER = (FLAG_MISSING, FLAG_INVALID, FLAG_OUTSIDE_MEASUREMENT, FLAG_OUTSIDE,
              FLAG_MULTIMODAL, FLAG_DISAGREE, FLAG_CUT_PRIOR, FLAG_CUT_BOUND, FLAG_NO_SD)


# ----------------------------------------------------------------------------- densities
def student_t_logpdf(y, loc, scale, df: float) -> np.ndarray:
    """log of the Student t density with ``df`` degrees of freedom, location and scale
    (``df = inf``: the normal); written with :func:`math.lgamma`, no scipy.

    ``log t = lgamma((df+1)/2) - lgamma(df/2) - log(sqrt(df pi) scale)
    - (df+1)/2 log(1 + z^2/df)``, ``z = (y - loc) / scale``.
    """
    z = (np.asarray(y, float) - loc) / scale
    if math.isinf(df):
        return -0.5 * z * z - np.log(scale) - 0.5 * math.log(2.0 * math.pi)
    const = math.lgamma(0.5 * (df + 1)) - math.lgamma(0.5 * df) - 0.5 * math.log(df * math.pi)
    return const - np.log(scale) - 0.5 * (df + 1) * np.log1p(z * z / df)


# ----------------------------------------------------------------------------- priors
@dataclass(frozen=True)
class Prior:
    """A prior for climate: ``uniform`` on [low, high] or ``normal`` (mean, sd), always cut
    to the climate variable's physical bounds. ``to_dict`` is what a result records."""

    kind: str
    low: float | None = None
    high: float | None = None
    mean: float | None = None
    sd: float | None = None

    def to_dict(self) -> dict:
        if self.kind == "uniform":
            return {"kind": "uniform", "low": self.low, "high": self.high}
        return {"kind": "normal", "mean": self.mean, "sd": self.sd}


def uniform_prior(low: float, high: float) -> Prior:
    """Uniform prior on [low, high] [climate unit]."""
    low, high = float(low), float(high)
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        raise UsageError(f"a uniform prior needs finite low < high; got [{low:g}, {high:g}]")
    return Prior("uniform", low=low, high=high)


def normal_prior(mean: float, sd: float) -> Prior:
    """Normal prior (mean, sd) [climate unit], truncated to the physical bounds."""
    mean, sd = float(mean), float(sd)
    if not (math.isfinite(mean) and math.isfinite(sd) and sd > 0):
        raise UsageError(f"a normal prior needs a finite mean and sd > 0; got mean {mean:g}, "
                         f"sd {sd:g}")
    return Prior("normal", mean=mean, sd=sd)


def prior_from_dict(d: dict) -> Prior:
    """The :class:`Prior` a result recorded (``Prior.to_dict``)."""
    if d.get("kind") == "uniform":
        return uniform_prior(d["low"], d["high"])
    if d.get("kind") == "normal":
        return normal_prior(d["mean"], d["sd"])
    raise UsageError(f"prior kind must be 'uniform' or 'normal'; got {d.get('kind')!r}")


def calibration_hull(proxies) -> tuple[float, float]:
    """Smallest interval holding every proxy's calibration range of climate."""
    return (min(p.climate_range[0] for p in proxies), max(p.climate_range[1] for p in proxies))


def physical_hull(proxies) -> tuple[float, float]:
    """The tightest physical bounds of climate the proxies state."""
    return (max(p.bounds[0] for p in proxies), min(p.bounds[1] for p in proxies))


def support(prior: Prior, proxies) -> tuple[float, float]:
    """Grid ends: the uniform prior's range, or the normal's mean +- 8 sd joined with the
    calibration range, both cut to the physical bounds."""
    b_lo, b_hi = physical_hull(proxies)
    if prior.kind == "uniform":
        lo, hi = prior.low, prior.high
    else:
        c_lo, c_hi = calibration_hull(proxies)
        lo = min(prior.mean - NORMAL_PRIOR_SDS * prior.sd, c_lo)
        hi = max(prior.mean + NORMAL_PRIOR_SDS * prior.sd, c_hi)
    lo, hi = max(lo, b_lo), min(hi, b_hi)
    if not lo < hi:
        raise UsageError(f"the prior {prior.to_dict()} lies outside the physical bounds "
                         f"[{b_lo:g}, {b_hi:g}] of climate; give a prior inside them")
    return lo, hi


def likelihood_grid(prior: Prior, proxies, n_grid: int) -> np.ndarray:
    """The even grid each proxy's own likelihood is read on for the consistency test.

    Its range: the proxies' calibration range of climate widened by
    :data:`CONSISTENCY_WIDEN` times its width on either side, joined with the prior's
    support and cut at the physical bounds. Its spacing: :data:`CONSISTENCY_STEP` times
    the narrowest spread ``sqrt(v_k(x)) / |f_k'(x)|`` of any proxy's likelihood in climate
    over that range (a measurement SD only widens it), with between
    :data:`CONSISTENCY_MIN_POINTS` and ``n_grid`` points. It depends on the proxies and
    the prior only, never on the measured values, so every row's numbers depend on that
    row alone.
    """
    c_lo, c_hi = calibration_hull(proxies)
    b_lo, b_hi = physical_hull(proxies)
    s_lo, s_hi = support(prior, proxies)
    w = CONSISTENCY_WIDEN * (c_hi - c_lo)
    lo, hi = max(min(c_lo - w, s_lo), b_lo), min(max(c_hi + w, s_hi), b_hi)
    probe = np.linspace(lo, hi, max(int(n_grid), CONSISTENCY_MIN_POINTS))
    narrowest = math.inf
    for p in proxies:
        loc, var = p.location_variance(probe, checked=False)
        with np.errstate(invalid="ignore", divide="ignore"):
            spread = np.sqrt(var) / np.abs(np.gradient(loc, probe))
        spread = spread[np.isfinite(spread) & (spread > 0)]
        if spread.size:
            narrowest = min(narrowest, float(spread.min()))
    points = CONSISTENCY_MIN_POINTS
    if math.isfinite(narrowest):
        need = math.ceil((hi - lo) / (CONSISTENCY_STEP * narrowest)) + 1
        points = min(max(need, CONSISTENCY_MIN_POINTS), max(int(n_grid), points))
    return np.linspace(lo, hi, points)


def log_prior(prior: Prior, grid: np.ndarray) -> np.ndarray:
    """log prior density on the grid (up to a constant)."""
    if prior.kind == "uniform":
        return np.zeros_like(grid)
    z = (grid - prior.mean) / prior.sd
    return -0.5 * z * z


def check_prior_overlap(prior: Prior, proxies, grid: np.ndarray) -> None:
    """Refuse a prior that puts (almost) no mass on the calibration range.

    Raises
    ------
    UsageError
        Less than :data:`MIN_PRIOR_MASS_IN_RANGE` of the prior lies inside the smallest
        interval holding the proxies' calibration ranges: the posterior would rest on
        extrapolation alone.
    """
    c_lo, c_hi = calibration_hull(proxies)
    w = np.exp(log_prior(prior, grid))
    inside = (grid >= c_lo) & (grid <= c_hi)
    share = float(np.trapezoid(np.where(inside, w, 0.0), grid) / np.trapezoid(w, grid))
    if share < MIN_PRIOR_MASS_IN_RANGE:
        raise UsageError(f"the prior {prior.to_dict()} puts {share:.2g} of its mass on the "
                         f"calibration range [{c_lo:g}, {c_hi:g}] of the proxies; the "
                         "posterior would rest on extrapolation alone: give a prior that "
                         "overlaps the calibration range")


# ----------------------------------------------------------------------------- proxies
@dataclass(frozen=True)
class ForwardProxy:
    """The numbers of one forward fit that the posterior needs.

    Attributes
    ----------
    name : str
        The feature, e.g. ``bk_depth_cm``.
    design : callable
        Climate values (G,) -> design rows (G, p), columns in the order of ``coefficients``.
    coefficients, covariance : ndarray
        b and V (for a mixed fit V = C + B, the between-source covariance added).
    sd_new : float
        SD of a new observation about the curve, s [feature unit, model scale].
    df : float
        Degrees of freedom of the Student t predictive (``inf``: normal).
    log_response : bool
        The fit models ln(feature).
    climate_range, feature_range : (float, float)
        Calibration ranges of climate and of the feature [their units].
    bounds : (float, float)
        Physical bounds of climate [its unit].
    """

    name: str
    design: Callable[[np.ndarray], np.ndarray]
    coefficients: np.ndarray
    covariance: np.ndarray
    sd_new: float
    df: float
    log_response: bool
    climate_range: tuple
    feature_range: tuple
    bounds: tuple = (-math.inf, math.inf)

    def location_variance(self, grid: np.ndarray, checked: bool = True):
        """``f(x; b)`` and ``s^2 + g(x)' V g(x)`` on the grid [model scale]; NaN where
        either is not finite (or, unchecked, where the variance is not positive).

        Raises
        ------
        UsageError
            (``checked``) The predictive variance is zero, negative or not finite
            somewhere on the grid.
        """
        D = self.design(grid)
        loc = D @ np.asarray(self.coefficients, float)
        var = self.sd_new ** 2 + np.einsum("ij,jk,ik->i", D, self.covariance, D)
        ok = np.isfinite(var) & np.isfinite(loc)
        if not checked:
            ok &= var > 0
        elif np.any(ok & ~(var > 0)) or not ok.any():
            raise UsageError(f"proxy {self.name!r}: the predictive variance of the feature "
                             "is zero (no residual SE and no coefficient covariance); a "
                             "posterior needs the fit's error: refit it, or leave the proxy "
                             "out")
        return np.where(ok, loc, np.nan), np.where(ok, var, np.nan)


def forward_proxy(fit) -> ForwardProxy:
    """:class:`ForwardProxy` of an in-memory forward :class:`refit.models.fitting.Fit`.

    ``s`` and V as :func:`refit.models.predict.new_observation_variance`: the mixed fit's
    within-source SE with ``V = C + B``, else ``prediction_sd`` (or the residual SE) with
    ``V = C``.

    Raises
    ------
    UsageError
        An inverse fit, or one without a coefficient covariance.
    """
    from refit.models.finish import between_covariance
    from refit.models.inversion.classical import physical_bounds

    if fit.direction != "forward":
        raise UsageError("the posterior for climate needs a forward fit (the feature "
                         "modelled on climate); refit with direction='forward'")
    res = fit.result
    cov = np.asarray(res.covariance, float)
    if not np.all(np.isfinite(cov)):
        raise UsageError(f"estimator {fit.estimator!r} gives no coefficient covariance, so "
                         "the predictive density cannot be formed; use estimator 'ols'")
    between = between_covariance(fit)
    if between is not None:
        cov, s = cov + between, float(res.residual_std_error)
    else:
        s = float(res.details.get("prediction_sd", res.residual_std_error))
    climate, feature = fit.x_names[0], fit.predictors[0]
    form = fit.form
    return ForwardProxy(
        name=feature, design=lambda g: form.design(np.asarray(g, float)[:, None]),
        coefficients=np.asarray(res.coefficients, float), covariance=cov, sd_new=s,
        df=float(res.df_resid), log_response=bool(form.log_response),
        climate_range=tuple(map(float, fit.ranges[climate])),
        feature_range=tuple(map(float, fit.ranges[feature])),
        bounds=tuple(map(float, physical_bounds(fit))))


# ----------------------------------------------------------------------------- result
class HdiPieces(Sequence):
    """The highest-density region of each row as a list of ``(low, high)`` pieces
    [climate unit], read on demand: a row listed in ``several`` has its own pieces (a
    multimodal row may have more than one), any other row the one piece
    ``[lower, upper]`` (none where those are NaN: no reading, or no HDI asked for).
    Nothing per row is built until asked for, so 10^5 rows cost two arrays.
    """

    def __init__(self, lower: np.ndarray, upper: np.ndarray, several: dict):
        self.lower, self.upper, self.several = lower, upper, several

    def __len__(self) -> int:
        return len(self.lower)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[k] for k in range(*i.indices(len(self)))]
        k = operator.index(i)
        k = k + len(self) if k < 0 else k
        if not 0 <= k < len(self):
            raise IndexError(f"row {i} of {len(self)}")
        if k in self.several:
            return list(self.several[k])
        a, b = float(self.lower[k]), float(self.upper[k])
        return [] if math.isnan(a) or math.isnan(b) else [(a, b)]

    def counts(self) -> np.ndarray:
        """Number of pieces per row."""
        out = (~(np.isnan(self.lower) | np.isnan(self.upper))).astype(np.int64)
        for k, pieces in self.several.items():
            out[k] = len(pieces)
        return out


@dataclass
class Posterior:
    """The posterior for climate of m fossils (arrays of length m, climate units).

    ``median``, ``mode``, ``mean``, ``sd``; ``lower``/``upper`` the equal-tailed interval;
    ``hdi_lower``/``hdi_upper`` the ends of the highest-density region and ``hdi`` its
    pieces per row (more than one for a multimodal row); ``flags`` ';'-joined per row;
    ``chi2``, ``chi2_dof``, ``chi2_p`` the proxy-consistency test (NaN with fewer than two
    proxies), ``proxy_mean``/``proxy_sd`` (m, K) each proxy's own posterior mean and SD;
    ``outside`` (m, K) measurements outside their fit's feature range; ``prior`` and
    ``grid`` (ends, points) what reproduces the result; ``density`` (m, G) the normalised
    density when asked for; ``consistency_grid`` (ends, points) the grid of the proxies'
    own likelihoods (:func:`likelihood_grid`; None with fewer than two proxies measured).
    """

    median: np.ndarray
    mode: np.ndarray
    mean: np.ndarray
    sd: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    hdi_lower: np.ndarray
    hdi_upper: np.ndarray
    hdi: HdiPieces
    flags: np.ndarray
    chi2: np.ndarray
    chi2_dof: np.ndarray
    chi2_p: np.ndarray
    proxy_mean: np.ndarray
    proxy_sd: np.ndarray
    outside: np.ndarray
    level: float
    prior: dict
    grid: dict
    proxies: list = field(default_factory=list)
    density: np.ndarray | None = None
    consistency_grid: dict | None = None

    def columns(self) -> dict:
        """The per-row numbers under their output column names."""
        return {"posterior_median": self.median, "posterior_mode": self.mode,
                "posterior_lower": self.lower, "posterior_upper": self.upper,
                "posterior_hdi_lower": self.hdi_lower, "posterior_hdi_upper": self.hdi_upper,
                "posterior_hdi_pieces": self.hdi.counts(),
                "proxy_chi2": self.chi2, "proxy_chi2_p": self.chi2_p,
                "posterior_flags": self.flags}


# ----------------------------------------------------------------------------- inputs
def _as_matrix(values, k: int, what: str) -> np.ndarray:
    v = np.asarray(values, dtype=float)
    if v.ndim == 0:
        v = np.full((1, k), float(v))
    elif v.ndim == 1:
        v = v.reshape(-1, 1) if k == 1 else v.reshape(1, -1)
    if v.ndim != 2 or v.shape[1] != k:
        raise UsageError(f"{what} must have one column per proxy ({k}); got shape {v.shape}")
    return v


def _sd_matrix(sd, shape) -> np.ndarray:
    """Measurement SDs as an (m, K) array: one number, one per proxy (K,), one per row
    (m,) for a single proxy, or (m, K)."""
    a = np.asarray(sd, dtype=float)
    m, k = shape
    if a.ndim == 1:
        a = a.reshape(-1, 1) if k == 1 else a.reshape(1, -1)
    try:
        return np.array(np.broadcast_to(a, shape), dtype=float)
    except ValueError:
        raise UsageError(f"measurement SDs of shape {np.shape(sd)} do not match the values "
                         f"({m} rows, {k} proxies)") from None


def model_scale_inputs(proxies, values, sd):
    """Measurements and their SDs on each fit's model scale, with the masks of what was
    missing, invalid (<= 0 under a ln form), outside the feature's calibration range, or
    measured without an SD.

    A NaN measurement SD beside a measured value is taken as 0 and the row flagged
    :data:`FLAG_NO_SD` (as ``refit apply`` leaves such a value undrawn); a negative or
    infinite SD is refused.
    """
    from refit.errors import InvalidDataError

    k = len(proxies)
    v = _as_matrix(values, k, "values")
    s = np.zeros_like(v) if sd is None else _sd_matrix(sd, v.shape)
    if np.any(np.isinf(v)):
        raise InvalidDataError("a measurement is infinite; use a finite number or leave it "
                               "empty")
    missing = np.isnan(v)
    bad_sd = ~np.isnan(s) & ((s < 0) | np.isinf(s))
    if bad_sd.any():
        r, c = np.argwhere(bad_sd)[0]
        raise InvalidDataError(f"measurement SD {s[r, c]!r} of {proxies[c].name!r} (row "
                               f"{r}) must be finite and >= 0")
    no_sd = np.isnan(s) & ~missing
    s = np.where(np.isnan(s), 0.0, s)
    y = v.copy()
    invalid = np.zeros_like(missing)
    for j, p in enumerate(proxies):
        if p.log_response:
            invalid[:, j] = ~missing[:, j] & ~(v[:, j] > 0)
            with np.errstate(invalid="ignore", divide="ignore"):
                y[:, j] = np.where(invalid[:, j], np.nan, np.log(v[:, j]))
                s[:, j] = s[:, j] / v[:, j]          # SD of ln y0, delta method
    lo = np.array([p.feature_range[0] for p in proxies])
    hi = np.array([p.feature_range[1] for p in proxies])
    with np.errstate(invalid="ignore"):
        outside = ~missing & ((v < lo) | (v > hi))
    return y, np.where(np.isnan(y), 0.0, s), missing, invalid, outside, no_sd


def chi2_sf(q: np.ndarray, dof: np.ndarray) -> np.ndarray:
    """Upper tail of the chi-square distribution for whole ``dof`` >= 1 (numpy and math
    only): the finite series for even dof, erfc plus the series for odd dof (Abramowitz &
    Stegun 1964, 26.4.4-26.4.5; from memory)."""
    q = np.asarray(q, float)
    dof = np.asarray(dof, int)
    out = np.full(q.shape, np.nan)
    x = 0.5 * np.maximum(q, 0.0)
    for d in np.unique(dof[dof >= 1]):
        sel = dof == d
        xs = x[sel]
        if d % 2 == 0:
            term, acc = np.ones_like(xs), np.ones_like(xs)
            for j in range(1, d // 2):
                term = term * xs / j
                acc = acc + term
            out[sel] = np.exp(-xs) * acc
        else:
            base = np.array([math.erfc(math.sqrt(t)) for t in xs])
            term = np.sqrt(xs) / math.gamma(1.5)
            acc = term.copy()
            for j in range(1, (d - 1) // 2):
                term = term * xs / (j + 0.5)
                acc = acc + term
            out[sel] = base + (np.exp(-xs) * acc if d > 1 else 0.0)
    return out
