"""The report's figures: one small function per figure, each returning a matplotlib Figure.

Every function draws numbers it is given (computed by :mod:`refit.report.diagnostics`,
``Fit.predict``, the run folder) and computes no science of its own. The artists that
carry numbers have a ``gid`` (e.g. ``prediction-lower``) so tests and other tools can find
them and read their data back. Figures are built on the Agg canvas, never through pyplot.
"""

from __future__ import annotations

import numpy as np

from refit.curate.schema import unit_notation
from refit.report import style as st


def _mark_domain(ax, domain, *, label: str = "outside the calibration range") -> None:
    """Shade the x range beyond ``domain`` = (min, max) and draw its limits."""
    if domain is None:
        return
    lo, hi = domain
    x0, x1 = ax.get_xlim()
    if x0 < lo:
        ax.axvspan(x0, lo, color=st.DOMAIN, alpha=0.12, lw=0, label=label, gid="outside-low")
        label = None
    if x1 > hi:
        ax.axvspan(hi, x1, color=st.DOMAIN, alpha=0.12, lw=0, label=label, gid="outside-high")
    for v, gid in ((lo, "domain-min"), (hi, "domain-max")):
        ax.axvline(v, color=st.DOMAIN, lw=0.9, ls=":", gid=gid)
    ax.set_xlim(x0, x1)


def _mark_turning(ax, tp, kind: str | None, what: str) -> None:
    if tp is None or not np.isfinite(tp):
        return
    x0, x1 = ax.get_xlim()
    if x0 <= tp <= x1:
        ax.axvline(tp, color=st.TURNING, lw=1.2, ls="-.", gid="turning-point",
                   label=f"turning point ({kind or 'extremum'}) at {what} = {tp:.4g}")


def _band(ax, x, lower, upper, *, color, alpha, gid: str, label: str, edges: str | None):
    ax.fill_between(x, lower, upper, color=color, alpha=alpha, lw=0, gid=f"{gid}-band",
                    label=label)
    if edges:
        ax.plot(x, lower, color=color, lw=0.9, ls=edges, gid=f"{gid}-lower")
        ax.plot(x, upper, color=color, lw=0.9, ls=edges, gid=f"{gid}-upper")


def _scatter(ax, x, y, label="calibration soils"):
    ax.plot(x, y, ls="none", marker="o", mfc="white", mec=st.DATA, mew=0.9, ms=4.2,
            alpha=0.9, gid="data", label=label)


def _curve_panel(ax, points, bands, *, x_label, y_label, domain, turning, level, title):
    x = np.asarray(bands["x"], dtype=float)
    pct = f"{100 * level:.0f}%"
    ax.set_xlim(x.min(), x.max())
    how = f", {bands['method']}" if bands.get("method") else ""
    _band(ax, x, bands["pred_lower"], bands["pred_upper"], color=st.PREDICTION_BAND,
          alpha=st.PREDICTION_ALPHA, gid="prediction", edges="--",
          label=f"{pct} prediction band (a soil of a new source{how})"
          if bands.get("new_source") else f"{pct} prediction band (a new soil{how})")
    if bands.get("mean_lower") is not None:
        _band(ax, x, bands["mean_lower"], bands["mean_upper"], color=st.MEAN_BAND,
              alpha=st.MEAN_ALPHA, gid="mean", edges=None,
              label=f"{pct} confidence band (the mean)")
    _scatter(ax, points[0], points[1])
    ax.plot(x, bands["fitted"], color=st.CURVE, lw=1.8, gid="fitted", label="fitted curve")
    _mark_domain(ax, domain)
    if turning:
        _mark_turning(ax, *turning)
    ax.set_xlabel(x_label)
    ax.set_ylabel(y_label)
    ax.set_title(title)
    ax.legend(loc="best")


