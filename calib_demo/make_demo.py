"""Generate refit's invented demo scenario: the Veskaran Basin and the Tolmarch Uplands.

NOTHING HERE IS REAL DATA. The basin, its uplands, the sites, the surveys and their citation
keys are invented, and the coordinates fall in open ocean on purpose. The soils follow
textbook relations (depth to the Bk horizon deepens with rainfall and is shallower where it is
warmer; Bk thickness grows with rainfall seasonality; carbonate is mostly absent above
~900 mm; gypsum only in the driest soils, below the Bk; CIA-K rises with rainfall) with noise,
regional and survey offsets, so that a refit is realistic rather than perfect.

Run from the repository root::

    python calib_demo/make_demo.py

Every random draw comes from ``numpy.random.default_rng`` with a fixed seed, so a rerun
rewrites the same bytes. Files written beside this script: ``base_soils.csv``,
``incoming_soils.csv``, ``fossils.csv`` and the store ``store/``, built from
``base_soils.csv`` by refit's own ``refit.curate.store.admit``. ``recipe.toml`` is written by hand.
"""

from __future__ import annotations

import json
import shutil
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from refit._util.resources import schemas_dir


SEED = 20261201
HERE = Path(__file__).resolve().parent
ADMITTED_ON = "2026-12-01"  # fixed admission date, so the store's bytes are reproducible

# Invented sub-regions, west (dry) to east (wet): longitude band [deg], MAP range [mm],
# elevation range [m], parent-material mix, number of background soils, the surveys there.
REGIONS = {
    "Veskaran Flats": dict(
        code="VF", lon=(52.0, 53.0), map=(150, 430), elev=(150, 450), n=56,
        parents={"eolian sand": .3, "alluvium": .3, "loess": .4},
        sources=["VBSS-2008", "VBSS-2022", "KDRS-2011", "BDSM-2017"]),
    "Central Loess Plain": dict(
        code="LP", lon=(53.0, 54.2), map=(360, 880), elev=(380, 800), n=94,
        parents={"loess": .75, "alluvium": .15, "colluvium": .1},
        sources=["VBSS-2008", "CLPT-2013", "VBSS-2022", "KDRS-2011", "LPEX-2020",
                 "BDSM-2017", "PFP-2019"]),
    "Brasketh Piedmont": dict(
        code="BP", lon=(54.2, 55.0), map=(620, 1120), elev=(650, 1100), n=44,
        parents={"alluvium": .35, "colluvium": .2, "loess": .25, "shale": .2},
        sources=["PFP-2019", "VBSS-2022", "CLPT-2013", "TUGP-2016", "LPEX-2020",
                 "BDSM-2017"]),
    "Tolmarch Uplands": dict(
        code="TU", lon=(55.0, 56.0), map=(950, 1360), elev=(1050, 1750), n=36,
        parents={"granite": .35, "basalt": .25, "sandstone": .2, "colluvium": .2},
        sources=["TUGP-2016", "PFP-2019", "BDSM-2017"]),
}
# Regional offset of the Bk top [cm] (dust supply, texture): invented.
REGION_OFFSET_CM = {"Veskaran Flats": 6.0, "Central Loess Plain": -6.0,
                    "Brasketh Piedmont": 14.0, "Tolmarch Uplands": -12.0, "Ostrel Reach": 4.0}
LAT_BOX = (-41.5, -39.0)

# Invented sequences: each is one study holding the other state factors constant.
SEQUENCES = [
    dict(sequence_id="CLPT-LOESS-CLIMO", sequence_kind="climosequence", n=30,
         region="Central Loess Plain", source="CLPT-2013", map=(330, 860),
         vegetation="grassland", parent_material="loess", landform="upland plain",
         slope=(0.5, 2.5), age=(14, 24)),
    dict(sequence_id="VBSS-FAN-CLIMO", sequence_kind="climosequence", n=15,
         region="Veskaran Flats", source="VBSS-2022", map=(160, 420),
         vegetation="shrubland", parent_material="alluvium", landform="alluvial fan",
         slope=(1.0, 4.0), age=(18, 32)),
    dict(sequence_id="TUGP-GRANITE-CLIMO", sequence_kind="climosequence", n=12,
         region="Tolmarch Uplands", source="TUGP-2016", map=(820, 1300),
         vegetation="woodland", parent_material="granite", landform="plateau",
         slope=(1.0, 4.0), age=(22, 38)),
    dict(sequence_id="CLPT-RIDGE-TOPO", sequence_kind="toposequence", n=6,
         region="Central Loess Plain", source="CLPT-2013", map=(540, 560),
         vegetation="grassland", parent_material="loess", landform="catena",
         slope=(0.5, 18.0), age=(18, 22)),
    dict(sequence_id="PFP-TERRACE-CHRONO", sequence_kind="chronosequence", n=7,
         region="Brasketh Piedmont", source="PFP-2019", map=(680, 700),
         vegetation="grassland", parent_material="alluvium", landform="river terrace",
         slope=(0.5, 2.0), age=(0.5, 130)),
]


