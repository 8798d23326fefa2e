"""Generate an invented clustered compilation: ten surveys of the Harnwick Steppe.

NOTHING HERE IS REAL DATA. The Harnwick Steppe (a sister basin of the invented Veskaran
Basin, see README.md), its ten surveys and their citation keys are invented, and the
coordinates (60-64 deg E, 42-44 deg S) fall in open ocean on purpose.

The table is built to show what pooling sources does to a prediction interval. Each
survey described 25 soils, but only over part of the range of depth to the Bk horizon
(a window 60 cm wide), and each took mean annual precipitation (MAP) from its own climate
product, so every survey's MAP is shifted by its own offset. The offsets' standard
deviation equals the scatter of single soils about the survey's line::

    map_mm = 140 + 2.5 bk_depth_cm + u_source + e_soil,
    u_source: 10 offsets scaled to a sample SD of exactly BETWEEN_SD_MM (50 mm),
    e_soil ~ N(0, WITHIN_SD_MM = 50 mm)

so the between-source SD / within-source SD ratio is 1 (an intraclass correlation of
0.5). A soil from a survey the calibration never saw carries an offset of its own; an
interval built as if the 250 soils were independent draws leaves it out.

Run from the repository root::

    python calib_demo/make_clustered.py

Every random draw comes from ``numpy.random.default_rng(SEED)``, so a rerun rewrites the
same bytes: ``clustered/soils.csv`` and ``clustered/recipe.toml``.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from refit._util.resources import schemas_dir

SEED = 20261215
HERE = Path(__file__).resolve().parent
OUT = HERE / "clustered"

#: the invented surveys: citation key -> (profile id prefix, what it stands for)
SOURCES = {
    "HSS-2004": ("HSA", "Harnwick Steppe soil survey, first edition"),
    "GRVP-2007": ("GRV", "Greyvale rangeland pedons"),
    "MKLT-2009": ("MKL", "Marrick loess transect"),
    "HSS-2012": ("HSB", "Harnwick Steppe soil survey, second edition"),
    "OTFP-2014": ("OTF", "Otterfell farm pedons"),
    "SCRS-2015": ("SCR", "Scarrow catchment reconnaissance survey"),
    "BWDM-2017": ("BWD", "Bramwold digital soil-mapping pedons"),
    "HUEX-2019": ("HUE", "Harnwick university field-class pedons"),
    "TLNR-2021": ("TLN", "Tolnar ridge road-cut profiles"),
    "QSPC-2023": ("QSP", "Quarnel steppe carbon project"),
}
SOILS_PER_SOURCE = 25
#: the line MAP [mm] = INTERCEPT_MM + SLOPE_MM_PER_CM * depth to the Bk [cm] (invented)
INTERCEPT_MM, SLOPE_MM_PER_CM = 140.0, 2.5
#: between-source SD of the MAP offsets and within-source SD of single soils [mm]
BETWEEN_SD_MM, WITHIN_SD_MM = 50.0, 50.0
#: each survey's depth window [cm]: centres spread evenly over this range, in a seeded
#: random order among the surveys, each window WINDOW_CM wide
WINDOW_CENTRES_CM, WINDOW_CM = (45.0, 165.0), 60.0
LON_BOX, LAT_BOX = (60.0, 64.0), (-44.0, -42.0)

CANONICAL = [f["name"] for f in json.loads(
    (schemas_dir() / "calibration.table.json").read_text(encoding="utf-8"))["fields"]]

RECIPE = """\
# Recipe for the invented Harnwick Steppe compilation (calib_demo/clustered/soils.csv):
# MAP from depth to the Bk horizon on 250 soils from ten surveys, each survey covering only
# part of the depth range with its own MAP offset. Grouped 5-fold cross-validation by
# source asks how each candidate predicts a soil from a survey it has never seen; the
# mixed estimator and the group-level intervals carry the between-source variance, the
# pooled ones do not. Written by calib_demo/make_clustered.py; invented data, not real.

[data]
table = "soils.csv"

[function]
id = "map_from_bk_depth"
response = "map_mm"
predictors = ["bk_depth_cm"]

[candidates]
forms = ["linear"]
estimators = ["ols", "mixed"]
directions = ["inverse", "forward"]

[validation]
scheme = "group-kfold"
folds = 5
repeats = 4
groups = "source"
seed = {seed}

