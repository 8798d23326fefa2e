"""Transfer-function forms and their design matrices.

A form turns predictor columns into the terms of a model that is linear in its
coefficients: ``linear`` (optionally through the origin), ``quadratic``, ``polynomial`` of
degree k, and ``exponential`` (``ln y = a + b x``, fitted on the log scale, back-transformed
with Duan's smearing estimate; Duan 1983, JASA 78:605). Several predictors at once are
linear in each; quadratic and polynomial forms add powers of each predictor separately
(no cross products). Term names follow the coefficient-file contract: ``intercept``,
``bk_depth_cm``, ``bk_depth_cm^2``, ...
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refit.errors import UsageError

FORMS = ("linear", "quadratic", "polynomial", "exponential")


@dataclass(frozen=True)
class Form:
    """A model form over named predictors.

    Attributes
    ----------
    name : str
        One of :data:`FORMS`.
    predictors : tuple of str
        Predictor names, in design order.
    degree : int
        Highest power of each predictor (1 for linear and exponential).
    through_origin : bool
        No intercept term.
    log_response : bool
        The response is modelled on the natural-log scale (exponential form).
    """

    name: str
    predictors: tuple[str, ...]
    degree: int = 1
    through_origin: bool = False
    log_response: bool = False

    @property
    def intercept(self) -> bool:
        """Whether the design has an intercept column (first)."""
        return not self.through_origin

    @property
    def terms(self) -> list[str]:
        """Ordered term names: intercept, then each predictor with its powers."""
        out = [] if self.through_origin else ["intercept"]
        for p in self.predictors:
            out += [p if d == 1 else f"{p}^{d}" for d in range(1, self.degree + 1)]
        return out

    @property
    def n_params(self) -> int:
        """Number of coefficients."""
        return len(self.terms)

    @property
    def min_rows(self) -> int:
        """Fewest rows that leave one residual degree of freedom: coefficients + 1."""
        return self.n_params + 1

    def design(self, x: np.ndarray) -> np.ndarray:
        """Design matrix for predictor values.

        Parameters
        ----------
        x : ndarray, shape (n, k) or (n,)
            Predictor values, columns in the order of :attr:`predictors` [their units].

        Returns
        -------
        ndarray, shape (n, p)
            Columns in the order of :attr:`terms`.
        """
        x = np.asarray(x, dtype=float)
        if x.ndim == 1:
            x = x[:, None]
        n, k = x.shape
        out = np.empty((n, self.n_params), order="F")  # columns contiguous: fast
        j = 0
        if not self.through_origin:
            out[:, 0] = 1.0
            j = 1
        for c in range(k):
            col = x[:, c]
            power = col
            for d in range(1, self.degree + 1):
                if d > 1:
                    power = power * col
                out[:, j] = power
                j += 1
        return out

    def design_dd(self, x: np.ndarray):
        """The design in double-double: ``(high, low)`` arrays whose sum holds each power
        of the data to about 32 significant digits (:func:`refit.models.refine.powers_dd`),
        for the refinement of ill-conditioned fits; ``low`` is zero for exact columns."""
        from refit.models.refine import powers_dd

        x = np.asarray(x, dtype=float)
        if x.ndim == 1:
            x = x[:, None]
        hi, lo = [], []
        if not self.through_origin:
            hi.append(np.ones(x.shape[0]))
            lo.append(np.zeros(x.shape[0]))
        for c in range(x.shape[1]):
            h, l_ = powers_dd(x[:, c], self.degree)
            hi += h
            lo += l_
        return np.column_stack(hi), np.column_stack(lo)

    def to_model_scale(self, y: np.ndarray) -> np.ndarray:
        """The response on the scale the model is fitted on (log for exponential)."""
        y = np.asarray(y, dtype=float)
        return np.log(y) if self.log_response else y

    def describe(self) -> str:
        """The equation in words, e.g. ``y = b0 + b1 x + b2 x^2``."""
        lhs = "ln(y)" if self.log_response else "y"
        return f"{lhs} = " + " + ".join(f"b[{t}]" + ("" if t == "intercept" else f"*{t}")
                                        for t in self.terms)


def make_form(form: str, predictors, *, degree: int | None = None,
              through_origin: bool = False) -> Form:
    """Build a :class:`Form` from user arguments, refusing unknown or inconsistent ones.

    Parameters
    ----------
    form : str
        ``linear``, ``quadratic``, ``polynomial`` (needs ``degree``) or ``exponential``.
    predictors : str or sequence of str
        Predictor names.
    degree : int, optional
        Polynomial degree (``polynomial`` only; ``quadratic`` is degree 2).
    through_origin : bool
        Drop the intercept (not for the exponential form).

    Raises
    ------
    UsageError
        Unknown form (the valid ones are listed), a missing or invalid degree, or
        ``through_origin`` with the exponential form.
    """
    if not isinstance(form, str) or form not in FORMS:
        raise UsageError(f"unknown form {form!r}; choose one of: {', '.join(FORMS)}")
    preds = (predictors,) if isinstance(predictors, str) else tuple(predictors)
    if not preds:
        raise UsageError("no predictors given; name at least one column, e.g. "
                         "predictors=['bk_depth_cm']")
    if len(set(preds)) != len(preds):
        raise UsageError(f"predictors repeat a name: {list(preds)}; name each column once")
    fixed = {"linear": 1, "quadratic": 2, "exponential": 1}
    if form == "polynomial":
        if degree is None or isinstance(degree, bool) or int(degree) != degree or degree < 1:
            raise UsageError(f"form 'polynomial' needs degree=k with k a whole number >= 1; "
                             f"got degree={degree!r}")
        deg = int(degree)
    else:
        if degree is not None and degree != fixed[form]:
            raise UsageError(f"form {form!r} has degree {fixed[form]}; got degree={degree!r} "
                             "(use form='polynomial' for another degree)")
        deg = fixed[form]
    if through_origin and form == "exponential":
        raise UsageError("through_origin applies to linear and polynomial forms, not to the "
                         "exponential form (ln y = a + b x always has its intercept a)")
    return Form(name=form, predictors=preds, degree=deg, through_origin=bool(through_origin),
                log_response=form == "exponential")


def duan_smearing(residuals: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Duan's smearing factor for a log-scale model: mean of ``exp(residual)``.

    Parameters
    ----------
    residuals : ndarray
        Residuals on the log scale [dimensionless].
    weights : ndarray, optional
        WLS weights; residuals are first rescaled to a weight-1 observation,
        ``e_i sqrt(w_i)``, so the factor refers to a new observation of weight 1.

    Returns
    -------
    float
        Multiply ``exp(x0'b)`` by this to estimate the mean of ``y`` at ``x0``.

    References
    ----------
    Duan, N. (1983). Smearing estimate: a nonparametric retransformation method.
    Journal of the American Statistical Association 78(383):605-610.
    """
    e = np.asarray(residuals, dtype=float)
    if weights is not None:
        e = e * np.sqrt(np.asarray(weights, dtype=float))
    return float(np.mean(np.exp(e)))