# The canonical columns, in order, from refit's schema (the single source of the names).
CANONICAL = [f["name"] for f in json.loads(
    (schemas_dir() / "calibration.table.json").read_text(encoding="utf-8"))["fields"]]
OXIDES = [c for c in CANONICAL if c.endswith("_wt")]
MOLAR_MASS = {"al2o3_wt": 101.96, "cao_wt": 56.08, "na2o_wt": 61.98}  # [g/mol]

# Source-level biases, invented: how each survey placed the top of the Bk [cm] (describers
# and field methods differ: acid fizz vs visible carbonate) and which climate product gave
# its MAP (a relative bias of the recorded MAP against the climate the soil formed under).
# Grouped cross-validation by source pays for these; random cross-validation hides them.
SOURCE_OFFSET_CM = {"VBSS-2008": 8.0, "VBSS-2022": -6.0, "CLPT-2013": -12.0, "PFP-2019": 12.0,
                    "TUGP-2016": -8.0, "KDRS-2011": 10.0, "BDSM-2017": -4.0,
                    "LPEX-2020": 5.0, "OSTREL-2025": 3.0}
SOURCE_MAP_BIAS = {"VBSS-2008": -0.04, "VBSS-2022": 0.05, "CLPT-2013": 0.07, "PFP-2019": -0.05,
                   "TUGP-2016": 0.03, "KDRS-2011": -0.08, "BDSM-2017": 0.04,
                   "LPEX-2020": -0.06, "OSTREL-2025": 0.0}
# Scatter of the Bk depth (log-normal and additive [cm]): a refit gives R^2 of about 0.5-0.7.
NOISE_SIGMA, NOISE_CM = 0.28, 15.0
WITH_CHEMISTRY = {"VBSS-2022", "CLPT-2013", "TUGP-2016", "BDSM-2017", "OSTREL-2025"}

LANDFORMS = {  # parent material -> [(landform, slope range [deg])]
    "loess": [("upland plain", (0.3, 3.0)), ("loess plateau", (0.5, 4.0))],
    "alluvium": [("river terrace", (0.3, 2.0)), ("alluvial fan", (1.0, 6.0)),
                 ("floodplain", (0.0, 1.0))],
    "colluvium": [("footslope", (3.0, 12.0))],
    "eolian sand": [("dune field", (1.0, 8.0)), ("sand sheet", (0.3, 3.0))],
}
BEDROCK_LANDFORMS = [("hillslope", (5.0, 22.0)), ("summit", (1.0, 5.0)), ("plateau", (0.5, 4.0))]
VEGETATION_EDGES = ([250, 430, 800, 990, 1180],
                    ["desert scrub", "shrubland", "grassland", "savanna", "woodland", "forest"])


def bk_depth_trend(map_mm: np.ndarray) -> np.ndarray:
    """Mean depth to the Bk [cm] for MAP [mm]: logistic, saturating near 250 cm.

    Shaped after the published depth-to-Bk climofunctions (about 20 cm at 200 mm,
    100 cm at 650 mm, 180 cm at 900 mm); invented, not fitted to any data.
    """
    return 250.0 / (1.0 + np.exp(-(map_mm - 720.0) / 195.0))


def _band(values: np.ndarray, vrange: tuple, out: tuple, noise: float,
          rng: np.random.Generator) -> np.ndarray:
    """Map ``values`` linearly from ``vrange`` onto ``out`` with noise, clipped to ``out``."""
    frac = (values - vrange[0]) / (vrange[1] - vrange[0])
    raw = out[0] + frac * (out[1] - out[0]) + rng.normal(0, noise, len(values))
    return np.clip(raw, *out)


def _landforms(parents, rng: np.random.Generator) -> tuple[list[str], np.ndarray]:
    names, slopes = [], []
    for parent in parents:
        choices = LANDFORMS.get(parent, BEDROCK_LANDFORMS)
        name, (lo, hi) = choices[rng.integers(len(choices))]
        names.append(name)
        slopes.append(rng.uniform(lo, hi))
    return names, np.array(slopes)


