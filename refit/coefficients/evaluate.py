"""Evaluate a coefficient record from its fields alone: numpy only, no data, no fitting.

Internal engine of :meth:`refit.coefficients.Equation.predict`. Everything here works on
the plain JSON content of a coefficient file (see ``schemas/coefficients.schema.json`` and
the README section "Evaluating a coefficient file"):

- the design row of each new value from the ordered ``terms`` (``intercept``, ``x``,
  ``x^k``, ``ln(x)``);
- the analytic band ``eta +- t sqrt(s^2 / w0 + x0' V x0)``;
- the between-source covariance of mixed fits (``x0' (C + B) x0``, both directions);
- the stored conformal quantities: split-conformal calibration scores, the leave-one-out
  coefficient vectors of jackknife+, the fold coefficient vectors of CV+, the
  leave-group-out vectors and group indices of group-jackknife+/CV+ (all exact), and
  the bootstrap summary (an approximation, said so in the file);
- the flags and back-transform of the inverse direction, through
  :func:`refit.models.finish.inverse_finish`, and the classical-calibration inversion of
  forward fits, through :func:`refit.models.inversion.forward.forward_predict` (imported
  on first use): both shared with ``Fit.predict``.

Nothing imports pandas, scipy, statsmodels or scikit-learn at module level; the Student t
quantile for a level other than the file's own comes from scipy, imported only then.
"""

from __future__ import annotations

import numpy as np

from refit._util.order import kth_in_place as _kth_in_place
from refit._util.order import kth_smallest
from refit._util.order import rank_lower as _rank_lower
from refit._util.order import rank_upper as _rank_upper
from refit._util.threads import on_threads
from refit.errors import InvalidDataError, UsageError
from refit.models.finish import INVERSE_FLAG_ORDER, flag_strings, inverse_finish


# ----------------------------------------------------------------------------- terms
def parse_term(term: str) -> tuple[str, str | None, int]:
    """``(kind, variable, power)`` of a term name.

    ``intercept`` -> ``("intercept", None, 0)``; ``bk_depth_cm`` -> ``("power", name, 1)``;
    ``bk_depth_cm^2`` -> ``("power", name, 2)``; ``ln(cia_k)`` -> ``("log", name, 1)``.
    """
    if term == "intercept":
        return "intercept", None, 0
    if term.startswith("ln(") and term.endswith(")"):
        return "log", term[3:-1], 1
    name, sep, power = term.partition("^")
    if sep:
        if not power.isdigit() or int(power) < 1:
            raise InvalidDataError(f"term {term!r}: the power after '^' must be a whole "
                                   "number >= 1")
        return "power", name, int(power)
    return "power", term, 1


def design_rows(terms: list[str], x_names: list[str], v: np.ndarray) -> np.ndarray:
    """Design matrix (m, p) of values ``v`` (m, k), columns in the order of ``terms``.

    Powers are formed by repeated multiplication, as :meth:`refit.models.forms.Form.design` does,
    so the numbers agree to the last bit.
    """
    v = np.asarray(v, dtype=float)
    out = np.empty((v.shape[0], len(terms)), order="F")
    for j, term in enumerate(terms):
        kind, name, power = parse_term(term)
        if kind == "intercept":
            out[:, j] = 1.0
            continue
        col = v[:, x_names.index(name)]
        if kind == "log":
            with np.errstate(invalid="ignore", divide="ignore"):
                out[:, j] = np.log(col)
            continue
        p = col
        for _ in range(power - 1):
            p = p * col
        out[:, j] = p
    return out


# ----------------------------------------------------------------------------- helpers
def t_quantile(level: float, df: float, stored: dict | None = None) -> float:
    """Student t quantile ``t(0.5 + level/2; df)``: the file's own value at its level,
    scipy otherwise (imported here, only when needed)."""
    if stored and stored.get("t_quantile") is not None and \
            abs(float(stored["level"]) - level) < 1e-12 and float(stored["df"]) == df:
        return float(stored["t_quantile"])
    from scipy import stats

    return float(stats.t.ppf(0.5 + level / 2.0, df))


#: (new values x n) elements per block of a jackknife+/CV+ band: 256 KB of float64, kept in
#: cache (blocks of 10^6 elements, fresh pages each, were about 4x slower)
PLUS_BLOCK_ELEMENTS = 32_768