[intervals]
level = 0.95
methods = ["analytic", "jackknife+", "group-jackknife+", "group-cv+"]
"""


def source_offsets(rng: np.random.Generator, k: int, sd: float) -> np.ndarray:
    """k offsets [mm] with mean exactly 0 and sample SD (ddof = 1) exactly ``sd``."""
    z = rng.normal(0.0, 1.0, k)
    z = (z - z.mean()) / z.std(ddof=1)
    return sd * z


def depth_windows(rng: np.random.Generator, k: int) -> np.ndarray:
    """(k, 2) depth windows [cm]: evenly spread centres, dealt to the surveys at random."""
    centres = rng.permutation(np.linspace(*WINDOW_CENTRES_CM, k))
    return np.column_stack([centres - WINDOW_CM / 2, centres + WINDOW_CM / 2])


def _survey(key: str, prefix: str, window, offset: float,
            rng: np.random.Generator) -> pd.DataFrame:
    """The 25 soils of one survey: a patch of the steppe, a slice of the depth range."""
    n = SOILS_PER_SOURCE
    depth = np.round(rng.uniform(*window, n))
    map_mm = INTERCEPT_MM + SLOPE_MM_PER_CM * depth + offset + rng.normal(0, WITHIN_SD_MM, n)
    lon0, lat0 = rng.uniform(LON_BOX[0] + 0.3, LON_BOX[1] - 0.3), \
        rng.uniform(LAT_BOX[0] + 0.2, LAT_BOX[1] - 0.2)
    return pd.DataFrame({
        "profile_id": [f"{prefix}-{i:02d}" for i in range(1, n + 1)],
        "latitude": np.round(lat0 + rng.normal(0, 0.08, n), 4),
        "longitude": np.round(lon0 + rng.normal(0, 0.12, n), 4),
        "source": key,
        "map_mm": np.round(map_mm, 1),
        "mat_c": np.round(rng.normal(11.5, 1.2, n), 1),
        "bk_depth_cm": depth,
        "bk_thickness_cm": np.round(np.clip(25 + 0.3 * depth + rng.normal(0, 8, n), 8, None)),
        "vegetation": np.where(map_mm < 300, "shrubland", "grassland"),
        "parent_material": "loess",
        "landform": "upland plain",
        "slope_deg": np.round(rng.uniform(0.5, 3.0, n), 1),
        "age_ka": np.round(rng.uniform(8, 40, n), 1),
        "soil_order": np.where(map_mm < 350, "Aridisols", "Mollisols"),
        "elevation_m": np.round(rng.uniform(350, 900, n)),
        "notes": "",
    })


def make_soils(seed: int = SEED) -> pd.DataFrame:
    """The 250 invented soils (10 surveys x 25) in refit's canonical column order."""
    rng = np.random.default_rng(seed)
    offsets = source_offsets(rng, len(SOURCES), BETWEEN_SD_MM)
    windows = depth_windows(rng, len(SOURCES))
    parts = [_survey(key, prefix, windows[j], offsets[j], rng)
             for j, (key, (prefix, _)) in enumerate(SOURCES.items())]
    soils = pd.concat(parts, ignore_index=True)
    return soils[[c for c in CANONICAL if c in soils.columns]]


def truth(seed: int = SEED) -> pd.DataFrame:
    """What the generator drew for each survey: depth window [cm] and MAP offset [mm]."""
    rng = np.random.default_rng(seed)
    offsets = source_offsets(rng, len(SOURCES), BETWEEN_SD_MM)
    windows = depth_windows(rng, len(SOURCES))
    return pd.DataFrame({"source": list(SOURCES), "depth_from_cm": windows[:, 0],
                         "depth_to_cm": windows[:, 1], "map_offset_mm": offsets})


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """Plain UTF-8 CSV, comma-delimited, ``\\n`` line ends (diffable, reproducible)."""
    path.write_bytes(frame.to_csv(index=False, lineterminator="\n").encode("utf-8"))


def recipe_text(seed: int = SEED) -> str:
    """The recipe written beside the table."""
    return RECIPE.replace("{seed}", str(seed))


def main() -> int:
    OUT.mkdir(exist_ok=True)
    soils = make_soils()
    write_csv(soils, OUT / "soils.csv")
    (OUT / "recipe.toml").write_bytes(recipe_text().encode("utf-8"))
    print(f"clustered/soils.csv: {len(soils)} soils from {soils['source'].nunique()} sources")
    print(truth().round(1).to_string(index=False))
    return 0


if __name__ == "__main__":
    sys.exit(main())
