"""Spatial blocks: groups of calibration soils made from their coordinates.

Soils near each other share climate, parent material and often a source, so a fit tested
on a neighbour of its training soils looks better than it will on a new region; holding
out whole blocks of space estimates the error on a region the fit has never seen (Roberts
et al. 2017, Ecography 40:913). :func:`spatial_blocks` makes the blocks (a grid of
``block_km`` on the equal-area plane of :func:`project_km`, or k-means clusters);
:class:`refit.validate.splitters.SpatialBlockSplitter` splits them like groups.
"""

from __future__ import annotations

import functools

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.inputs import rows_text

#: mean Earth radius [km] (IUGG value, from memory)
EARTH_RADIUS_KM = 6371.0088
#: k-means blocks per fold when no block size is given (common practice: several blocks
#: per fold so folds can be balanced)
BLOCKS_PER_FOLD = 5
_KMEANS_SITES = 10_000  # k-means runs on at most this many distinct sites (seeded sample)


@functools.cache
def _blas():
    from threadpoolctl import ThreadpoolController  # a scikit-learn dependency

    return ThreadpoolController()


# ----------------------------------------------------------------------------- spatial
def project_km(latitude, longitude) -> np.ndarray:
    """Sinusoidal equal-area projection about the mean longitude, [km] east and north.

    ``x = R (lon - lon0) cos(lat)``, ``y = R lat`` (angles in radians, R the mean Earth
    radius). Areas are true; shapes stretch away from the central meridian, which matters
    little for blocks of a study region (a grid across the date line is not supported).
    """
    lat = np.radians(np.asarray(latitude, dtype=float))
    lon = np.asarray(longitude, dtype=float)
    lon0 = np.mean(lon)
    return np.column_stack([EARTH_RADIUS_KM * np.radians(lon - lon0) * np.cos(lat),
                            EARTH_RADIUS_KM * lat])


def coordinates(frame, labels, kind):
    out = []
    for name, limit in (("latitude", 90.0), ("longitude", 180.0)):
        if name not in frame.columns:
            raise UsageError(f"scheme 'spatial-block' needs the column {name!r} (decimal "
                             "degrees); it is not in the table")
        import pandas as pd

        v = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        bad = ~(np.abs(v) <= limit)
        if bad.any():
            raise InvalidDataError(f"column {name!r} is empty, not a number or beyond "
                                   f"+-{limit:g} degrees at {rows_text(labels, bad, kind)}; "
                                   "spatial blocks need every row's coordinates")
        out.append(v)
    return out


def spatial_blocks(latitude, longitude, *, block_km=None, n_blocks=25, seed=0):
    """Group rows into spatial blocks: grid cells of ``block_km`` or k-means clusters.

    Parameters
    ----------
    latitude, longitude : array_like
        Coordinates [decimal degrees].
    block_km : float, optional
        Side of the square grid cells in the projected plane [km] (:func:`project_km`).
    n_blocks : int
        Number of k-means clusters when ``block_km`` is None (at most the number of
        distinct locations; clustered on a seeded sample of 10,000 sites when there are
        more, then every row joins its nearest centre).
    seed : int
        Seed of k-means.

    Returns
    -------
    codes : ndarray of int
        Block of each row (0..b-1).
    info : dict
        ``block_method`` (``grid`` or ``kmeans``), ``n_blocks``, ``block_km`` (the grid
        side, or for k-means the median block diameter: twice the largest distance of a
        block's rows from its centre) [km], ``block_km_range`` (smallest and largest).
    """
    xy = project_km(latitude, longitude)
    if block_km is not None:
        cells = np.floor((xy - xy.min(axis=0)) / float(block_km)).astype(np.int64)
        _, codes = np.unique(cells, axis=0, return_inverse=True)
        codes = codes.ravel()
        return codes, {"block_method": "grid", "n_blocks": int(codes.max() + 1),
                       "block_km": float(block_km)}
    from sklearn.cluster import KMeans

    sites = np.unique(xy, axis=0)
    k = min(int(n_blocks), len(sites))
    if k < 2:
        return np.zeros(len(xy), dtype=int), {"block_method": "kmeans", "n_blocks": 1,
                                              "block_km": 0.0}
    if len(sites) > _KMEANS_SITES:  # cluster a seeded sample of sites, assign every row
        pick = np.random.default_rng(seed).choice(len(sites), _KMEANS_SITES, replace=False)
        sites = sites[np.sort(pick)]
    with _blas().limit(limits=1):  # small problem: threads only wait on a busy machine
        km = KMeans(n_clusters=k, random_state=seed, n_init=10).fit(sites)
        raw = km.predict(xy)
    dist = np.linalg.norm(xy - km.cluster_centers_[raw], axis=1)
    _, codes = np.unique(raw, return_inverse=True)  # a cluster may get no rows
    k = int(codes.max() + 1)
    diam = np.zeros(k)
    np.maximum.at(diam, codes, 2.0 * dist)
    return codes, {"block_method": "kmeans", "n_blocks": int(k),
                   "block_km": float(np.median(diam)),
                   "block_km_range": [float(diam.min()), float(diam.max())]}