def _matrix(value, what: str) -> np.ndarray:
    if value is None:
        raise UsageError(f"the file gives no {what}, so this interval cannot be formed")
    return np.asarray([[np.nan if c is None else c for c in row] for row in value], float)


# ----------------------------------------------------------------------------- bands
def analytic_band(rec: dict, X0, eta, w0, level):
    """``eta -+ t sqrt(s^2 / w0 + x0' V x0)`` from the file's covariance and residual SE;
    with ``interval.between_covariance`` B (mixed fits) ``s`` is the residual (within-
    source) SE and ``V = covariance + B``."""
    cov = _matrix(rec.get("covariance"), "coefficient covariance")
    s = rec.get("residual_std_error")
    if s is None or not np.all(np.isfinite(cov)):
        raise UsageError(f"estimator {rec.get('estimator')!r} gives no coefficient "
                         "covariance, so there is no analytic interval")
    between = rec["interval"].get("between_covariance")
    if between is not None:  # mixed: s_e^2 / w0 + x0' (C + B) x0
        cov = cov + _matrix(between, "between-source covariance")
    else:
        s = rec["interval"].get("prediction_sd") or s  # Theil-Sen: the RMS residual
    theta = rec["interval"].get("variance_power")
    if theta is not None:  # the spread as a power of the mean: s |eta|^theta
        s = s * np.abs(np.asarray(eta, float)) ** float(theta)
    q = np.einsum("ij,jk,ik->i", X0, cov, X0)
    t = t_quantile(level, float(rec["df_resid"]), rec["interval"])
    half = t * np.sqrt(s * s / w0 + q)
    return eta - half, eta + half


#: new values per block of the pruned jackknife+/CV+ band (the candidate rows are chosen
#: per block from the block's largest design norm)
PLUS_BLOCK_ROWS = 4_096
#: relative slack of the candidate bounds: far above the rounding of the band values, far
#: below their spread
_CANDIDATE_SLACK = 1e-9


def _deviation_basis(D: np.ndarray):
    """``(W, g)`` with ``|x' D_i| <= sqrt(x' W x) g_i`` for every x (Cauchy-Schwarz in the
    metric of ``W = D'D / n``, the second moment of the deviations ``D_i``); None when W is
    singular (then nothing is pruned)."""
    n = D.shape[0]
    W = D.T @ D / max(n, 1)
    try:
        L = np.linalg.cholesky(W)
    except np.linalg.LinAlgError:
        return None
    G = np.linalg.solve(L, D.T)            # L^-1 D_i, column i
    g = np.sqrt(np.einsum("ij,ij->j", G, G))
    return (W, g) if np.all(np.isfinite(g)) else None


def _candidates(r, spread, k: int, scale: float):
    """Rows whose band values can reach the k-th from either end (see :func:`_plus_band`)."""
    n = r.shape[0]
    tau = np.partition(r - spread, n - k)[n - k]        # the k-th largest lower bound
    return np.flatnonzero(r + spread >= tau - _CANDIDATE_SLACK * scale)


