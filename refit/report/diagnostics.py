"""Numbers behind the report's figures: bands of a fitted curve, influence, Q-Q points.

Small pure functions of a :class:`refit.models.fitting.Fit`; the figures only draw what these
return. Everything is on the scale of the fitted equation (climate on feature for an
inverse fit, feature on climate for a forward fit); for the exponential form the bands
are formed on the log scale and back-transformed.
"""

from __future__ import annotations

import numpy as np

#: Cook's distance above 4/n marks an influential record (common practice; Bollen &
#: Jackman 1990, Modern Methods of Data Analysis, from memory)
COOKS_FACTOR = 4.0
#: leverage above 2p/n marks a high-leverage record (Hoaglin & Welsch 1978, Am. Stat.
#: 32:17, common practice)
LEVERAGE_FACTOR = 2.0
#: at most this many influential records are labelled by profile_id (the largest first)
MAX_LABELS = 10


def regression_bands(fit, x, level: float = 0.95) -> dict:
    """Fitted curve with its confidence band (the mean) and prediction band (a new soil).

    Parameters
    ----------
    fit : refit.models.fitting.Fit
        A fit with one regressor and a coefficient covariance.
    x : array_like, shape (m,)
        Values of the equation's regressor [its unit]: the feature for an inverse fit,
        climate for a forward fit.
    level : float
        Coverage of both bands, 0 < level < 1.

    Returns
    -------
    dict of ndarray, shape (m,)
        ``x``, ``fitted``, ``mean_lower``, ``mean_upper``, ``pred_lower``,
        ``pred_upper`` [unit of the equation's response].

    Notes
    -----
    ``fitted +- t(df) sqrt(x0' V x0)`` for the mean and ``fitted +- t(df) sqrt(s^2 +
    x0' V x0)`` for a new observation (a mixed fit adds the between-source covariance:
    :func:`refit.models.predict.new_observation_variance`), V the coefficient
    covariance, s the residual scale (Draper & Smith 1998, Applied Regression Analysis, 3rd ed., sec. 3.1, from
    memory); the same band ``Fit.predict`` gives for an inverse fit with the analytic
    interval.
    """
    from scipy import stats

    from refit.models.predict import new_observation_variance

    x = np.asarray(x, dtype=float).ravel()
    X0 = fit.form.design(x[:, None])
    b = np.asarray(fit.result.coefficients, dtype=float)
    cov = np.asarray(fit.covariance, dtype=float)
    eta = X0 @ b
    q = np.einsum("ij,jk,ik->i", X0, cov, X0)
    t = float(stats.t.ppf(0.5 + level / 2.0, fit.df_resid))
    half_mean = t * np.sqrt(q)
    half_pred = t * np.sqrt(new_observation_variance(fit, X0))
    back = _back_transform(fit)
    return {"x": x, "fitted": back(eta, smear=True), "new_source": fit.estimator == "mixed",
            "mean_lower": back(eta - half_mean), "mean_upper": back(eta + half_mean),
            "pred_lower": back(eta - half_pred), "pred_upper": back(eta + half_pred)}


def _back_transform(fit):
    if not fit.form.log_response:
        return lambda v, smear=False: v
    return lambda v, smear=False: np.exp(v) * (fit.smearing if smear else 1.0)