def calibration(points, bands, *, x_label: str, y_label: str, domain=None, turning=None,
                level: float = 0.95, title: str = "Calibration fit", inversion=None,
                inversion_labels=None, inversion_domain=None):
    """Calibration scatter with the fitted curve, its confidence and prediction bands.

    Parameters
    ----------
    points : (array_like, array_like)
        The calibration records on the equation's axes: (regressor, response).
    bands : dict
        ``x``, ``fitted``, ``mean_lower``, ``mean_upper``, ``pred_lower``, ``pred_upper``
        (e.g. :func:`refit.report.diagnostics.regression_bands`; for an inverse fit the
        prediction band may be ``Fit.predict``'s interval of another method).
    x_label, y_label : str
        Axis labels with units.
    domain : (float, float), optional
        The calibration range of the regressor: beyond it is shaded.
    turning : (float, str, str), optional
        (turning point, kind, variable name) of a quadratic, marked when in view.
    level : float
        Coverage of the bands (for the legend).
    inversion : dict, optional
        For a forward fit: ``x`` (feature values), ``estimate``, ``lower``, ``upper``
        (climate, from ``Fit.predict``) drawn as a second panel with ``inversion_labels``
        = (feature label, climate label) and the records as ``inversion_points``.
    inversion_domain : (float, float), optional
        The feature's calibration range.

    Returns
    -------
    matplotlib.figure.Figure
    """
    with st.styled():
        fig, axes = st.figure(2 if inversion is not None else 1)
        _curve_panel(axes[0], points, bands, x_label=x_label, y_label=y_label,
                     domain=domain, turning=turning, level=level, title=title)
        if inversion is not None:
            _inversion_panel(axes[1], points, inversion, inversion_labels, inversion_domain,
                             level)
    return fig


def _inversion_panel(ax, points, inv, labels, domain, level):
    x = np.asarray(inv["x"], dtype=float)
    pct = f"{100 * level:.0f}%"
    ax.set_xlim(np.nanmin(x), np.nanmax(x))
    _band(ax, x, inv["lower"], inv["upper"], color=st.INVERSION, alpha=st.PREDICTION_ALPHA,
          gid="inversion", edges="--", label=f"{pct} calibration interval (inverted)")
    _scatter(ax, points[1], points[0])
    ax.plot(x, inv["estimate"], color=st.INVERSION, lw=1.8, gid="inversion-estimate",
            label="estimate (inverted fit)")
    _mark_domain(ax, domain)
    feature, climate = labels or ("feature", "climate")
    ax.set_xlabel(feature)
    ax.set_ylabel(climate)
    ax.set_title("Inverted: climate from the feature")
    ax.legend(loc="best")


def residuals(fitted, resid, qq, *, y_label: str, studentized=None, unit: str = "",
              trend=None):
    """Residuals against fitted values, and a normal Q-Q plot.

    Parameters
    ----------
    fitted, resid : array_like
        Fitted values and residuals on the fitting scale [unit of the response].
    qq : (array_like, array_like, (float, float))
        Theoretical quantiles, ordered standardized residuals and the reference line
        (slope, intercept) (:func:`refit.report.diagnostics.normal_qq`).
    y_label : str
        The response's label with its unit.
    unit : str
        The residuals' unit (on the residual axis); empty for a log response.
    trend : (array_like, array_like), optional
        A smooth of the residuals against the fitted values (x, y), e.g.
        :func:`refit.report.diagnostics.residual_trend`: a curve in it is easier to see
        than in the cloud.
    """
    osm, osr, (slope, intercept) = qq
    with st.styled():
        fig, (a, b) = st.figure(2)
        a.axhline(0.0, color=st.REFERENCE, lw=0.9, gid="zero")
        a.plot(fitted, resid, ls="none", marker="o", mfc="white", mec=st.DATA, mew=0.9,
               ms=4.2, gid="residuals")
        if trend is not None:
            a.plot(*trend, color=st.CURVE, lw=1.6, gid="residual-trend",
                   label="LOWESS trend")
            a.legend(loc="upper right")
        a.set_xlabel(f"fitted {y_label}")
        shown = f" [{unit_notation(unit)}]" if unit else ""
        a.set_ylabel(f"residual (observed - fitted){shown}")
        a.set_title("Residuals against fitted values")
        b.plot(osm, osr, ls="none", marker="o", mfc="white", mec=st.DATA, mew=0.9, ms=4.2,
               gid="qq-points")
        line_x = np.array([np.min(osm), np.max(osm)])
        b.plot(line_x, slope * line_x + intercept, color=st.CURVE, lw=1.2, gid="qq-line",
               label="reference line")
        b.set_xlabel("normal quantile")
        b.set_ylabel("internally studentized residual")
        b.set_title("Normal Q-Q plot")
        b.legend(loc="upper left")
    return fig