def _plus_band(x0: np.ndarray, B: np.ndarray, b: np.ndarray, r: np.ndarray, alpha: float):
    """Jackknife+ / CV+ limits for new design rows ``x0``: the ranks of Barber et al. (2021)
    over ``x0' B_i -/+ r_i``, with ``B_i`` row i's leave-out coefficients and ``r_i`` its
    leave-out residual size.

    Only rows that can reach the limits are used. With ``D_i = B_i - b`` and
    ``|x' D_i| <= c g_i`` for every new row of a block (``c`` = the block's largest
    ``sqrt(x' W x)``, :func:`_deviation_basis`), every value ``x' D_i + r_i`` lies in
    ``[r_i - c g_i, r_i + c g_i]``; if tau is the k-th largest lower end, a row whose upper
    end stays below tau lies beyond the k-th value from the top and from the bottom for
    every new row of the block, so dropping it leaves both order statistics unchanged (the
    upper rank counts the dropped rows). The same argument as
    :func:`refit.models.intervals.conformal._jackknife_candidates`, in the metric of the deviations.
    Blocks of new rows run on threads (:func:`refit._util.threads.on_threads`)."""
    n, m = r.shape[0], x0.shape[0]
    k_lo, k_hi = _rank_lower(alpha, n), _rank_upper(alpha, n)
    lower, upper = np.empty(m), np.empty(m)
    ks = [k for k in (k_lo, n - k_hi + 1) if 1 <= k <= n]
    basis = _deviation_basis(B - b) if ks else None
    if basis is not None:
        W, g = basis
        norm = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", x0, W, x0), 0.0))
        scale = float(np.abs(B).max() * np.abs(x0).max(initial=0.0) + r.max())
    step = PLUS_BLOCK_ROWS if basis is not None else max(1, PLUS_BLOCK_ELEMENTS // max(n, 1))

    def one_block(start):
        sl = slice(start, min(m, start + step))
        keep, dropped = slice(None), 0
        if basis is not None:
            idx = _candidates(r, norm[sl].max(initial=0.0) * g, max(ks), scale)
            if 2 * idx.size <= n:
                keep, dropped = idx, n - idx.size
        mu = x0[sl] @ B[keep].T
        rk = r[keep]
        lower[sl] = _kth_in_place(mu - rk, k_lo)
        upper[sl] = _kth_in_place(np.add(mu, rk, out=mu), k_hi - dropped)

    on_threads(one_block, range(0, m, step))
    return lower, upper


def resampled_band(iv: dict, X0, ok, w0, level):
    """Estimate and limits of the stored resampling intervals (rows with values only)."""
    alpha = 1.0 - level
    method = iv["method"]
    b = np.asarray(iv["centre_coefficients"], float)
    x0 = X0[ok]
    est = x0 @ b
    if method == "split-conformal":
        scores = np.asarray(iv["calibration_scores"], float)
        q = float(kth_smallest(scores, _rank_upper(alpha, len(scores))))
        lo, hi = est - q, est + q
    elif method == "jackknife+":
        B = np.asarray(iv["loo_coefficients"], float)
        r = np.asarray(iv["loo_abs_residuals"], float)
        lo, hi = _plus_band(x0, B, b, r, alpha)
    elif method == "cv+":
        B = np.asarray(iv["fold_coefficients"], float)
        fold = np.asarray(iv["row_folds"], int)
        r = np.asarray(iv["row_abs_residuals"], float)
        lo, hi = _plus_band(x0, B[fold], b, r, alpha)
    elif method in GROUP_METHODS:
        lo, hi = group_plus_band(iv, x0, alpha)
    else:  # bootstrap: approximation (see the file's interval.approximation)
        pool = np.asarray(iv["residual_pool"], float)
        vb = _matrix(iv["coefficient_covariance"], "bootstrap coefficient covariance")
        qlo, qhi = np.quantile(pool, [alpha / 2, 1 - alpha / 2])
        var_e = float(np.var(pool))
        w = np.broadcast_to(w0, ok.shape)[ok]
        k = np.sqrt(1.0 + w * np.einsum("ij,jk,ik->i", x0, vb, x0) / var_e) / np.sqrt(w)
        lo, hi = est + qlo * k, est + qhi * k
    out = np.full((3, len(ok)), np.nan)
    out[:, ok] = np.vstack([est, lo, hi])
    return out


from refit.models.intervals.group_conformal import GROUP_INTERVALS as GROUP_METHODS  # noqa: E402


def group_plus_band(iv: dict, x0, alpha: float):
    """Group-level jackknife+ / CV+ limits from the stored leave-group-out quantities.

    ``mu_i = x0' left_out_coefficients[u_i]`` with ``u_i = row_groups[i]``
    (group-jackknife+) or ``group_folds[row_groups[i]]`` (group-cv+), two-layer weights
    ``1 / ((G + 1) m_g)`` from the group sizes, and the weighted quantiles of
    :func:`refit.models.intervals.group_conformal.weighted_plus_limits` (numpy only)."""
    from refit.models.intervals.group_conformal import group_weights, weighted_plus_limits

    B = np.asarray(iv["left_out_coefficients"], float)
    g = np.asarray(iv["row_groups"], int)
    n_groups = int(iv["n_groups"])
    if g.size and (g.min() < 0 or g.max() >= n_groups):
        raise InvalidDataError(f"interval.row_groups must lie in 0..{n_groups - 1} "
                               "(interval.n_groups - 1)")
    unit = g if iv["method"] == "group-jackknife+" else np.asarray(iv["group_folds"], int)[g]
    r = np.asarray(iv["row_abs_residuals"], float)
    return weighted_plus_limits(x0 @ B[unit].T, r, group_weights(g, n_groups), alpha)


def quantile_band(iv: dict, X0, level):
    """Lower and upper quantile curves ``x0' b_q``."""
    qlo, qhi = iv["quantiles"]
    if abs((qhi - qlo) - level) > 1e-9:
        raise UsageError(f"the quantile curves were fitted at {qlo} and {qhi}, a "
                         f"{qhi - qlo:g} interval; ask for level={qhi - qlo:g}")
    return X0 @ np.asarray(iv["lower_coefficients"], float), \
        X0 @ np.asarray(iv["upper_coefficients"], float)


def published_band(iv: dict, eta):
    """The published +- figure (a regression standard error, not a prediction interval)."""
    half = float(iv["half_width"])
    return eta - half, eta + half


# ----------------------------------------------------------------------------- directions
def _ranges(rec: dict) -> dict:
    return {p["name"]: (p.get("valid_min"), p.get("valid_max")) for p in rec["predictors"]}


def predict_inverse(rec: dict, v: np.ndarray, level: float, w0):
    """Inverse direction (climate on feature): estimate, lower, upper, flags."""
    eq = rec["equation"]
    iv = rec["interval"]
    method = iv["method"]
    m = v.shape[0]
    ok = ~np.isnan(v).any(axis=1)
    X0 = design_rows(rec["terms"], eq["x"], v)
    eta = X0 @ np.asarray(rec["coefficients"], float)
    lo = hi = np.full(m, np.nan)
    if method == "analytic":
        lo, hi = analytic_band(rec, X0, eta, w0, level)
    elif method == "quantile":
        lo, hi = quantile_band(iv, X0, level)
    elif method not in ("none", "published"):
        eta, lo, hi = resampled_band(iv, X0, ok, w0, level)
    dom = rec.get("domain") or {}
    turning = ((dom.get("turning_point"), dom.get("data_side"))
               if rec.get("degree") == 2 and v.shape[1] == 1 else None)
    eta, lo, hi, masks = inverse_finish(
        eta, lo, hi, v, ok=ok, method=method, ranges=list(_ranges(rec).values()),
        approximate=method == "analytic" and bool(iv.get("approximate")), turning=turning,
        log_response=eq["scale"] == "log", smearing=float(eq.get("smearing") or 1.0))
    if method == "published":  # the +- figure is in the response's own units
        lo, hi = published_band(iv, eta)
    return eta, lo, hi, flag_strings(masks, m, INVERSE_FLAG_ORDER)


def _branch_points(inv: dict) -> np.ndarray | None:
    """Stand-in calibration x values: ``n`` points inside each monotonic branch, so the
    inversion picks the same branch as with the real data (only these counts matter)."""
    branches = inv.get("branches")
    if not branches:
        return None
    pts = []
    for br in branches:
        a, b = br["from"], br["to"]
        if a is None and b is None:
            x = 0.0
        elif a is None:
            x = b - 1.0 - abs(b)
        elif b is None:
            x = a + 1.0 + abs(a)
        else:
            x = 0.5 * (a + b)
        pts += [x] * int(br["n_calibration"])
    return np.asarray(pts, float)


def predict_forward(rec: dict, v: np.ndarray, level: float, w0, *, with_rays: bool = False,
                    with_untruncated: bool = False):
    """Forward direction: invert ``feature = f(climate)`` as a classical calibration,
    through :func:`refit.models.inversion.forward.forward_predict` (the core ``Fit.predict`` uses too).

    The ``inversion`` block gives the climate variable's physical bounds (they cut the
    search window and a line's limits), the new observation's standard deviation and the
    approximate-interval flag; files written before these fields existed lack them, and
    then the window is the calibration range widened by
    :data:`refit.models.domain.SEARCH_MARGIN` alone, the SD is ``residual_std_error``.
    The measured feature is flagged ``outside-calibration-range`` against the
    predictor's ``valid_min``/``valid_max``, as in the inverse direction.
    ``with_rays`` also returns the second ray of a line's two-ray set
    (``other_lower``, ``other_upper``; flag ``two-rays``); ``with_untruncated`` (after
    them) the limits cut at a physical bound before the cut (``lower_untruncated``,
    ``upper_untruncated``, NaN where nothing was cut; flag ``truncated-at-bound``)."""
    from refit.models.inversion.forward import forward_predict

    iv = rec["interval"]
    method = iv["method"]
    if method not in ("analytic", "none"):
        raise UsageError(f"interval {method!r} does not apply to a forward fit")
    eq = rec["equation"]
    cov = _matrix(rec.get("covariance"), "coefficient covariance")
    if method != "analytic":
        cov = np.zeros_like(cov)
    if not np.all(np.isfinite(cov)):
        raise UsageError(f"estimator {rec.get('estimator')!r} gives no coefficient "
                         "covariance, so the calibration interval cannot be formed")
    inv = iv.get("inversion") or {}
    between = iv.get("between_covariance") if method == "analytic" else None
    if between is not None:  # mixed: s_e^2 / w0 + g(x)' B g(x) per climate value x
        between = _matrix(between, "between-source covariance")
        s = float(rec["residual_std_error"])
    else:
        s = float(inv.get("prediction_sd") or rec["residual_std_error"])
    b_lo, b_hi = inv.get("bounds") or (None, None)
    bounds = (-np.inf if b_lo is None else float(b_lo),
              np.inf if b_hi is None else float(b_hi))
    return forward_predict(
        v[:, 0], coefficients=np.asarray(rec["coefficients"], float), covariance=cov,
        sigma2_new=s * s / w0 if method == "analytic" else 0.0,
        t=t_quantile(level, float(rec["df_resid"]), iv),
        domain=tuple(inv.get("x_range") or rec["domain"]["ranges"][eq["x"][0]]),
        degree=int(rec["degree"]), through_origin="intercept" not in rec["terms"],
        log_response=eq["scale"] == "log", x_cal=_branch_points(inv), bounds=bounds,
        with_interval=method != "none", between_covariance=between,
        approximate=method == "analytic" and bool(inv.get("approximate", False)),
        feature_range=next(iter(_ranges(rec).values())), with_rays=with_rays,
        with_untruncated=with_untruncated)


#: rows from which repeated values are looked for (a sample of this many decides)
DEDUP_ROWS = 65_536


def _repeats_pay(rec: dict, v: np.ndarray, w0) -> bool:
    """True when evaluating each distinct value once pays for the sort: an expensive
    interval (a forward inversion, jackknife+ or CV+), one predictor whose values repeat
    (measurements recorded to a fixed resolution, e.g. 0.1 cm: fewer than half the values
    of a leading sample distinct) and one weight for all rows."""
    costly = rec["direction"] == "forward" or rec["interval"]["method"] in (
        "jackknife+", "cv+", *GROUP_METHODS)
    if not costly or v.shape[1] != 1 or v.shape[0] < DEDUP_ROWS or np.ptp(w0) != 0:
        return False
    sample = v[:DEDUP_ROWS // 8, 0]
    return np.unique(sample).size < sample.size // 2


def evaluate(rec: dict, v: np.ndarray, level: float, w0, *, with_rays: bool = False,
             untruncated: bool = False) -> tuple:
    """Estimate, lower, upper [response units] and flags for values ``v`` (m, k); with
    ``with_rays`` also ``other_lower``, ``other_upper``: the second ray of a forward
    line's two-ray set (flag ``two-rays``), NaN for every other row and for inverse files.

    ``untruncated`` adds two arrays: a forward file's limits cut at a physical bound,
    before the cut (``lower_untruncated``, ``upper_untruncated``; NaN where nothing was
    cut, and always for an inverse file, whose limits are never cut).

    Every row's result depends on its own values only, so many rows with repeated values
    (:func:`_repeats_pay`) are evaluated once per distinct value and spread back: the same
    numbers (bit for bit for a forward fit; within the last bit of a matrix product,
    whose rounding can depend on the matrix's size, otherwise)."""
    if _repeats_pay(rec, v, w0):
        values, back = np.unique(v[:, 0], return_inverse=True)
        out = evaluate(rec, values[:, None], level, w0[:values.size], with_rays=with_rays,
                       untruncated=untruncated)
        return tuple(a[back] for a in out)
    if rec["direction"] == "forward":
        return predict_forward(rec, v, level, w0, with_rays=with_rays,
                               with_untruncated=untruncated)
    out = predict_inverse(rec, v, level, w0)
    nan = np.full(v.shape[0], np.nan)
    if with_rays:
        out = (*out, nan, nan.copy())
    if untruncated:
        out = (*out, nan.copy(), nan.copy())
    return out
