"""Duplicate detection for a batch admitted into a calibration store.

Internal to :mod:`refit.curate.store` (which re-exports :func:`find_duplicates` and
:data:`DUPLICATE_TOLERANCE_DEG`). Stored records and earlier accepted rows of the batch are
indexed by id, by site (source plus a grid of ``tolerance_deg`` cells) and by their set of
measurements, so a batch row is compared only with the records it could duplicate.

Longitudes wrap around at the antimeridian: 179.9999 and -179.9999 are 0.0002 degree apart,
not 359.9998. The gap between two longitudes is the angular difference
``min(|d|, 360 - |d|)`` with ``d`` taken modulo 360, and a site near +-180 is also looked
up one turn (360 degrees) round, where its neighbours on the other side are indexed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Two records from the same source closer than this in latitude and in longitude are
#: taken for the same site [degree]; 0.0005 degree is about 55 m of latitude.
DUPLICATE_TOLERANCE_DEG = 0.0005
MEASUREMENTS = ("map_mm", "mat_c", "mar_mm", "bk_depth_cm", "bk_thickness_cm", "by_depth_cm",
                "sio2_wt", "tio2_wt", "al2o3_wt", "fe2o3_wt", "mno_wt", "mgo_wt", "cao_wt",
                "na2o_wt", "k2o_wt", "p2o5_wt")


def measurement_keys(frame: pd.DataFrame) -> np.ndarray:
    """The present measurements of each record as one hashable text key, ``None`` where
    fewer than two are present (vectorised: ``%.9g`` of each value, as ``f"{x:.9g}"``).

    Two records share a key exactly when every present measurement agrees to 9
    significant digits and the same measurements are present.
    """
    n = len(frame)
    key = np.full(n, "", dtype=object)
    count = np.zeros(n, dtype=int)
    for c in MEASUREMENTS:
        if c not in frame:
            continue
        v = pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype="float64") + 0.0
        ok = np.isfinite(v)
        if not ok.any():
            continue
        text = np.full(n, "", dtype=object)
        text[ok] = np.char.add(f"{c}=", np.char.mod("%.9g", v[ok])).astype(object) + ";"
        key = key + text
        count += ok
    return np.where(count >= 2, key, None)


def _key_items(key: str) -> list[tuple[str, float]]:
    """``"map_mm=400;mat_c=12;"`` -> ``[("map_mm", 400.0), ("mat_c", 12.0)]``."""
    return [(c, float(v)) for c, v in (p.split("=") for p in key.split(";") if p)]


def longitude_gap(a: float, b: float) -> float:
    """Angular difference of two longitudes [degree], in [0, 180].

    ``min(|d|, 360 - |d|)`` with ``d = (a - b) mod 360`` (common practice for longitudes):
    179.9995 and -179.9995 are 0.001 degree apart.
    """
    d = abs(a - b) % 360.0
    return min(d, 360.0 - d)


def _home_cell(lat: float, lon: float, tol: float) -> tuple[int, int]:
    """The grid cell a site is indexed under (cells ``tol`` degree wide)."""
    return int(np.floor(lat / tol)), int(np.floor(lon / tol))


def _site_cells(lat: float, lon: float, tol: float) -> list[tuple[int, int]]:
    """Every cell that can hold a site within ``tol`` of (lat, lon), across the antimeridian.

    A site within ``tol`` of the query lies in the 3 x 3 block around the query's cell; for
    a query within ``tol`` of +-180 degrees, also in the block around the query shifted by
    one turn (its neighbours on the other side are indexed near -180 or +180).
    """
    turns = [0.0]
    if lon + tol >= 180.0:
        turns.append(-360.0)
    if lon - tol <= -180.0:
        turns.append(360.0)
    out = []
    for turn in turns:
        i, j = _home_cell(lat, lon + turn, tol)
        out += [(i + a, j + b) for a in (-1, 0, 1) for b in (-1, 0, 1)]
    return out


class _Seen:
    """Ids, sites (source + coordinates) and measurement sets already in the store."""

    def __init__(self, tol: float):
        self.tol = tol
        self.ids: dict[str, str] = {}
        self.sites: dict[tuple, list] = {}
        self.measurements: dict[tuple, str] = {}

    def add_store(self, stored: pd.DataFrame, keys: np.ndarray) -> None:
        """Index every stored record at once (ids, sites, measurement keys)."""
        ids = stored["profile_id"] if "profile_id" in stored else pd.Series(
            [None] * len(stored), index=stored.index)
        raw_ids = ids.to_numpy(dtype=object)
        pids = [str(p) for p in raw_ids]
        for pid, raw in zip(pids, raw_ids):
            if isinstance(raw, str):
                self.ids.setdefault(pid, "the store")
        for key, pid in zip(keys, pids):
            if key is not None:
                self.measurements.setdefault(key, pid)
        if not all(c in stored for c in ("source", "latitude", "longitude")):
            return
        lat = pd.to_numeric(stored["latitude"], errors="coerce").to_numpy(float)
        lon = pd.to_numeric(stored["longitude"], errors="coerce").to_numpy(float)
        src = stored["source"].to_numpy(dtype=object)
        with np.errstate(invalid="ignore"):
            ok = (np.array([isinstance(v, str) for v in src], dtype=bool)
                  & (np.abs(lat) <= 90.0) & (np.abs(lon) <= 180.0))
        ci = np.floor(lat / self.tol)
        cj = np.floor(lon / self.tol)
        folded: dict[str, str] = {}
        for k in np.flatnonzero(ok).tolist():
            name = src[k]
            fold = folded.get(name) or folded.setdefault(name, name.strip().casefold())
            self.sites.setdefault((fold, int(ci[k]), int(cj[k])), []).append(
                (float(lat[k]), float(lon[k]), pids[k]))

    def add(self, row: dict, where: str, key=None) -> None:
        pid = row.get("profile_id")
        if isinstance(pid, str):
            self.ids.setdefault(pid, where)
        site = self._site(row)
        if site:
            src, lat, lon = site
            cell = (src, *_home_cell(lat, lon, self.tol))
            self.sites.setdefault(cell, []).append((lat, lon, str(pid)))
        if key:
            self.measurements.setdefault(key, str(pid))

    def _site(self, row: dict):
        """(source, latitude, longitude) of a row with a source and coordinates on the
        globe; None otherwise (coordinates out of range are the range check's errors)."""
        src, lat, lon = row.get("source"), row.get("latitude"), row.get("longitude")
        if not isinstance(src, str) or not all(isinstance(v, float) for v in (lat, lon)):
            return None
        if not (-90.0 <= lat <= 90.0 and -180.0 <= lon <= 180.0):  # NaN fails too
            return None
        return src.strip().casefold(), lat, lon

    def same_site(self, row: dict) -> str | None:
        site = self._site(row)
        if not site:
            return None
        src, lat, lon = site
        for cell in _site_cells(lat, lon, self.tol):
            for lat2, lon2, pid in self.sites.get((src, *cell), ()):
                if abs(lat - lat2) <= self.tol and longitude_gap(lon, lon2) <= self.tol:
                    return pid
        return None


def find_duplicates(batch: pd.DataFrame, stored: pd.DataFrame, bad: np.ndarray,
                    tolerance_deg: float = DUPLICATE_TOLERANCE_DEG) -> list[dict]:
    """Rows of ``batch`` that duplicate a stored record or an earlier accepted batch row.

    Three rules: ``duplicate-id`` (same profile_id as a stored record; repeats inside the
    batch are the check's ``unique-id``), ``duplicate-site`` (same source, latitude and
    longitude each within ``tolerance_deg``; longitudes compared across the antimeridian,
    see :func:`longitude_gap`), ``duplicate-measurements`` (the same present
    climate and feature values, at least two of them, as another record).

    Returns
    -------
    list of dict
        ``pos`` (0-based batch row), ``rule``, ``column``, ``value``, ``message``.
    """
    seen = _Seen(tolerance_deg)
    seen.add_store(stored, measurement_keys(stored))
    batch_keys = measurement_keys(batch)
    out = []
    for pos, row in enumerate(batch.to_dict("records")):
        found = []
        pid = row.get("profile_id")
        if isinstance(pid, str) and pid in seen.ids and seen.ids[pid] == "the store":
            found.append(("duplicate-id", "profile_id", pid,
                          f"profile_id '{pid}' is already in the store; give this profile "
                          "a new id, or leave the row out if it is the same soil"))
        other = seen.same_site(row)
        if other is not None:
            found.append(("duplicate-site", "latitude|longitude",
                          f"{row['latitude']}, {row['longitude']}",
                          f"same source and place as profile '{other}' (within "
                          f"{tolerance_deg:g} degree); if it is a different soil at the "
                          "same site, give coordinates that tell them apart"))
        key = batch_keys[pos]
        if key and key in seen.measurements:
            items = _key_items(key)
            shown = ", ".join(f"{c}={v:g}" for c, v in items[:4])
            found.append(("duplicate-measurements", "|".join(c for c, _ in items), "",
                          f"the same {len(items)} measurements as profile "
                          f"'{seen.measurements[key]}' ({shown}{', ...' if len(items) > 4 else ''}"
                          "); probably a copy of that record"))
        out += [{"pos": pos, "rule": r, "column": c, "value": v, "message": m}
                for r, c, v, m in found]
        if not found and not bad[pos]:
            seen.add(row, "this table", key)
    return out