def influence(leverage, cooks, labels, highlight, *, p: int):
    """Leverage and Cook's distance per record, influential records labelled.

    Parameters
    ----------
    leverage, cooks : array_like, shape (n,)
    labels : sequence of str, shape (n,)
        ``profile_id`` of each record.
    highlight : array_like of int
        Indices of the records to label (:func:`refit.report.diagnostics.influential`),
        the most influential first: labels are placed in this order and one that finds
        no free place (:func:`refit.report.labels.place_labels`) is left out.
    p : int
        Number of coefficients (for the 2p/n leverage guide).
    """
    from refit.report.diagnostics import COOKS_FACTOR, LEVERAGE_FACTOR
    from refit.report.labels import freeze_layout, place_labels

    h = np.asarray(leverage, dtype=float)
    d = np.asarray(cooks, dtype=float)
    n = h.size
    hi = np.asarray(highlight, dtype=int)
    names = [str(labels[i]) for i in hi]
    idx = np.arange(1, n + 1)
    with st.styled():
        fig, (a, b) = st.figure(2, height=PANEL_WITH_LEGEND)
        a.plot(h, d, ls="none", marker="o", mfc="white", mec=st.DATA, mew=0.9, ms=4.2,
               gid="influence-points", label="record")
        a.plot(h[hi], d[hi], ls="none", marker="o", color=st.FLAGGED, ms=5.5,
               gid="influential", label="influential (labelled by profile_id)")
        a.axhline(COOKS_FACTOR / n, color=st.FLAGGED, lw=0.9, ls="--", gid="cooks-guide",
                  label=f"Cook's D = {COOKS_FACTOR:g}/n")
        a.axvline(LEVERAGE_FACTOR * p / n, color=st.DOMAIN, lw=0.9, ls=":",
                  gid="leverage-guide", label=f"leverage = {LEVERAGE_FACTOR:g}p/n")
        a.set_xlabel("leverage (hat value)")
        a.set_ylabel("Cook's distance")
        a.set_title("Leverage and Cook's distance")
        b.vlines(idx, 0, d, color=st.DATA, lw=0.8, gid="cooks-stems")
        b.plot(idx[hi], d[hi], ls="none", marker="o", color=st.FLAGGED, ms=4.5)
        b.axhline(COOKS_FACTOR / n, color=st.FLAGGED, lw=0.9, ls="--")
        b.set_xlabel("record (order in the subset)")
        b.set_ylabel("Cook's distance")
        b.set_title("Cook's distance by record")
        for ax in (a, b):
            ax.margins(x=0.06, y=0.14)   # room for labels of the outermost points
            top = ax.get_ylim()[1]   # Cook's distance is never negative: 0 at the foot
            ax.set_ylim(-0.03 * top, top)
        fig.legend(*a.get_legend_handles_labels(), loc="outside lower center", ncol=4)
        renderer = freeze_layout(fig)
        place_labels(a, renderer, h[hi], d[hi], names, avoid=(h, d), color=st.FLAGGED)
        place_labels(b, renderer, idx[hi], d[hi], names, stems=(idx, d), color=st.FLAGGED)
    return fig


#: height of a two-panel figure with a legend row below the panels [inches]
PANEL_WITH_LEGEND = 4.2


