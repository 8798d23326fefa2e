"""Seeded generator of large, valid calibration tables for the benchmarks.

The table has the columns of ``schemas/calibration.table.json`` (without the optional
sequence columns) and values that pass refit's checks: coordinates in range, ``mar_mm`` not
above ``map_mm``, a Bk depth always with a positive Bk thickness, gypsum deeper than carbonate,
Bk horizons only in soils drier than ~700 mm MAP, oxide totals below 100 wt%, vocabulary
terms from ``schemas/vocabularies.json`` when it exists. About 3 % of the optional cells are
empty, as in real compilations. Nothing here is real data: sources, regions and notes are
invented, and every number comes from ``numpy.random.default_rng(seed)``.

Run as a script to write one table::

    python benchmarks/datagen.py 100000 benchmarks/_data/calibration_100000.csv
"""

from __future__ import annotations

import hashlib
import json
import os
import sys
from pathlib import Path

import numpy as np

GENERATOR_VERSION = 1  # bump when the generated content changes (invalidates the cache)
EMPTY_FRACTION = 0.03

OXIDES = [  # column, typical share of a carbonate-free B horizon [wt%] (common practice)
    ("sio2_wt", 62.0), ("tio2_wt", 0.8), ("al2o3_wt", 14.0), ("fe2o3_wt", 5.5),
    ("mno_wt", 0.1), ("mgo_wt", 2.0), ("cao_wt", 4.0), ("na2o_wt", 1.5),
    ("k2o_wt", 2.5), ("p2o5_wt", 0.2),
]

FALLBACK_VOCABULARIES = {
    "vegetation": ["grassland", "shrubland", "woodland", "forest", "desert scrub", "savanna"],
    "parent_material": ["alluvium", "loess", "colluvium", "granite", "basalt", "sandstone"],
    "soil_order": [
        "Alfisols", "Andisols", "Aridisols", "Entisols", "Gelisols", "Histosols",
        "Inceptisols", "Mollisols", "Oxisols", "Spodosols", "Ultisols", "Vertisols",
    ],
}
LANDFORMS = ["terrace", "alluvial fan", "upland plain", "footslope", "floodplain", "ridge"]
SOURCES = [f"survey_{name}_{year}" for name, year in
           [("brenmoor", 2011), ("tallis", 2015), ("ostvaal", 2018), ("quenby", 2021),
            ("marrow_flats", 2023), ("keld", 2024)]]
NOTES = ["resampled", "pit re-described", "auger only", "near road cut", "grazed"]

COLUMNS = [
    "profile_id", "latitude", "longitude", "source", "map_mm", "mat_c", "mar_mm",
    "bk_depth_cm", "bk_thickness_cm", "by_depth_cm", *[name for name, _ in OXIDES],
    "vegetation", "parent_material", "landform", "slope_deg", "age_ka", "soil_order",
    "elevation_m", "added_on", "notes",
]
REQUIRED = ["profile_id", "latitude", "longitude", "source"]


def vocabularies(schemas_dir: Path) -> dict[str, list[str]]:
    """Vocabulary terms to draw from: ``schemas/vocabularies.json`` when present, else fallbacks.

    Accepts a mapping of column -> list of terms, or column -> {"terms"|"values": [...]}, or
    column -> {term: description}.
    """
    found = dict(FALLBACK_VOCABULARIES)
    path = schemas_dir / "vocabularies.json"
    if not path.is_file():
        return found
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return found
    if isinstance(raw, dict) and isinstance(raw.get("vocabularies"), dict):
        raw = raw["vocabularies"]
    for column in FALLBACK_VOCABULARIES:
        terms = _terms(raw.get(column)) if isinstance(raw, dict) else []
        if terms:
            found[column] = terms
    return found


def _terms(entry) -> list[str]:
    if isinstance(entry, list):
        return [t if isinstance(t, str) else str(t.get("term", t.get("name", ""))) for t in entry
                if isinstance(t, (str, dict))]
    if isinstance(entry, dict):
        for key in ("terms", "values", "allowed"):
            if isinstance(entry.get(key), (list, dict)):
                return _terms(entry[key]) if isinstance(entry[key], list) else list(entry[key])
        return [k for k in entry if not k.startswith(("$", "description"))]
    return []


