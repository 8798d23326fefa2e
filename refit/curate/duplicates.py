"""Duplicate detection for a batch admitted into a calibration store.

Internal to :mod:`refit.curate.store` (which re-exports :func:`find_duplicates` and
:data:`DUPLICATE_TOLERANCE_DEG`). Stored records and earlier accepted rows of the batch are
indexed by id, by site (source plus a grid of ``tolerance_deg`` cells) and by their set of
measurements, so a batch row is compared only with the records it could duplicate.

Longitudes wrap around at the antimeridian: 179.9999 and -179.9999 are 0.0002 degree apart,
not 359.9998. The gap between two longitudes is the angular difference
``min(|d|, 360 - |d|)`` with ``d`` taken modulo 360, and a site near +-180 is also looked
up one turn (360 degrees) round, where its neighbours on the other side are indexed.

Only the stored records a batch row could meet are indexed: those of a source, latitude
cell and longitude cell that some batch row looks up, and those whose measurements hash
like some batch row's. Measurements are compared as integers (:func:`measurement_codes`,
equal exactly when the ``%.9g`` texts of :func:`measurement_keys` are), so the 10^5 or
more stored rows are never formatted as text.
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


_MISSING = np.iinfo(np.int64).min


def _sig9(v: np.ndarray) -> np.ndarray:
    """One integer per finite value, equal for two values exactly when their ``%.9g``
    texts are equal.

    ``%.9g`` writes the decimal ``m * 10**(e - 8)`` nearest to ``v`` with nine significant
    digits (``10**8 <= |m| < 10**9``; Python rounds the exact binary value). Here
    ``y = |v| * 10**(8 - e)`` is one correctly rounded float operation (``10**k`` is exact
    for ``|k| <= 22``), so it is within 2**-23 of the exact product while ``y < 2**30``,
    and ``rint(y)`` is the rounded ``m`` unless ``y`` is within 1e-6 of a half-integer or
    above ``10**9 - 2``. (A computed ``y`` of at least ``10**8`` whose exact product is
    just below ``10**8`` rounds, at the next lower exponent, up to ``10**9``: the same
    text.) Those values, and magnitudes outside ``1e-14 .. 1e30``, take ``%.9g`` itself.
    The code is ``m * 2048 + e + 1024``.
    """
    v = np.asarray(v, dtype=np.float64) + 0.0
    m = np.zeros(len(v), dtype=np.int64)
    e = np.zeros(len(v), dtype=np.int64)
    nz = v != 0
    a = np.abs(v[nz])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        e_nz = np.floor(np.log10(a)).astype(np.int64)
        y = _scaled(a, 8 - e_nz)
        for _ in range(2):  # log10 may be one off next to a power of ten
            off = np.flatnonzero((y < 1e8) | (y >= 1e9))
            if not len(off):
                break
            e_nz[off] += (y[off] >= 1e9).astype(np.int64) - (y[off] < 1e8)
            y[off] = _scaled(a[off], 8 - e_nz[off])
        fast = ((np.abs(8 - e_nz) <= 22) & (y >= 1e8) & (y <= 1e9 - 2)
                & (np.abs(y - np.floor(y) - 0.5) > 1e-6))
    m_nz = np.rint(np.where(fast, y, 0.0)).astype(np.int64)
    for i in np.flatnonzero(~fast).tolist():
        m_nz[i], e_nz[i] = _sig9_text(float(a[i]))
    m[nz], e[nz] = m_nz, e_nz
    m = np.where(v < 0, -m, m)
    return m * 2048 + (e + 1024)


_POW10 = np.array([float(10 ** k) for k in range(23)])  # exact


def _scaled(a: np.ndarray, k: np.ndarray) -> np.ndarray:
    """``a * 10**k`` in one rounded operation for ``|k| <= 22`` (clipped beyond)."""
    p = _POW10[np.minimum(np.abs(k), 22)]
    return np.where(k >= 0, a * p, a / p)


def _sig9_text(x: float) -> tuple[int, int]:
    """``(m, e)`` of :func:`_sig9` for ``x > 0`` from the ``%.9g`` text itself."""
    from decimal import Decimal

    _, digits, exp = Decimal(f"{x:.9g}").as_tuple()
    pad = 9 - len(digits)
    return int("".join(map(str, digits))) * 10 ** pad, exp - pad + 8


def measurement_codes(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """``(codes, present)``: one row of ``len(MEASUREMENTS)`` integers per record (the
    :func:`_sig9` code of each present value, a sentinel where absent) and the number of
    present values. Two records with at least two present values have equal rows exactly
    when :func:`measurement_keys` gives them the same key (tested)."""
    n = len(frame)
    codes = np.full((n, len(MEASUREMENTS)), _MISSING, dtype=np.int64)
    count = np.zeros(n, dtype=int)
    for j, c in enumerate(MEASUREMENTS):
        if c not in frame:
            continue
        v = pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype="float64") + 0.0
        ok = np.isfinite(v)
        if ok.any():
            codes[ok, j] = _sig9(v[ok])
            count += ok
    return codes, count


def _measurement_text(frame: pd.DataFrame, pos: int) -> str:
    """The :func:`measurement_keys` key of one row (for messages)."""
    return measurement_keys(frame.iloc[pos:pos + 1])[0] or ""


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
    """Ids, sites (source + coordinates) and measurement sets already in the store, and
    the sites and measurements of the batch rows accepted so far."""

    def __init__(self, tol: float):
        self.tol = tol
        self.store_ids: set[str] = set()
        self.sites: dict[tuple, list] = {}
        self.measurements: dict[bytes, str] = {}

    def add_store(self, stored: pd.DataFrame, batch: pd.DataFrame, stored_keys: list,
                  batch_keys: list) -> None:
        """Index the stored records a row of ``batch`` could meet, in store order: every
        id, the sites in the sources and grid cells the batch looks up, and the
        measurement keys the batch holds (``*_keys``: bytes or None per row)."""
        raw_ids = (stored["profile_id"].to_numpy(dtype=object) if "profile_id" in stored
                   else np.full(len(stored), None, dtype=object))
        self.store_ids = {p for p in raw_ids.tolist() if isinstance(p, str)}
        wanted = {k for k in batch_keys if k is not None}
        for k in np.flatnonzero([k is not None for k in stored_keys]).tolist():
            if stored_keys[k] in wanted:
                self.measurements.setdefault(stored_keys[k], str(raw_ids[k]))
        if not all(c in stored for c in ("source", "latitude", "longitude")):
            return
        lat = pd.to_numeric(stored["latitude"], errors="coerce").to_numpy(float)
        lon = pd.to_numeric(stored["longitude"], errors="coerce").to_numpy(float)
        src = stored["source"].to_numpy(dtype=object)
        codes, names = pd.factorize(src)  # -1 for a missing source
        folds = [n.strip().casefold() if isinstance(n, str) else None for n in names]
        looked_up = self._folds(batch)
        in_batch = np.array([f in looked_up for f in folds] + [False], dtype=bool)
        with np.errstate(invalid="ignore", over="ignore"):
            ci, cj = np.floor(lat / self.tol), np.floor(lon / self.tol)
            ok = (in_batch[codes] & (np.abs(lat) <= 90.0) & (np.abs(lon) <= 180.0)
                  & np.isin(ci, self._cells(batch, 0)) & np.isin(cj, self._cells(batch, 1)))
        for k in np.flatnonzero(ok).tolist():
            self.sites.setdefault((folds[codes[k]], int(ci[k]), int(cj[k])), []).append(
                (float(lat[k]), float(lon[k]), str(raw_ids[k])))

    def _folds(self, batch: pd.DataFrame) -> set:
        if "source" not in batch:
            return set()
        return {s.strip().casefold() for s in batch["source"].to_numpy(dtype=object).tolist()
                if isinstance(s, str)}

    def _cells(self, batch: pd.DataFrame, axis: int) -> np.ndarray:
        """Every latitude (axis 0) or longitude (axis 1) cell number a batch row looks up
        (:func:`_site_cells`, every turn; a superset is enough: it only decides which
        stored sites are indexed)."""
        if not all(c in batch for c in ("latitude", "longitude")):
            return np.zeros(0)
        lat = pd.to_numeric(batch["latitude"], errors="coerce").to_numpy(float)
        lon = pd.to_numeric(batch["longitude"], errors="coerce").to_numpy(float)
        with np.errstate(invalid="ignore"):  # only sites on the globe look anything up
            ok = (np.abs(lat) <= 90.0) & (np.abs(lon) <= 180.0)
        base = ([np.floor(lat[ok] / self.tol)] if axis == 0 else
                [np.floor((lon[ok] + turn) / self.tol) for turn in (0.0, -360.0, 360.0)])
        return np.unique(np.concatenate([b + step for b in base for step in (-1.0, 0.0, 1.0)]))

    def add(self, row: dict, key=None, site=None) -> None:
        """Index an accepted batch row (its site, from :meth:`_site`, and measurements)."""
        pid = row.get("profile_id")
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

    def same_site(self, site) -> str | None:
        """The first indexed profile within the tolerance of ``site`` (from :meth:`_site`)."""
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
    batch_codes, count = measurement_codes(batch)
    batch_keys = [codes.tobytes() if k >= 2 else None
                  for codes, k in zip(batch_codes, count.tolist())]
    seen.add_store(stored, batch, _keys(stored, batch_codes[count >= 2]), batch_keys)
    out = []
    used = [c for c in ("profile_id", "source", "latitude", "longitude") if c in batch]
    for pos, row in enumerate(batch[used].to_dict("records")):
        found = []
        pid = row.get("profile_id")
        if isinstance(pid, str) and pid in seen.store_ids:
            found.append(("duplicate-id", "profile_id", pid,
                          f"profile_id '{pid}' is already in the store; give this profile "
                          "a new id, or leave the row out if it is the same soil"))
        site = seen._site(row)
        other = seen.same_site(site)
        if other is not None:
            found.append(("duplicate-site", "latitude|longitude",
                          f"{row['latitude']}, {row['longitude']}",
                          f"same source and place as profile '{other}' (within "
                          f"{tolerance_deg:g} degree); if it is a different soil at the "
                          "same site, give coordinates that tell them apart"))
        key = batch_keys[pos]
        if key is not None and key in seen.measurements:
            items = _key_items(_measurement_text(batch, pos))
            shown = ", ".join(f"{c}={v:g}" for c, v in items[:4])
            found.append(("duplicate-measurements", "|".join(c for c, _ in items), "",
                          f"the same {len(items)} measurements as profile "
                          f"'{seen.measurements[key]}' ({shown}{', ...' if len(items) > 4 else ''}"
                          "); probably a copy of that record"))
        out += [{"pos": pos, "rule": r, "column": c, "value": v, "message": m}
                for r, c, v, m in found]
        if not found and not bad[pos]:
            seen.add(row, key, site)
    return out


def _keys(frame: pd.DataFrame, among: np.ndarray) -> list:
    """Each row's measurement codes (:func:`measurement_codes`) as bytes where it has at
    least two present values and its codes' hash is among the hashes of the rows of
    ``among`` (the codes of the rows that will look keys up); None otherwise."""
    codes, count = measurement_codes(frame)
    has = (count >= 2) & np.isin(_row_hashes(codes), _row_hashes(among))
    out = [None] * len(frame)
    for k in np.flatnonzero(has).tolist():
        out[k] = codes[k].tobytes()
    return out


def _row_hashes(codes: np.ndarray) -> np.ndarray:
    """A 64-bit hash of each row of codes (equal rows, equal hashes)."""
    mult = (np.arange(1, codes.shape[1] + 1, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15)
            | np.uint64(1))
    return (np.ascontiguousarray(codes).view(np.uint64) * mult).sum(axis=1, dtype=np.uint64)