def out_of_fold(observed, estimate, *, label: str, scheme: str, metrics: dict | None = None):
    """Out-of-fold observed against predicted for one scheme, with the 1:1 line.

    Parameters
    ----------
    observed, estimate : array_like
        Every out-of-fold prediction of the scheme (all repeats) [unit of the response].
    label : str
        The response's label with its unit.
    scheme : str
        The scheme's name (title).
    metrics : dict, optional
        ``rmsep``, ``bias``, ``coverage`` to print in the corner.
    """
    obs = np.asarray(observed, dtype=float)
    est = np.asarray(estimate, dtype=float)
    with st.styled():
        fig, (a,) = st.figure(1, width=5.0, height=4.6)
        a.plot(est, obs, ls="none", marker="o", color=st.GROUPED, alpha=0.25, ms=3.5,
               mew=0, gid="oof-points", label="out-of-fold prediction")
        both = np.concatenate([obs[np.isfinite(obs)], est[np.isfinite(est)]])
        lim = (float(both.min()), float(both.max())) if both.size else (0.0, 1.0)
        pad = 0.04 * (lim[1] - lim[0] or 1.0)
        lim = (lim[0] - pad, lim[1] + pad)
        a.plot(lim, lim, color=st.REFERENCE, lw=1.0, gid="one-to-one", label="1:1")
        a.set_xlim(lim)
        a.set_ylim(lim)
        a.set_aspect("equal")
        a.set_xlabel(f"predicted {label}")
        a.set_ylabel(f"observed {label}")
        a.set_title(f"Out-of-fold predictions ({scheme})")
        if metrics:
            # names left, values right-justified: lines of one length line up in a
            # monospaced font however long each value is
            kw = max(len(str(k).strip()) for k in metrics)
            vw = max(len(str(v)) for v in metrics.values())
            text = "\n".join(f"{str(k).strip():<{kw}}  {str(v):>{vw}}"
                             for k, v in metrics.items())
            a.text(0.98, 0.03, text, transform=a.transAxes, ha="right", va="bottom",
                   fontsize=8, family="DejaVu Sans Mono", gid="oof-metrics")
        a.legend(loc="upper left")
    return fig


def sites(longitude, latitude, kept, *, n_missing: int = 0):
    """Calibration sites by longitude and latitude, the subset's records marked.

    Parameters
    ----------
    longitude, latitude : array_like [decimal degrees]
    kept : array_like of bool
        The subset kept the record.
    n_missing : int
        Records without coordinates (not drawn; said in the title).
    """
    lon = np.asarray(longitude, dtype=float)
    lat = np.asarray(latitude, dtype=float)
    k = np.asarray(kept, dtype=bool)
    with st.styled():
        fig, (a,) = st.figure(1, width=6.0, height=4.6)
        a.plot(lon[~k], lat[~k], ls="none", marker="x", color=st.GREY, ms=4, mew=0.9,
               gid="sites-removed", label=f"not in the subset ({int((~k).sum())})")
        a.plot(lon[k], lat[k], ls="none", marker="o", color=st.KEPT, mec="white", mew=0.4,
               ms=5.5, gid="sites-kept", label=f"kept by the subset ({int(k.sum())})")
        a.set_xlabel("longitude [°]")
        a.set_ylabel("latitude [°]")
        mid = np.nanmean(lat) if lat.size else 0.0
        a.set_aspect(1.0 / max(np.cos(np.radians(mid)), 0.1))   # equal distances at mid-latitude
        title = "Calibration sites"
        if n_missing:
            title += f" ({n_missing} without coordinates not shown)"
        a.set_title(title)
        a.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2)
    return fig


def coverage_width(ranks, coverage, width, kfold_coverage, kfold_width, *, level: float,
                   tolerance: float, scheme: str, unit: str = ""):
    """Out-of-fold coverage against mean interval width for every candidate, the recipe's
    scheme beside random k-fold: honest candidates sit in the nominal band.

    Parameters
    ----------
    ranks : array_like of int
        Leaderboard rank of each candidate (the point labels).
    coverage, width : array_like
        Coverage (fraction) and mean width [unit] under the recipe's scheme.
    kfold_coverage, kfold_width : array_like or None
        The same under random k-fold (None when the scheme is k-fold).
    level, tolerance : float
        Nominal coverage and how far below it a coverage may fall and still not be shown
        to under-cover (one-sided; :func:`refit.validate.candidates.coverage_tolerance`).
    scheme : str
        Name of the recipe's scheme.
    """
    from refit.report.labels import freeze_layout, place_labels

    r = np.asarray(ranks)
    cov = np.asarray(coverage, dtype=float)
    wid = np.asarray(width, dtype=float)
    with st.styled():
        fig, (a,) = st.figure(1, width=6.4, height=4.6)
        a.axhspan(level - tolerance, 1.0, color=st.KEPT, alpha=0.12, lw=0,
                  gid="nominal-band", label=f"covers: not shown to fall short of "
                                            f"{100 * level:.0f}% (at least "
                                            f"{100 * (level - tolerance):.1f}%)")
        a.axhline(level, color=st.REFERENCE, lw=0.9, ls="--", gid="nominal")
        if kfold_coverage is not None:
            kc = np.asarray(kfold_coverage, dtype=float)
            kw = np.asarray(kfold_width, dtype=float)
            for i in range(r.size):
                a.plot([kw[i], wid[i]], [kc[i], cov[i]], color=st.GREY, lw=0.7, zorder=1)
            a.plot(kw, kc, ls="none", marker="s", mfc="white", mec=st.RANDOM, mew=1.2,
                   ms=5.5, gid="random-kfold", label="random k-fold")
        a.plot(wid, cov, ls="none", marker="o", color=st.GROUPED, ms=6, gid="scheme",
               label=scheme)
        shown = f" [{unit_notation(unit)}]" if unit else ""
        a.set_xlabel(f"mean interval width{shown}")
        a.set_ylabel("out-of-fold coverage")
        a.yaxis.set_major_formatter(_percent())
        a.set_title("Coverage against width (labels: leaderboard rank)")
        fig.legend(*a.get_legend_handles_labels(), loc="outside lower center", ncol=3)
        a.margins(x=0.08, y=0.1)
        renderer = freeze_layout(fig)
        others = (np.concatenate([wid, kw]), np.concatenate([cov, kc])) \
            if kfold_coverage is not None else (wid, cov)
        place_labels(a, renderer, wid, cov, [str(v) for v in r], avoid=others,
                     gid="rank-label")
    return fig