def generate_frame(n: int, *, seed: int = 20261201, vocab: dict[str, list[str]] | None = None):
    """A valid calibration table of ``n`` rows as a pandas DataFrame (empty cells are NaN/None)."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    vocab = vocab or FALLBACK_VOCABULARIES
    cols: dict[str, object] = {}
    cols["profile_id"] = np.char.add("MS", np.char.zfill(np.arange(1, n + 1).astype(str), 7))
    cols["latitude"] = np.round(rng.uniform(-55.0, 65.0, n), 5)
    cols["longitude"] = np.round(rng.uniform(-179.0, 179.0, n), 5)
    cols["source"] = np.asarray(SOURCES)[rng.integers(0, len(SOURCES), n)]

    map_mm = rng.uniform(150.0, 1400.0, n)
    cols["map_mm"] = np.round(map_mm, 1)
    cols["mat_c"] = np.round(rng.uniform(-2.0, 26.0, n), 2)
    cols["mar_mm"] = np.round(map_mm * rng.uniform(0.05, 0.45, n) / 6.0, 1)

    has_bk = map_mm < 700.0
    bk_depth = np.clip(0.0925 * map_mm + 13.4 + rng.normal(0.0, 20.0, n), 5.0, 300.0)
    bk_thick = np.clip(0.79 * cols["mar_mm"] + 13.7 + rng.normal(0.0, 12.0, n), 5.0, 400.0)
    has_by = map_mm < 350.0
    by_depth = bk_depth + rng.uniform(20.0, 120.0, n)
    blank_bk = rng.random(n) < EMPTY_FRACTION  # depth and thickness go missing together
    cols["bk_depth_cm"] = np.where(has_bk & ~blank_bk, np.round(bk_depth, 1), np.nan)
    cols["bk_thickness_cm"] = np.where(has_bk & ~blank_bk, np.round(bk_thick, 1), np.nan)
    cols["by_depth_cm"] = np.where(has_by & has_bk & ~blank_bk, np.round(by_depth, 1), np.nan)

    alpha = np.array([share for _, share in OXIDES]) * 3.0
    total = rng.uniform(88.0, 99.0, n)
    shares = rng.dirichlet(alpha, size=n) * total[:, None]
    for j, (name, _) in enumerate(OXIDES):
        cols[name] = np.round(shares[:, j], 2)

    for column in ("vegetation", "parent_material", "soil_order"):
        terms = np.asarray(vocab[column], dtype=object)
        cols[column] = terms[rng.integers(0, len(terms), n)]
    cols["landform"] = np.asarray(LANDFORMS, dtype=object)[rng.integers(0, len(LANDFORMS), n)]
    cols["slope_deg"] = np.round(rng.gamma(1.5, 2.0, n).clip(0.0, 60.0), 1)
    cols["age_ka"] = np.round(rng.lognormal(1.5, 1.2, n), 2)
    cols["elevation_m"] = np.round(rng.uniform(-50.0, 3500.0, n), 0)
    days = rng.integers(0, 4300, n)
    cols["added_on"] = (np.datetime64("2015-01-01") + days.astype("timedelta64[D]")).astype(str)
    notes = np.asarray(NOTES, dtype=object)[rng.integers(0, len(NOTES), n)]
    cols["notes"] = np.where(rng.random(n) < 0.1, notes, None)

    frame = pd.DataFrame(cols, columns=COLUMNS)
    for column in COLUMNS:
        if column in REQUIRED or column in ("bk_depth_cm", "bk_thickness_cm", "notes"):
            continue
        blank = rng.random(n) < EMPTY_FRACTION
        if frame[column].dtype.kind == "f":
            frame.loc[blank, column] = np.nan
        else:
            frame[column] = frame[column].astype(object).where(~blank, None)
    if n:  # at least one climate column per row: restore MAP where all three went missing
        none = frame[["map_mm", "mat_c", "mar_mm"]].isna().all(axis=1)
        frame.loc[none, "map_mm"] = np.round(map_mm[none.to_numpy()], 1)
    return frame


def table_path(data_dir: Path, n: int, seed: int, vocab: dict[str, list[str]]) -> Path:
    """Cache file name: size, seed, generator version and a digest of the vocabulary terms."""
    digest = hashlib.sha256(json.dumps(vocab, sort_keys=True).encode()).hexdigest()[:8]
    return data_dir / f"calibration_n{n}_seed{seed}_v{GENERATOR_VERSION}_{digest}.csv"


def ensure_table(data_dir: Path, n: int, *, seed: int, schemas_dir: Path) -> Path:
    """Write the table for ``n`` rows unless an identical one is cached; return its path."""
    vocab = vocabularies(schemas_dir)
    path = table_path(data_dir, n, seed, vocab)
    if path.is_file():
        return path
    data_dir.mkdir(parents=True, exist_ok=True)
    frame = generate_frame(n, seed=seed, vocab=vocab)
    tmp = path.with_suffix(".csv.part")
    frame.to_csv(tmp, index=False)
    os.replace(tmp, path)
    return path



# --------------------------------------------------------------------------- fitting cases
def fit_data(n: int, seed: int = 20261201) -> tuple[np.ndarray, np.ndarray]:
    """Depth to the Bk horizon x [cm] and MAP y [mm] for the fitting benchmarks.

    An invented quadratic relation with scatter, y = 150 + 5.2 x - 0.008 x^2 + e,
    e ~ N(0, 90 mm), x ~ U(10, 250 cm): shaped like a Bk depth-MAP calibration, nothing more.
    """
    rng = np.random.default_rng([seed, n])
    x = np.round(rng.uniform(10.0, 250.0, n), 1)
    y = 150.0 + 5.2 * x - 0.008 * x * x + rng.normal(0.0, 90.0, n)
    return x, np.round(y, 1)


def feature_values(n: int, seed: int = 20261201, decimals: int | None = 1) -> np.ndarray:
    """Fossil-like Bk depths [cm] at which a coefficient file is evaluated (some outside the
    calibration range, so the range flags are exercised), recorded to ``decimals`` decimal
    places of a cm (None: unrounded, every value distinct)."""
    rng = np.random.default_rng([seed, n, 1])
    v = rng.uniform(2.0, 320.0, n)
    return v if decimals is None else np.round(v, decimals)

if __name__ == "__main__":
    rows, out = int(float(sys.argv[1])), Path(sys.argv[2])
    schemas = Path(__file__).resolve().parents[1] / "schemas"
    frame = generate_frame(rows, vocab=vocabularies(schemas))
    frame.to_csv(out, index=False)
    print(f"wrote {rows} rows to {out}")