def influence(fit) -> dict:
    """Leverage, studentized residuals and Cook's distance of each calibration record.

    Parameters
    ----------
    fit : refit.models.fitting.Fit

    Returns
    -------
    dict of ndarray, shape (n,)
        ``leverage`` h_ii (diagonal of the hat matrix of the weighted design),
        ``studentized`` e_i / (s sqrt(w_i^-1 (1 - h_ii))) (internally studentized),
        ``cooks`` = studentized^2 h_ii / (p (1 - h_ii)), ``fitted`` and ``residuals``
        on the fitting scale; plus ``p`` and ``n``.

    Notes
    -----
    Cook (1977), Technometrics 19:15; the definitions of statsmodels'
    ``OLSInfluence`` (``hat_matrix_diag``, ``resid_studentized``,
    ``cooks_distance``). For robust estimators (Huber) the residuals and scale are the
    robust fit's and the figures are descriptive.
    """
    res = fit.result
    X = fit.form.design(fit.x)
    w = np.ones(len(X)) if fit.weights is None else np.asarray(fit.weights, dtype=float)
    Q, _ = np.linalg.qr(X * np.sqrt(w)[:, None])
    h = np.clip((Q ** 2).sum(axis=1), 0.0, 1.0)
    s = float(res.residual_std_error)
    e = np.asarray(res.residuals, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = e * np.sqrt(w) / (s * np.sqrt(1.0 - h))
        d = r ** 2 * h / (X.shape[1] * (1.0 - h))
    return {"leverage": h, "studentized": r, "cooks": d,
            "fitted": np.asarray(res.fitted, dtype=float), "residuals": e,
            "p": int(X.shape[1]), "n": int(len(X))}


#: share of the points in each LOWESS window of the residual trend (statsmodels' default)
TREND_FRAC = 2.0 / 3.0


def residual_trend(fitted, residuals, *, frac: float = TREND_FRAC):
    """A LOWESS smooth of residuals against fitted values, sorted by fitted value.

    Returns
    -------
    (x, y) : ndarray, shape (m,)
        Fitted values and the smoothed residual [unit of the residuals]; m the finite
        pairs. ``statsmodels.nonparametric.smoothers_lowess.lowess`` (Cleveland 1979,
        JASA 74:829), ``frac`` of the points per window, 3 robustifying iterations.
    """
    from statsmodels.nonparametric.smoothers_lowess import lowess

    x = np.asarray(fitted, dtype=float)
    e = np.asarray(residuals, dtype=float)
    ok = np.isfinite(x) & np.isfinite(e)
    out = lowess(e[ok], x[ok], frac=frac, it=3, return_sorted=True)
    return out[:, 0], out[:, 1]


def influential(cooks, leverage, p: int, *, max_labels: int = MAX_LABELS) -> np.ndarray:
    """Indices of records to label: Cook's distance > 4/n or leverage > 2p/n, largest
    Cook's distance first, at most ``max_labels``."""
    cooks = np.asarray(cooks, dtype=float)
    leverage = np.asarray(leverage, dtype=float)
    n = cooks.size
    mask = (cooks > COOKS_FACTOR / n) | (leverage > LEVERAGE_FACTOR * p / n)
    idx = np.flatnonzero(mask)
    order = np.argsort(-np.nan_to_num(cooks[idx], nan=-1.0), kind="stable")
    return idx[order][:max_labels]


def normal_qq(values) -> tuple[np.ndarray, np.ndarray, tuple[float, float]]:
    """Normal Q-Q points of residuals and the reference line through them.

    Returns
    -------
    (theoretical, ordered, (slope, intercept))
        Theoretical normal quantiles (Filliben's plotting positions), the sorted values,
        and the least-squares line through the points, as ``scipy.stats.probplot``
        returns them.
    """
    from scipy import stats

    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    (osm, osr), (slope, intercept, _) = stats.probplot(v, dist="norm")
    return np.asarray(osm), np.asarray(osr), (float(slope), float(intercept))


#: significance level of the report's Breusch-Pagan sentence (common practice)
BP_ALPHA = 0.05
def het_design(design) -> np.ndarray:
    """The regressors of a Breusch-Pagan auxiliary regression from a fit's design.

    A constant, then every non-constant column of ``design`` centred and divided by its
    standard deviation (the test statistic n R² does not change under this; the
    auxiliary least squares is better conditioned). Constant columns are dropped, so a
    fit through the origin gets the constant the test needs.
    """
    X = np.asarray(design, dtype=float)
    sd = X.std(axis=0)
    keep = sd > 0
    z = (X[:, keep] - X[:, keep].mean(axis=0)) / sd[keep]
    return np.column_stack([np.ones(len(X)), z])


def breusch_pagan(residuals, design) -> dict:
    """Breusch-Pagan test: does the residual variance change with the regressors?

    Parameters
    ----------
    residuals : array_like, shape (n,)
        Residuals of the fit [unit of the equation's response].
    design : array_like, shape (n, p)
        The fit's design matrix (``Fit.form.design(Fit.x)``).

    Returns
    -------
    dict
        ``lm`` (the Lagrange-multiplier statistic n R²), ``df`` (its chi-square degrees
        of freedom), ``p`` (its p-value), ``f`` and ``f_p`` (the F form), ``n``.

    Notes
    -----
    Koenker's studentized form (robust to non-normal residuals), as
    ``statsmodels.stats.diagnostic.het_breuschpagan`` computes it by default, on the
    regressors of :func:`het_design`. Breusch & Pagan (1979), Econometrica 47:1287;
    Koenker (1981), J. Econometrics 17:107.
    """
    from statsmodels.stats.diagnostic import het_breuschpagan

    e = np.asarray(residuals, dtype=float)
    Z = het_design(design)
    lm, lm_p, f, f_p = het_breuschpagan(e, Z)
    return {"lm": float(lm), "df": int(Z.shape[1] - 1), "p": float(lm_p), "f": float(f),
            "f_p": float(f_p), "n": int(e.size)}


def random_intercept(residuals, groups) -> dict:
    """Between- and within-source spread of residuals: a random-intercept model.

    Parameters
    ----------
    residuals : array_like, shape (n,)
        Residuals of a fit [unit of its response].
    groups : array_like, shape (n,)
        The source (or other group) of each residual; rows without a group are left out.

    Returns
    -------
    dict
        ``between_sd`` and ``within_sd`` [unit of the residuals], ``icc`` (between
        variance over total), ``n_groups``, ``n``, ``boundary`` (True when the between
        variance is zero or on the boundary), ``converged``, ``problem`` (a reason when no
        model could be fitted, else None), ``fallback`` and ``warnings`` (as the mixed
        estimator records them) and ``of`` (``"residuals"``).

    Notes
    -----
    residual_ij = mu + u_j + e_ij, u_j ~ N(0, tau²), e_ij ~ N(0, sigma²), fitted by REML
    with refit's mixed estimator (:func:`refit.models.mixed.fit_mixed`: statsmodels
    ``MixedLM``, an intercept-only design, ``groups`` = source, the same optimiser
    restarts and boundary rule as every mixed fit in refit); ICC = tau² / (tau² + sigma²).
    On the boundary (tau² below ``refit.models.mixed.BOUNDARY_RATIO`` sigma²) the
    estimator falls back to the pooled SD of the residuals, which is REML's sigma when
    tau² = 0. Laird & Ware (1982), Biometrics 38:963.
    """
    import pandas as pd

    from refit.errors import InvalidDataError
    from refit.models.mixed import fit_mixed

    e = np.asarray(residuals, dtype=float)
    g = pd.Series(np.asarray(groups, dtype=object))
    ok = np.isfinite(e) & g.notna().to_numpy()
    e, g = e[ok], g[ok].astype(str).to_numpy()
    out = {"between_sd": np.nan, "within_sd": np.nan, "icc": np.nan,
           "n_groups": int(len(set(g))), "n": int(e.size), "boundary": False,
           "converged": False, "problem": None, "fallback": None, "warnings": [],
           "of": "residuals"}
    if out["n_groups"] < 2:
        out["problem"] = (f"{out['n_groups']} source(s): a between-source variance needs at "
                          "least two")
        return out
    if out["n"] <= out["n_groups"]:
        out["problem"] = "every source has a single soil: no within-source variance"
        return out
    try:
        res = fit_mixed(np.ones((e.size, 1)), e, g, names=["intercept"])
    except InvalidDataError as exc:
        out["problem"] = f"the random-intercept model could not be fitted ({exc})"
        return out
    return {**out, **components(res.details)}


def components(details: dict) -> dict:
    """The between- and within-source SDs, ICC and flags of a mixed fit's ``details``
    (:func:`refit.models.mixed.fit_mixed`), as the report states them."""
    return {"between_sd": float(details["between_sd"]),
            "within_sd": float(details["within_sd"]), "icc": float(details["icc"]),
            "boundary": bool(details.get("boundary")),
            "converged": bool(details.get("converged", False)),
            "fallback": details.get("fallback"),
            "warnings": list(details.get("warnings", [])),
            "between_sd_se": float(details.get("between_sd_se", np.nan)),
            "icc_se": float(details.get("icc_se", np.nan))}