def _percent():
    from matplotlib.ticker import PercentFormatter

    return PercentFormatter(xmax=1.0, decimals=0)


#: width of the per-source figure per source [inches], and its limits
SOURCE_WIDTH = (0.62, 6.4, 10.4)
#: spread of a source's points across its column (fraction of the column)
JITTER = 0.5
#: a source with fewer soils than this is drawn as points without a box
MIN_BOX = 5


def _jitter(n: int) -> np.ndarray:
    """Horizontal offsets of n points in a strip: a golden-ratio sequence (no random
    draw, so the picture is the same every time)."""
    return ((np.arange(n) * 0.6180339887) % 1.0 - 0.5) * JITTER


def by_source(names, residuals, n, coverage, *, level: float, y_label: str,
              column: str, scheme: str):
    """Residuals by source (top) and out-of-fold coverage by held-out source (bottom),
    one column per source in the order given.

    Parameters
    ----------
    names : sequence of str, shape (k,)
        The sources, in drawing order (e.g. by median residual).
    residuals : sequence of array_like, shape (k,)
        Each source's residuals of the fit on the whole subset [unit in ``y_label``].
    n : sequence of int, shape (k,)
        Soils per source (shown under its name).
    coverage : array_like, shape (k,)
        Each source's out-of-fold coverage (fraction; NaN: no prediction).
    level : float
        The nominal coverage; sources below it are drawn as filled vermilion triangles.
    y_label : str
        The residual axis label with its unit.
    column, scheme : str
        The group column and the cross-validation scheme (titles).
    """
    from refit.report.labels import freeze_layout

    k = len(names)
    cov = np.asarray(coverage, dtype=float)
    per, lo_w, hi_w = SOURCE_WIDTH
    with st.styled():
        fig, (a, b) = st.figure(1, nrows=2, sharex=True, height=6.8,
                                width=float(np.clip(per * k + 2.2, lo_w, hi_w)))
        _residual_panel(a, residuals, y_label=y_label, column=column)
        _coverage_panel(b, cov, level=level, column=column, scheme=scheme)
        _source_ticks(a, b, names, n, column)
        handles = [h for ax in (a, b) for h in ax.get_legend_handles_labels()[0]]
        labels = [t for ax in (a, b) for t in ax.get_legend_handles_labels()[1]]
        fig.legend(handles, labels, loc="outside lower center", ncol=3)
        _label_coverage(b, freeze_layout(fig), cov, level)
    return fig


