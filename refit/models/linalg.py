"""Small numerical helpers shared by the estimators and the prediction intervals.

Internal. Input checks of a design and of a straight line, the thin QR and OLS on the raw
design (its orthonormal factor Q gives leverages and the batched resampling of
:mod:`refit.models.intervals`), batching of large resampling jobs, and one BLAS thread for tall,
narrow products. :func:`refit.models.lsq.solve_lsq` is the fitting engine's solver (centred and
scaled terms, coefficient covariance); the QR here serves the methods that work in the
basis Q of the design as given.
"""

from __future__ import annotations

import functools

import numpy as np

from refit.errors import InvalidDataError

RANK_TOL = 1e-10             # relative size of a diagonal of R below which a design is singular
CHUNK_ELEMENTS = 1_000_000   # resampled index elements handled per batch (memory bound)


# ----------------------------------------------------------------------------- input checks
def _as_design(X, y, *, min_extra: int = 1, who: str = "fit") -> tuple[np.ndarray, np.ndarray]:
    """Return X (n, p) and y (n,) as finite float arrays, or raise InvalidDataError."""
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    if X.ndim != 2 or y.ndim != 1 or X.shape[0] != y.shape[0]:
        raise InvalidDataError(
            f"{who}: the design must be a table of n rows by p columns and the response a "
            f"column of the same n rows; got design shape {X.shape} and response shape "
            f"{y.shape}. Pass one response value per design row.")
    n, p = X.shape
    for name, arr in (("design", X), ("response", y)):
        bad = ~np.isfinite(arr)
        if bad.any():
            row = int(np.argwhere(bad)[0][0])
            raise InvalidDataError(
                f"{who}: the {name} holds {int(bad.sum())} missing or infinite value(s) "
                f"(first at row {row + 1}); drop or fill those rows before fitting.")
    if n < p + min_extra:
        raise InvalidDataError(
            f"{who}: {n} rows are too few for {p} coefficient(s); at least {p + min_extra} "
            f"rows are needed. Add calibration rows or use a simpler form.")
    return X, y


def _line_xy(x, y, who):
    """Return x (n,) and y (n,) of a straight-line fit as finite floats; x must vary."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.ndim != 1:
        raise InvalidDataError(f"{who}: fits a straight line; pass one predictor column "
                               f"(got shape {x.shape}).")
    X, y = _as_design(np.column_stack([np.ones_like(x), x]), y, min_extra=1, who=who)
    if np.ptp(x) == 0:
        raise InvalidDataError(f"{who}: the predictor is constant ({x[0]!r} on every row); "
                               f"a slope needs at least two different values.")
    return X[:, 1], y


# ----------------------------------------------------------------------------- QR and OLS
def _qr(X: np.ndarray, who: str) -> tuple[np.ndarray, np.ndarray]:
    """Thin QR of X with a rank check; returns Q (n, p) and R (p, p) with X = Q R."""
    # largest |x| per column, without an n x p array of absolute values
    scale = np.maximum(X.max(axis=0), -X.min(axis=0))
    scale[scale == 0] = 1.0
    Q, R = np.linalg.qr(X / scale)
    d = np.abs(np.diag(R))
    if d.min() <= RANK_TOL * d.max():
        raise InvalidDataError(
            f"{who}: the design is rank deficient (a term is constant or a combination of "
            f"others, e.g. column {int(d.argmin()) + 1}); drop that term or add rows that "
            f"vary it.")
    return Q, R * scale


def _solve_r(R: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Solve R Z = B for the small (p, p) factor R (LAPACK gesv; scipy's multi-threaded
    triangular solve can stall for milliseconds on tiny systems under load)."""
    return np.linalg.solve(R, B)


def ols_solve(X, y, who):
    """OLS by QR: coefficients, residuals, Q, R."""
    Q, R = _qr(X, who)
    b = _solve_r(R, Q.T @ y)
    return b, y - X @ b, Q, R


# ----------------------------------------------------------------------------- batches, threads
def _chunks(total: int, per_item: int):
    """(start, size) batches of ``total`` items of ``per_item`` elements each."""
    size = max(1, CHUNK_ELEMENTS // max(per_item, 1))
    for start in range(0, total, size):
        yield start, min(size, total - start)


@functools.cache
def _blas_libs() -> tuple:
    """threadpoolctl's controllers of the BLAS libraries loaded in this process (found
    once: taking stock of the loaded libraries costs far more than the work it guards)."""
    try:
        import scipy.linalg  # noqa: F401  (load its BLAS before taking stock)
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - threadpoolctl comes with scikit-learn
        return ()
    return tuple(ThreadpoolController().select(user_api="blas").lib_controllers)


class _OneBlasThread:
    """Context: every loaded BLAS runs one thread inside, its own count is restored after.

    The effect of ``threadpoolctl``'s ``limit(limits=1, user_api="blas")`` at the cost of
    two small library calls per BLAS: only the thread counts are read and set, not the
    libraries' full descriptions that ``limit`` gathers on every entry.
    """

    __slots__ = ("_saved",)

    def __enter__(self):
        saved = []
        for lib in _blas_libs():
            n = lib.get_num_threads()
            if n != 1:
                lib.set_num_threads(1)
                if n is not None:
                    saved.append((lib, n))
        self._saved = saved
        return self

    def __exit__(self, *exc):
        for lib, n in reversed(self._saved):
            lib.set_num_threads(n)
        self._saved = []
        return False


def one_blas_thread():
    """Context that runs BLAS single-threaded (tall, narrow designs gain nothing from
    threads, and on a busy machine thread hand-offs cost more than the work)."""
    return _OneBlasThread()


def with_one_blas_thread(func):
    """Decorator: run ``func`` inside :func:`one_blas_thread`."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with one_blas_thread():
            return func(*args, **kwargs)
    return wrapper