def vegetation_for(map_mm: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Vegetation from rainfall with a fuzzy boundary (controlled vocabulary terms)."""
    edges, names = VEGETATION_EDGES
    return np.array(names)[np.searchsorted(edges, map_mm + rng.normal(0, 70, len(map_mm)))]


def draw_region_sites(name: str, spec: dict, lat_box: tuple,
                      rng: np.random.Generator) -> pd.DataFrame:
    """Background sites of one sub-region: climate, position and state factors."""
    n = spec["n"]
    map_mm = rng.uniform(*spec["map"], n)
    parents = rng.choice(list(spec["parents"]), n, p=list(spec["parents"].values()))
    landform, slope = _landforms(parents, rng)
    return pd.DataFrame({
        "region": name, "source": rng.choice(spec["sources"], n),
        "longitude": _band(map_mm, spec["map"], spec["lon"], 0.08, rng),
        "latitude": rng.uniform(*lat_box, n), "map_mm": map_mm,
        "elevation_m": _band(map_mm, spec["map"], spec["elev"], 60, rng),
        "vegetation": vegetation_for(map_mm, rng), "parent_material": parents,
        "landform": landform, "slope_deg": slope,
        "age_ka": np.clip(rng.lognormal(np.log(20), 0.8, n), 0.8, 300),
        "sequence_id": "", "sequence_kind": "", "notes": "", "mat_sd": 0.7,
    })


def draw_sequence_sites(spec: dict, region: dict, lat_box: tuple,
                        rng: np.random.Generator) -> pd.DataFrame:
    """Sites of one sequence: one study, the other state factors held (nearly) constant."""
    n, kind = spec["n"], spec["sequence_kind"]
    map_mm = np.sort(rng.uniform(*spec["map"], n))
    lat0 = rng.uniform(lat_box[0] + 0.3, lat_box[1] - 0.3)
    near = 0.01 if kind != "climosequence" else 0.06
    sites = pd.DataFrame({
        "region": spec["region"], "source": spec["source"],
        "longitude": _band(map_mm, region["map"], region["lon"], near / 2, rng),
        "latitude": lat0 + rng.normal(0, near, n), "map_mm": map_mm,
        "elevation_m": _band(map_mm, region["map"], region["elev"], 10, rng),
        "vegetation": spec["vegetation"], "parent_material": spec["parent_material"],
        "landform": spec["landform"], "slope_deg": rng.uniform(*spec["slope"], n),
        "age_ka": rng.uniform(*spec["age"], n),
        "sequence_id": spec["sequence_id"], "sequence_kind": kind, "notes": "",
        "mat_sd": 0.7 if kind == "climosequence" else 0.2,  # one site: one temperature
    })
    if kind == "toposequence":
        sites["landform"] = ["summit", "shoulder", "backslope", "backslope", "footslope",
                             "toeslope"][:n]
        sites["slope_deg"] = [1.0, 4.5, 14.0, 18.0, 7.5, 2.0][:n]
    if kind == "chronosequence":
        sites["age_ka"] = np.geomspace(*spec["age"], n)
        sites["notes"] = [f"terrace T{k} (T1 youngest)" for k in range(1, n + 1)]
    return sites


def add_soil_properties(sites: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """Climate details, carbonate and gypsum horizons, soil order and oxides of each site."""
    soils = sites.copy()
    n, map_mm, age = len(soils), soils["map_mm"].to_numpy(), soils["age_ka"].to_numpy()
    lapse = 22.8 - 0.0078 * soils["elevation_m"].to_numpy()  # [degC]
    mat = np.clip(lapse + rng.normal(0, soils["mat_sd"].to_numpy()), 8, 22)
    mar = map_mm * np.clip(0.30 - 0.00015 * map_mm + rng.normal(0, 0.03, n), 0.05, 0.4)
    offset = (soils["region"].map(lambda r: REGION_OFFSET_CM.get(r, 0.0))
              + soils["source"].map(lambda s: SOURCE_OFFSET_CM.get(s, 0.0))).to_numpy()
    warmth = np.exp(-0.03 * (mat - 15.0))  # warmer -> more evaporation -> shallower Bk
    depth = (bk_depth_trend(map_mm) * warmth + offset + rng.normal(0, NOISE_CM, n))
    depth = depth * rng.lognormal(0, NOISE_SIGMA, n)
    depth = np.clip(depth * (1 - 0.6 * np.exp(-age / 4)), 5, None)  # young soils: shallower
    thick = 0.9 * (mar - 10) * (0.6 + 0.4 * (1 - np.exp(-age / 10))) + rng.normal(0, 18, n)
    has_bk = (rng.random(n) < 1 / (1 + np.exp((map_mm - 790) / 35))) & (age >= 1)
    has_by = has_bk & (map_mm < 275) & (rng.random(n) < 0.55)
    by = depth + np.clip(thick, 8, None) + rng.uniform(5, 40, n)
    soils["mat_c"] = np.round(mat, 1)
    soils["mar_mm"] = np.round(mar)
    soils["bk_depth_cm"] = np.where(has_bk, np.round(depth), np.nan)
    soils["bk_thickness_cm"] = np.where(has_bk, np.round(np.clip(thick, 8, None)), np.nan)
    soils["by_depth_cm"] = np.where(has_by, np.round(by), np.nan)
    soils["soil_order"] = soil_orders(soils, rng)
    soils = _add_oxides(soils, rng)
    bias = soils["source"].map(lambda s: SOURCE_MAP_BIAS.get(s, 0.0)).to_numpy()
    soils["map_mm"] = np.round(map_mm * (1 + bias))  # as the source's climate product gives it
    for col, digits in [("latitude", 4), ("longitude", 4), ("slope_deg", 1), ("age_ka", 1)]:
        soils[col] = np.round(soils[col].astype(float), digits)
    return as_whole_numbers(soils, ["map_mm", "mar_mm", "bk_depth_cm", "bk_thickness_cm",
                                    "by_depth_cm", "elevation_m"])


def as_whole_numbers(frame: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Round to whole numbers kept as nullable integers (written ``257``, not ``257.0``)."""
    for col in columns:
        frame[col] = np.round(frame[col].astype(float)).astype("Int64")
    return frame


def soil_orders(soils: pd.DataFrame, rng: np.random.Generator) -> np.ndarray:
    """USDA order plausible for the climate, parent material, landform and age."""
    p, age = soils["map_mm"].to_numpy(), soils["age_ka"].to_numpy()
    order = np.select([p < 330, p < 830, p < 1150], ["Aridisols", "Mollisols", "Alfisols"],
                      "Ultisols").astype(object)
    order[(order == "Ultisols") & (age < 25)] = "Alfisols"
    draw = rng.random(len(p))
    clayey = soils["parent_material"].isin(["shale", "basalt"]).to_numpy()
    order[clayey & (p > 400) & (p < 1100) & (draw < 0.5)] = "Vertisols"
    raw = soils["landform"].isin(["floodplain", "dune field"]).to_numpy() & (draw > 0.4)
    order[(age < 2) | raw] = "Entisols"
    return order


def oxides_for_cia_k(cia_k: np.ndarray, map_mm: np.ndarray,
                     rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Whole-rock oxides [wt%] with a given CIA-K and totals of 95.5-99.5 wt%.

    CIA-K = 100 Al2O3 / (Al2O3 + CaO + Na2O) in molar proportions (Harnois 1988, as CIW),
    so CaO + Na2O [mol] = Al2O3 [mol] (100 / CIA-K - 1); SiO2 takes up the rest of the total.
    """
    n = len(cia_k)
    wet = np.clip((map_mm - 150) / 1250, 0, 1)
    ox = {"al2o3_wt": 12 + 6 * wet + rng.normal(0, 1.2, n)}
    bases = ox["al2o3_wt"] / MOLAR_MASS["al2o3_wt"] * (100 / cia_k - 1)
    ca_share = rng.uniform(0.45, 0.7, n)
    ox["cao_wt"] = bases * ca_share * MOLAR_MASS["cao_wt"]
    ox["na2o_wt"] = bases * (1 - ca_share) * MOLAR_MASS["na2o_wt"]
    ox["fe2o3_wt"] = 3 + 4 * wet + rng.normal(0, 0.6, n)
    ox["mgo_wt"] = np.clip(2.6 - 1.8 * wet + rng.normal(0, 0.3, n), 0.3, None)
    ox["k2o_wt"] = np.clip(3.0 - 1.2 * wet + rng.normal(0, 0.3, n), 0.5, None)
    ox["tio2_wt"] = rng.uniform(0.5, 1.2, n)
    ox["mno_wt"] = rng.uniform(0.04, 0.15, n)
    ox["p2o5_wt"] = rng.uniform(0.05, 0.3, n)
    ox["sio2_wt"] = rng.uniform(95.5, 99.5, n) - sum(ox.values())
    return {name: np.round(ox[name], 2) for name in OXIDES}


def _add_oxides(soils: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """B-horizon chemistry (CIA-K about 50 at 200 mm to 85 at 1400 mm) where analysed."""
    p = soils["map_mm"].to_numpy()
    cia_k = np.clip(50 + 35 * (p - 200) / 1200 + rng.normal(0, 6, len(p)), 38, 96)
    ox = oxides_for_cia_k(cia_k, p, rng)
    analysed = soils["source"].isin(WITH_CHEMISTRY).to_numpy()
    for name in OXIDES:
        soils[name] = np.where(analysed, ox[name], np.nan)
    return soils


def rng_for(table: str, seed: int = SEED) -> np.random.Generator:
    """One independent, seeded stream per table, so editing one table leaves the others."""
    return np.random.default_rng([seed, sum(map(ord, table))])


def make_base_soils(seed: int = SEED) -> pd.DataFrame:
    """About 300 modern soil profiles of the basin, in canonical columns plus ``region``."""
    rng = rng_for("base_soils", seed)
    parts = [draw_region_sites(name, spec, LAT_BOX, rng) for name, spec in REGIONS.items()]
    parts += [draw_sequence_sites(spec, REGIONS[spec["region"]], LAT_BOX, rng)
              for spec in SEQUENCES]
    sites = pd.concat(parts, ignore_index=True)
    soils = add_soil_properties(sites, rng)
    soils["profile_id"] = _profile_ids(soils)
    return soils[[c for c in CANONICAL if c in soils.columns] + ["region"]]


def _profile_ids(soils: pd.DataFrame) -> list[str]:
    """Ids like ``LP-017``: region code and a running number within the region."""
    codes = soils["region"].map({name: spec["code"] for name, spec in REGIONS.items()})
    running = codes.groupby(codes).cumcount() + 1
    return [f"{c}-{k:03d}" for c, k in zip(codes, running)]


# The new campaign's spreadsheet: its own headers and units (inches, degrees Fahrenheit).
CAMPAIGN = "Ostrel field campaign 2025"
CAMPAIGN_SOURCE = "OSTREL-2025"
INCOMING_TITLE = f"{CAMPAIGN} - depths in inches, MAP in inches, MAT in degF"
INCOMING_REGION = dict(code="OR", lon=(53.4, 54.8), map=(240, 1300), elev=(300, 1000),
                       n=40, parents={"loess": .6, "alluvium": .25, "colluvium": .15},
                       sources=[CAMPAIGN_SOURCE])
SHEET_HEADERS = {  # canonical column -> the campaign's header (refit.curate.units maps them back)
    "profile_id": "Profile ID", "latitude": "Lat", "longitude": "Long", "source": "Source",
    "region": "region", "map_mm": "MAP (in)", "mat_c": "MAT (°F)", "mar_mm": "MAR (in)",
    "bk_depth_cm": "Depth to Bk (in)", "bk_thickness_cm": "Bk thickness (in)",
    "by_depth_cm": "Depth to By (in)",
    **{f"{f.lower()}_wt": f"{f} (wt%)" for f in "SiO2 TiO2 Al2O3 Fe2O3 MnO MgO CaO Na2O K2O "
       "P2O5".split()},
    "vegetation": "Vegetation", "parent_material": "Parent material", "landform": "Landform",
    "slope_deg": "Slope (deg)", "age_ka": "Age (ka)", "soil_order": "Soil order",
    "elevation_m": "Elevation (m)", "notes": "Notes",
}
SHEET_UNITS = {  # canonical column -> (factor from the canonical unit or "degF", digits kept)
    "map_mm": (1 / 25.4, 2), "mar_mm": (1 / 25.4, 2), "mat_c": ("degF", 1),
    "bk_depth_cm": (1 / 2.54, 1), "bk_thickness_cm": (1 / 2.54, 1), "by_depth_cm": (1 / 2.54, 1),
}
STORE_ID_REUSED = "LP-042"  # an id the store already holds
STORE_PLACE = "LP-025"      # a store record whose source and coordinates are reused
STORE_TWIN = "LP-017"       # a store record (with a Bk and oxides) whose measurements are copied
# Each deliberately bad row: label in its Notes cell, the rule check or admit reports, and
# what is changed in an otherwise valid row (canonical units; "place"/"twin": see _bad_rows).
BAD_ROWS = [
    ("text in a numeric column", "not-a-number", {"map_mm": "about 19"}),
    ("empty required value (source)", "required-value", {"source": ""}),
    ("infinity in a numeric column", "not-finite", {"mat_c": "inf"}),
    ("negative depth", "range", {"bk_depth_cm": -10.16, "bk_thickness_cm": 50.8}),
    ("latitude out of range", "range", {"latitude": -94.2}),
    ("profile_id already in the store", "duplicate-id", {"profile_id": STORE_ID_REUSED}),
    ("same source and coordinates as a store record", "duplicate-site", "place"),
    ("measurements identical to a store record", "duplicate-measurements", "twin"),
    ("unknown vegetation term", "vocabulary", {"vegetation": "alpine meadow"}),
    ("MAR above MAP", "mar-above-map", {"mar_mm": 760.0}),
    ("Bk depth without a Bk thickness", "bk-depth-without-thickness",
     {"bk_depth_cm": 40.64, "bk_thickness_cm": np.nan}),
    ("oxide total above 101 wt%", "oxide-total",
     dict(zip(OXIDES, [72.4, 1.1, 17.8, 6.2, 0.12, 1.9, 2.1, 1.6, 2.4, 0.2]))),
    ("duplicated id within the file (both copies)", "unique-id", {"profile_id": "OST25-DUP"}),
    # unit slips of single rows, caught against the store's reference line (admit only)
    ("MAP typed in mm in the inches column (300)", "suspect-residual",
     {"map_mm": 300 * 25.4, "bk_depth_cm": 25.4, "bk_thickness_cm": 40.64}),
    ("Bk depth typed in cm in the inches column (150)", "suspect-residual",
     {"map_mm": 740.0, "bk_depth_cm": 150 * 2.54, "bk_thickness_cm": 40.64}),
    ("Bk depth typed in mm in the inches column (350)", "suspect-residual",
     {"map_mm": 420.0, "bk_depth_cm": 350 * 2.54, "bk_thickness_cm": 40.64}),
    ("Bk depth typed in metres in the inches column (0.6)", "bk-too-shallow",
     {"map_mm": 500.0, "bk_depth_cm": 0.6 * 2.54, "bk_thickness_cm": 40.64}),
    ("MAP of 5 mm with a Bk at 180 cm", "map-below-bk-minimum",
     {"map_mm": 0.2 * 25.4, "mar_mm": 0.1 * 25.4, "bk_depth_cm": 180.0,
      "bk_thickness_cm": 40.64}),
]
#: A row whose MAP is far from what its CIA-K says, caught by admit's MAP on CIA-K reference
#: pair (the oxides of a deeply weathered soil, CIA-K about 90, under a dry MAP whose Bk depth
#: agrees with it). Appended last, after the shuffle, so the other rows are unchanged.
CIA_K_SLIP_ROW = ("MAP far below what its CIA-K says (300 mm at CIA-K 90)", "suspect-residual",
                  {"profile_id": "OST25-60", "map_mm": 300.0, "bk_depth_cm": 25.4,
                   "bk_thickness_cm": 40.64,
                   **dict(zip(OXIDES, [70.0, 0.9, 18.0, 6.0, 0.1, 1.0, 0.6, 0.5, 1.5, 0.15]))})
#: Rows of BAD_ROWS that only warn and are admitted (labelled "demo: warning row - ...").
ADMITTED_BAD_ROWS = ("Bk depth without a Bk thickness",)
#: An incoming column that maps to no canonical column (listed by check and admit).
UNMAPPED_HEADER = "Bk depth SD (in)"
WARNING_ROW = ("Bk horizon above 760 mm MAP (warning only, admitted)",
               "carbonate-in-wet-climate")


def _campaign_soils(first: int, n: int, map_range: tuple,
                    rng: np.random.Generator) -> pd.DataFrame:
    """Valid new soils of the campaign in canonical units; Bk only below 740 mm MAP."""
    spec = dict(INCOMING_REGION, n=n, map=map_range)
    soils = add_soil_properties(draw_region_sites("Ostrel Reach", spec, LAT_BOX, rng), rng)
    soils.loc[soils["map_mm"] > 740, ["bk_depth_cm", "bk_thickness_cm", "by_depth_cm"]] = np.nan
    soils["profile_id"] = [f"OST25-{k:02d}" for k in range(first, first + n)]
    return soils


def make_incoming(base: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """About 40 new soils as the campaign's spreadsheet holds them (headers, units, text).

    Thirteen kinds of bad input, one row each (two for the duplicated id), labelled in
    ``Notes`` as ``demo: bad row - <kind>``; one row that only warns; the rest are valid;
    last, the row whose MAP is far from what its CIA-K says (:data:`CIA_K_SLIP_ROW`).
    """
    good = _campaign_soils(1, 25, (240, 1300), rng)
    spare = _campaign_soils(26, 1 + len(BAD_ROWS), (300, 700), rng)
    spare["by_depth_cm"] = np.nan  # one problem per bad row, nothing else
    warn = spare.iloc[0].copy()
    warn[["map_mm", "bk_depth_cm", "bk_thickness_cm"]] = [838.0, 152.0, 71.0]
    warn[["vegetation", "soil_order"]] = ["savanna", "Mollisols"]
    warn["notes"] = "demo: warning row - " + WARNING_ROW[0]
    bad = _bad_rows([spare.iloc[k] for k in range(1, len(spare))], base)
    table = pd.concat([good, pd.DataFrame([warn] + bad)], ignore_index=True)
    table = table.iloc[rng.permutation(len(table))].reset_index(drop=True)
    return to_spreadsheet(pd.concat([table, pd.DataFrame([_cia_k_slip(spare.iloc[0])])],
                                    ignore_index=True))


def _cia_k_slip(row: pd.Series) -> pd.Series:
    """:data:`CIA_K_SLIP_ROW` made from a valid row, moved 0.1 degree away from it."""
    label, _, change = CIA_K_SLIP_ROW
    row = row.copy()
    row[list(change)] = list(change.values())
    row[["latitude", "longitude"]] = [row["latitude"] + 0.1, row["longitude"] + 0.1]
    row["notes"] = f"demo: bad row - {label}"
    return row


def _bad_rows(rows: list[pd.Series], base: pd.DataFrame) -> list[pd.Series]:
    """Break one thing in each valid row (and add the second copy of the duplicate id)."""
    by_id = base.set_index("profile_id", drop=False)
    measured = [c for c in base.columns if c not in
                ("profile_id", "latitude", "longitude", "source", "notes", "region")]
    from_store = {"place": by_id.loc[STORE_PLACE, ["source", "latitude", "longitude"]],
                  "twin": by_id.loc[STORE_TWIN, measured]}
    out = []
    for row, (label, _, change) in zip(rows, BAD_ROWS):
        row = row.copy()
        changes = from_store[change] if isinstance(change, str) else pd.Series(change)
        row[changes.index] = changes.to_list()
        kind = "warning row" if label in ADMITTED_BAD_ROWS else "bad row"
        row["notes"] = f"demo: {kind} - {label}"
        out += [row, row.copy()] if label.startswith("duplicated") else [row]
    return out


def to_spreadsheet(table: pd.DataFrame) -> pd.DataFrame:
    """Canonical columns -> the campaign's headers and units, as the cells would read.

    Converted values are rounded as a field sheet would hold them, except in the copy of a
    store record (``exact``), which keeps every digit so that it converts back unchanged.
    """
    exact = table["notes"].str.contains("identical", na=False).to_numpy()
    sheet = {}
    for col, header in SHEET_HEADERS.items():
        values = table[col]
        if col in SHEET_UNITS:
            factor, digits = SHEET_UNITS[col]
            values = pd.Series([_convert(v, factor, None if keep else digits)
                                for v, keep in zip(values, exact)], index=table.index,
                               dtype=object)
        sheet[header] = values
        if col == "bk_depth_cm":  # a measurement SD: a calibration table has no SD column
            sheet[UNMAPPED_HEADER] = np.where(pd.to_numeric(table[col], errors="coerce")
                                              .notna(), 1.5, np.nan)
    return pd.DataFrame(sheet)


def _convert(value, factor, digits: int | None):
    """One cell from canonical units to the sheet's unit; text and blanks pass unchanged."""
    if isinstance(value, str) or pd.isna(value):
        return value
    out = float(value) * 9 / 5 + 32 if factor == "degF" else float(value) * factor
    return out if digits is None else round(out, digits)


def write_incoming(sheet: pd.DataFrame, path: Path) -> None:
    """Write like a spreadsheet export: BOM, a title line, then ';'-delimited rows."""
    body = sheet.to_csv(index=False, sep=";", lineterminator="\n")
    path.write_bytes(("\ufeff" + INCOMING_TITLE + "\n" + body).encode("utf-8"))


FOSSIL_SECTIONS = [("Murrenhal Bluff", "MB", 7, 2.4), ("Coldstave Gorge", "CG", 5, 1.6)]


def make_fossils(seed: int = SEED) -> pd.DataFrame:
    """Twelve invented paleosols of two measured sections (compacted depths, burial depth).

    Levels [m] are measured up from the base of each section, so burial depth [km]
    decreases upwards; shallow Bk horizons (< 45 cm) mark dry Aridisols with a By below.
    """
    rng = rng_for("fossils", seed)
    parts = []
    for section, prefix, n, base_km in FOSSIL_SECTIONS:
        level = np.round(np.sort(rng.uniform(5, 180, n)), 1)
        depth = np.round(rng.uniform(25, 140, n))
        dry = depth < 45
        parts.append(pd.DataFrame({
            "paleosol_id": [f"{prefix}-P{k:02d}" for k in range(1, n + 1)],
            "section": section, "level_m": level, "bk_depth_cm": depth,
            "bk_depth_sd_cm": np.round(rng.uniform(4, 15, n)),
            "bk_thickness_cm": np.round(rng.uniform(20, 90, n)),
            "bk_thickness_sd_cm": np.round(rng.uniform(4, 12, n)),
            "by_depth_cm": np.where(dry, depth + np.round(rng.uniform(60, 110, n)), np.nan),
            "burial_depth_km": np.round(base_km - level / 1000 * rng.uniform(0.9, 1.1, n), 2),
            "soil_order": np.where(dry, "Aridisols", rng.choice(
                ["Mollisols", "Alfisols", "Vertisols"], n, p=[.6, .2, .2])),
            "vegetation": np.where(dry, "shrubland", "grassland"),
            "parent_material": rng.choice(["loess", "alluvium"], n, p=[.7, .3]),
        }))
    fossils = pd.concat(parts, ignore_index=True)
    fossils = as_whole_numbers(fossils, ["bk_depth_cm", "bk_depth_sd_cm", "bk_thickness_cm",
                                         "bk_thickness_sd_cm", "by_depth_cm"])
    fossils = _fossil_oxides(fossils, rng)
    fossils["notes"] = np.where(fossils["soil_order"] == "Vertisols",
                                "slickensides; check Vertisol caveats", "")
    fossils = pd.concat([fossils, _edge_fossils()], ignore_index=True)
    return as_whole_numbers(fossils, ["bk_depth_cm", "bk_depth_sd_cm", "bk_thickness_cm",
                                      "bk_thickness_sd_cm", "by_depth_cm"])


def _edge_fossils() -> pd.DataFrame:
    """Two paleosols placed where equations stop holding, so `apply` shows its flags."""
    return pd.DataFrame({
        "paleosol_id": ["CG-P07", "CG-P08"], "section": "Coldstave Gorge",
        "level_m": [191.5, 204.0], "bk_depth_cm": [3.0, 280.0],
        "bk_depth_sd_cm": [1.0, 15.0], "bk_thickness_cm": [12.0, 95.0],
        "bk_thickness_sd_cm": [3.0, 12.0], "burial_depth_km": [1.05, 1.02],
        "soil_order": ["Aridisols", "Mollisols"], "vegetation": ["shrubland", "grassland"],
        "parent_material": ["loess", "loess"],
        "notes": ["demo: Bk shallower than any modern soil (outside the calibration range)",
                  "demo: Bk deeper than the turning point of quadratic depth equations"],
    })


def _fossil_oxides(fossils: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """Whole-rock B-horizon oxides for every other paleosol (the rest were not analysed)."""
    analysed = np.arange(len(fossils)) % 2 == 0
    cia_k = 55 + 0.2 * fossils["bk_depth_cm"].to_numpy(float) + rng.normal(0, 3, len(fossils))
    ox = oxides_for_cia_k(cia_k, np.full(len(fossils), 650.0), rng)
    for name in OXIDES:
        fossils[name] = np.where(analysed, ox[name], np.nan)
    return fossils


def generate(seed: int = SEED) -> dict[str, pd.DataFrame]:
    """All demo tables as frames (nothing written): base_soils, incoming_soils, fossils."""
    base = make_base_soils(seed)
    return {"base_soils": base,
            "incoming_soils": make_incoming(base, rng_for("incoming_soils", seed)),
            "fossils": make_fossils(seed)}


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """Plain UTF-8 CSV, comma-delimited, ``\\n`` line ends (diffable, reproducible)."""
    path.write_bytes(frame.to_csv(index=False, lineterminator="\n").encode("utf-8"))


def build_store(here: Path = HERE) -> str:
    """Rebuild ``store/`` from ``base_soils.csv`` with refit's own admit; say what happened."""
    try:
        from refit.curate.store import admit
    except ImportError as exc:  # the store module is being written in parallel
        return f"store not built: refit.curate.store.admit is not available yet ({exc})"
    store = here / "store"
    if store.exists():
        shutil.rmtree(store)
    result = admit(here / "base_soils.csv", store, today=ADMITTED_ON)
    (store / ".lock").unlink(missing_ok=True)  # the lock file of the finished admit
    quarantine = store / "quarantine"
    quarantine.mkdir(exist_ok=True)
    if not any(quarantine.iterdir()):
        (quarantine / ".gitkeep").write_text("", encoding="utf-8")
    return (f"store built: {store.name}/ version {result.version_after}, "
            f"{result.accepted} records admitted, {result.rejected} rejected")


def main() -> int:
    tables = generate()
    write_csv(tables["base_soils"], HERE / "base_soils.csv")
    write_incoming(tables["incoming_soils"], HERE / "incoming_soils.csv")
    write_csv(tables["fossils"], HERE / "fossils.csv")
    for name, frame in tables.items():
        print(f"{name}: {len(frame)} rows")
    print(build_store())
    return 0


if __name__ == "__main__":
    sys.exit(main())