def _residual_panel(a, residuals, *, y_label: str, column: str) -> None:
    """Each source's residuals as a strip of points over its box (top panel); a source
    with fewer than :data:`MIN_BOX` soils gets its points only (a box of one to four
    points would look like a spread it does not have)."""
    a.axhline(0.0, color=st.REFERENCE, lw=0.9, gid="zero")
    for i, r in enumerate(residuals):
        r = np.asarray(r, dtype=float)
        a.plot(i + _jitter(r.size), r, ls="none", marker="o", mfc="white", mec=st.DATA,
               mew=0.8, ms=3.6, alpha=0.85, gid="source-residuals", zorder=3,
               label="soil" if i == 0 else None)
    boxed = [i for i, r in enumerate(residuals) if np.size(r) >= MIN_BOX]
    if boxed:
        box = a.boxplot([np.asarray(residuals[i], dtype=float) for i in boxed],
                        positions=np.asarray(boxed, dtype=float), widths=0.6,
                        showfliers=False, manage_ticks=False,
                        medianprops={"color": st.CURVE, "lw": 1.8},
                        boxprops={"color": st.DATA, "lw": 0.9},
                        whiskerprops={"color": st.DATA, "lw": 0.9},
                        capprops={"color": st.DATA, "lw": 0.9})
        for artist in box["boxes"]:
            artist.set_gid("source-box")
        box["medians"][0].set_label("median, quartiles, 1.5 IQR whiskers"
                                    + (f" ({MIN_BOX}+ soils)" if len(boxed) < len(residuals)
                                       else ""))
    a.set_ylabel(y_label)
    a.set_title(f"Residuals (observed - fitted) by {column}, sorted by median")


def _coverage_panel(b, cov, *, level: float, column: str, scheme: str) -> None:
    """Each source's out-of-fold coverage against the nominal level (bottom panel)."""
    pos = np.arange(cov.size, dtype=float)
    fin = np.isfinite(cov)
    below = fin & (cov < level)
    ok = fin & ~below
    b.axhline(level, color=st.REFERENCE, lw=0.9, ls="--", gid="nominal",
              label=f"nominal {100 * level:.0f}%")
    b.vlines(pos[fin], level, cov[fin], color=st.GREY, lw=0.9, gid="coverage-stems")
    b.plot(pos[ok], cov[ok], ls="none", marker="o", mfc="white", mec=st.CURVE, mew=1.4,
           ms=6.5, gid="coverage-ok", label="at or above nominal")
    b.plot(pos[below], cov[below], ls="none", marker="v", color=st.FLAGGED, ms=7.5,
           gid="coverage-below", label="below nominal")
    for i in np.flatnonzero(~fin):
        b.text(pos[i], level, "no out-of-fold\nprediction", ha="center", va="bottom",
               fontsize=7, color=st.GREY, gid="coverage-missing")
    b.set_ylabel("out-of-fold coverage")
    b.yaxis.set_major_formatter(_percent())
    b.set_ylim(min(level - 0.1, float(cov[fin].min()) - 0.06) if fin.any() else level - 0.1,
               1.04)
    b.set_title(f"Out-of-fold coverage by {column} ({scheme}, all repeats)")


def _source_ticks(a, b, names, n, column: str) -> None:
    """Source names and soil counts under the bottom panel (slanted beyond 8 sources)."""
    k = len(names)
    b.set_xlim(-0.6, k - 0.4)
    b.set_xticks(np.arange(k, dtype=float), [f"{s}\nn = {m}" for s, m in zip(names, n)],
                 rotation=0 if k <= 8 else 35, ha="center" if k <= 8 else "right")
    b.set_xlabel(column)
    a.tick_params(labelbottom=False)


def _label_coverage(b, renderer, cov, level: float) -> None:
    """Coverage in percent beside each point, below-nominal sources first, kept clear of
    the points and stems."""
    from refit.report.labels import place_labels

    pos = np.arange(cov.size, dtype=float)
    fin = np.isfinite(cov)
    below = fin & (cov < level)
    order = np.concatenate([np.flatnonzero(below), np.flatnonzero(fin & ~below)])
    stems = [(np.full(20, pos[i]), np.linspace(level, cov[i], 20)) for i in np.flatnonzero(fin)]
    # the nominal line too: a label across it hides where the coverage stands against it
    line_x = np.linspace(-0.6, cov.size - 0.4, 40 * max(cov.size, 1))
    ax_ = np.concatenate([pos, line_x] + [s[0] for s in stems])
    ay_ = np.concatenate([np.where(fin, cov, level), np.full(line_x.size, level)]
                         + [s[1] for s in stems])
    place_labels(b, renderer, pos[order], cov[order], [f"{100 * c:.1f}%" for c in cov[order]],
                 avoid=(ax_, ay_), gid="coverage-label")
