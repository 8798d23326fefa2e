"""The fast paths of an admit against the definitions they replace.

What is checked against what:

- the integer codes of measurements (``refit.curate.duplicates._sig9``) against Python's
  own ``"%.9g"`` formatting (correctly rounded to 9 significant digits; Python Language
  Reference, "Format Specification Mini-Language"): two values share a code exactly when
  they share the text, on values chosen to sit on rounding ties, next to powers of ten and
  at the ends of the float range;
- ``find_duplicates`` against a naive scan written here from the rules' wording (every
  pair, measurement keys as text);
- the typed store read in one pass (numbers as float64) against ``typed_records`` of the
  text table (``pandas.to_numeric`` with coercion), values and dtypes exactly;
- records.csv grown by appending against the whole table rewritten (``records_bytes`` of
  the old text plus the new rows), byte for byte, and after a manifest repair (the file no
  longer refit's own bytes) the rewrite itself;
- the stored text of float cells (``_cells``) against the per-cell ``_cell``;
- the shortcuts of the id normalisation (printable ASCII is left alone) and of the
  formula-like text warning against their per-cell rules (Unicode NFC by ``unicodedata``).
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from refit.curate import duplicates as dup
from refit.curate.batch import _cell, records_bytes
from refit.curate.store import admit, open_store, typed_records
from refit.curate.store_records import _cells, _new_records
from refit.curate.store_records import typed_from_bytes as _typed_from_bytes

DAY = "2025-03-01"


# --- measurement codes: equal exactly when the %.9g texts are equal --------------------

def hard_values(seed: int = 20261202) -> np.ndarray:
    rng = np.random.default_rng(seed)
    m = rng.integers(10**8, 10**9, 5000).astype(float)
    e = rng.integers(-25, 25, 5000).astype(float)
    on_grid = m * 10.0 ** (e - 8)
    tens = 10.0 ** rng.integers(-300, 300, 2000).astype(float)
    places = 10.0 ** rng.integers(0, 4, 5000)
    parts = [
        rng.normal(size=5000) * 10.0 ** rng.integers(-40, 40, 5000),   # any magnitude
        (m + 0.5) * 10.0 ** (e - 8),                                    # rounding ties
        on_grid, np.nextafter(on_grid, np.inf), np.nextafter(on_grid, -np.inf),
        tens, np.nextafter(tens, 0), np.nextafter(tens, np.inf),        # powers of ten
        tens * (1 - 5e-10), tens * (1 + 5e-10), tens * 0.99999999949,   # 9 nines, carries
        np.round(rng.uniform(0, 3000, 5000) * places) / places,          # as measured
        np.array([5e-324, 1e-310, 2.2250738585072014e-308, 1.7976931348623157e308,
                  0.0, -0.0, 1.0, 0.5, 2.5, 123456789.5, 123456788.5, 999999999.5,
                  99999999.95, 0.1, 0.01, 1000.0, 1e15, 1e22, 1e23]),
    ]
    v = np.concatenate(parts)
    v = v[np.isfinite(v)]
    return np.concatenate([v, -v])


def test_measurement_codes_are_equal_exactly_when_the_texts_are():
    v = hard_values()
    codes = dup._sig9(v)
    texts = ["%.9g" % (x + 0.0) for x in v.tolist()]  # the definition (Python's rounding)
    by_text, by_code = {}, {}
    for t, c in zip(texts, codes.tolist()):
        by_text.setdefault(t, set()).add(c)
        by_code.setdefault(c, set()).add(t)
    assert max(len(s) for s in by_text.values()) == 1
    assert max(len(s) for s in by_code.values()) == 1
    assert len(by_text) > 30000  # many distinct texts, so the check can fail


def test_row_codes_agree_with_the_text_keys():
    rng = np.random.default_rng(5)
    n = 3000
    frame = pd.DataFrame({c: rng.choice(hard_values()[:4000], n) for c in dup.MEASUREMENTS[:5]})
    frame = frame.mask(rng.random(frame.shape) < 0.4)
    frame.iloc[n // 2:] = frame.iloc[: n - n // 2].to_numpy()  # every key twice
    keys = dup.measurement_keys(frame)
    codes, count = dup.measurement_codes(frame)
    assert ((count >= 2) == np.array([k is not None for k in keys])).all()
    as_bytes = [c.tobytes() if k >= 2 else None for c, k in zip(codes, count.tolist())]
    pairs = {(a, b) for a, b in zip(keys, as_bytes)}
    assert len({a for a, _ in pairs}) == len(pairs) == len({b for _, b in pairs})


# --- find_duplicates against a naive scan -----------------------------------------------

def naive_duplicates(batch, stored, bad, tol):
    """Every pair, in order: ids against the store, sites (same folded source, latitude
    and angular longitude difference within tol) and measurement keys (the texts) against
    the store and the batch rows kept so far; the first match in the lookup's order is
    not compared (only which rows and rules are)."""
    def site(r):
        if not isinstance(r["source"], str) or not all(isinstance(r[c], float) for c in
                                                       ("latitude", "longitude")):
            return None
        if not (-90 <= r["latitude"] <= 90 and -180 <= r["longitude"] <= 180):
            return None
        return r["source"].strip().casefold(), r["latitude"], r["longitude"]

    def near(a, b):
        d = abs(a[2] - b[2]) % 360
        return a[0] == b[0] and abs(a[1] - b[1]) <= tol and min(d, 360 - d) <= tol

    skeys, bkeys = dup.measurement_keys(stored), dup.measurement_keys(batch)
    sites = [s for s in map(site, stored.to_dict("records")) if s]
    ids = {p for p in stored["profile_id"] if isinstance(p, str)}
    keys = {k for k in skeys if k}
    out = []
    for pos, r in enumerate(batch.to_dict("records")):
        s = site(r)
        found = [rule for rule, hit in (
            ("duplicate-id", isinstance(r["profile_id"], str) and r["profile_id"] in ids),
            ("duplicate-site", s is not None and any(near(s, o) for o in sites)),
            ("duplicate-measurements", bkeys[pos] is not None and bkeys[pos] in keys)) if hit]
        out += [(pos, rule) for rule in found]
        if not found and not bad[pos]:
            sites += [s] if s else []
            keys |= {bkeys[pos]} if bkeys[pos] else set()
    return out


def soils(n, seed, prefix):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "profile_id": [f"{prefix}{i}" for i in range(n)],
        "latitude": np.round(rng.uniform(-0.01, 0.01, n), 4),
        "longitude": np.clip(rng.choice([179.9998, -179.9998, 0.0, 10.0], n)
                             + np.round(rng.uniform(-0.003, 0.003, n), 5), -180, 180),
        "source": rng.choice(["A", " a ", "B", None], n),
    })
    for c in dup.MEASUREMENTS[:6]:
        x = np.round(rng.uniform(0, 5, n), rng.integers(0, 3))
        frame[c] = np.where(rng.random(n) < 0.4, np.nan, x)
    return frame


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize("tol", [0.0005, 0.002])
def test_find_duplicates_equals_the_naive_scan(seed, tol):
    stored, batch = soils(300, seed, "S"), soils(120, seed + 100, "N")
    batch.loc[::7, "profile_id"] = stored["profile_id"].iloc[: len(batch.loc[::7])].to_numpy()
    batch.iloc[::5, 4:] = stored.iloc[: len(batch.iloc[::5]), 4:].to_numpy()
    # a value one ulp away from a stored one has the same %.9g text: still a copy
    batch.iloc[3, 4:6] = np.nextafter(stored.iloc[40, 4:6].to_numpy(float), np.inf)
    batch.iloc[3, 6:] = stored.iloc[40, 6:].to_numpy()
    bad = np.random.default_rng(seed).random(len(batch)) < 0.1
    found = [(d["pos"], d["rule"]) for d in dup.find_duplicates(batch, stored, bad, tol)]
    assert found == naive_duplicates(batch, stored, bad, tol)
    assert {r for _, r in found} == {"duplicate-id", "duplicate-site",
                                     "duplicate-measurements"}


def test_duplicate_measurements_message_names_the_first_stored_copy():
    stored = pd.DataFrame({"profile_id": ["S-1", "S-2"], "map_mm": [400.0, 400.0],
                           "mat_c": [12.5, 12.5]})
    batch = pd.DataFrame({"profile_id": ["N-1"], "map_mm": [400.0000000001],
                          "mat_c": [12.5]})
    (found,) = dup.find_duplicates(batch, stored, np.zeros(1, bool))
    assert found["rule"] == "duplicate-measurements"
    assert found["message"].startswith("the same 2 measurements as profile 'S-1' "
                                       "(map_mm=400, mat_c=12.5)")


# --- the typed store read in one pass ---------------------------------------------------

def text_table(rows: list[list[str]], header) -> bytes:
    return records_bytes(pd.DataFrame(rows, columns=header, dtype=object))


HEADER = ["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm",
          "vegetation", "added_on", "notes"]


@pytest.mark.parametrize("cells, fast", [
    (["400", "50.5", "grassland"], True),
    (["", "", ""], True),
    (["1e3", " 7 ", "a, b"], True),
    (["inf", "-12.25", "x\ny"], True),
    (["-0", "3", "x"], False),       # to_numeric reads "-0" as +0: the text route
    (["NA", "3", "x"], False),       # not a plain number: coerced to missing by to_numeric
    (["12 mm", "3", "x"], False),
])
def test_typed_read_equals_typed_records_of_the_text(cells, fast):
    rows = [["P-1", "-40", "52", "SRC", cells[0], cells[1], cells[2], DAY, ""],
            ["P-2", "-41", "53", "SRC", "500", "", "", DAY, "note"]]
    raw = text_table(rows, HEADER)
    text = pd.read_csv(io.BytesIO(raw), dtype=str, keep_default_na=False, na_filter=False)
    typed = _typed_from_bytes(raw)
    assert (typed is not None) == fast
    if fast:
        pd.testing.assert_frame_equal(typed, typed_records(text), check_exact=True)
        part = _typed_from_bytes(raw, ["map_mm", "profile_id", "not_there"])
        pd.testing.assert_frame_equal(part, typed_records(text)[["profile_id", "map_mm"]],
                                      check_exact=True)


def make_store(tmp_path, n=40):
    rng = np.random.default_rng(3)
    rows = [[f"B-{i}", f"{-40 - i * 0.01:.4f}", f"{52 + i * 0.01:.4f}", "SRC-A",
             f"{rng.uniform(300, 900):.1f}", f"{rng.uniform(20, 120):.1f}", "40",
             "grassland", "" if i % 3 else 'a "quoted", note'] for i in range(n)]
    header = ["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm",
              "bk_thickness_cm", "vegetation", "notes"]
    table = tmp_path / "base.csv"
    with open(table, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows([header, *rows])
    admit(table, tmp_path / "soils", today=DAY)
    return tmp_path / "soils", header


def test_store_records_equal_the_text_route(tmp_path):
    store_dir, _ = make_store(tmp_path)
    store = open_store(store_dir)
    pd.testing.assert_frame_equal(store.records, typed_records(store.records_text),
                                  check_exact=True)
    assert store.row_count == len(store.records_text) == 40


# --- appending to records.csv -----------------------------------------------------------

def new_batch(tmp_path, header, name="new.csv", extra=None):
    rows = [[f"N-{i}", f"{-30 - i * 0.01:.4f}", f"{60 + i * 0.01:.4f}", "SRC-B",
             f"{410 + 13 * i}.25", f"{30 + i}", "25", "shrubland", "" if i % 2 else "n"]
            for i in range(12)]
    cols = header + ([extra] if extra else [])
    rows = [r + ["x"] if extra else r for r in rows]
    path = tmp_path / name
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows([cols, *rows])
    return path


@pytest.mark.parametrize("extra", [None, "zeta_extra"])
def test_appended_records_equal_the_whole_table_rewritten(tmp_path, extra):
    store_dir, header = make_store(tmp_path)
    before = open_store(store_dir)
    old_text = before.records_text
    batch = new_batch(tmp_path, header, extra=extra)
    result = admit(batch, store_dir, today=DAY)
    assert (result.accepted, result.rejected) == (12, 0)
    after = open_store(store_dir)
    accepted = after.records_text.iloc[40:]
    # the definition: the old text and the new rows, the whole table written again
    whole = _new_records(old_text, typed_records(accepted), DAY)
    assert (store_dir / "records.csv").read_bytes() == records_bytes(whole)
    assert after.manifest["records_sha256"] == result.records_sha256
    for version in (1, 2):  # every version still rebuilds to its recorded sha256
        assert len(after.records_at(version)) == (40 if version == 1 else 52)


def test_after_a_manifest_repair_the_table_is_written_whole(tmp_path):
    from refit.curate.store_manifest import repair_manifest

    store_dir, header = make_store(tmp_path)
    records = store_dir / "records.csv"
    records.write_bytes(records.read_bytes().replace(b"\n", b"\r\n"))  # another program
    assert repair_manifest(store_dir, today=DAY)
    assert not open_store(store_dir).appendable
    admit(new_batch(tmp_path, header), store_dir, today=DAY)
    data = records.read_bytes()
    assert b"\r\n" not in data  # rewritten by refit, as before the fast path
    store = open_store(store_dir)
    assert store.appendable and len(store.records) == 52
    manifest = json.loads((store_dir / "manifest.json").read_text())
    assert [e.get("kind", "admit") for e in manifest["changelog"]] == ["admit", "repair",
                                                                         "admit"]


def test_float_cells_equal_cell_by_cell():
    v = np.array([np.nan, np.inf, -np.inf, -0.0, 0.0, 3.0, -3.0, 1e15, 1e15 - 1, -1e15 + 1,
                  0.1 + 0.2, 1e-7, 123456789012.5, 2.5e20, 1 / 3, 7.000000000001])
    column = pd.Series(v)
    assert _cells(column) == [_cell(x) for x in v.tolist()]
    assert _cells(column) == column.map(_cell).tolist()
    text = pd.Series(["a", None, "b"], dtype="str")
    assert _cells(text) == text.map(_cell).tolist() == ["a", "", "b"]
    mixed = pd.Series(["a", None, np.nan, 3, 2.5, np.int64(4), pd.NA, True], dtype=object)
    assert _cells(mixed) == mixed.map(_cell).tolist() == ["a", "", "", "3", "2.5", "4", "",
                                                          "True"]


# --- id normalisation and formula-like text: the per-cell definitions ---------------------

@settings(max_examples=300, deadline=None)
@given(st.lists(st.text(alphabet=st.characters(max_codepoint=0x7f)) | st.text(),
                min_size=1, max_size=5))
def test_printable_ascii_ids_are_left_as_they_are(texts):
    from refit.curate.text_cells import _needs_normalising, _plain, normalise_id

    for text in texts:
        if _plain(text):
            assert normalise_id(text) == text
    for dtype in ("str", object):
        col = pd.Series(texts, dtype=dtype)
        assert _needs_normalising(col) == (not all(map(_plain, col)))


def test_formula_like_cells_are_those_of_the_per_cell_rule():
    from refit.curate.text_cells import (
        FORMULA_STARTS,
        _is_number,
        formula_like_problems,
    )

    class Probs:
        def __init__(self):
            self.hits = {}

        def add(self, severity, rule, pos, name, values, message):
            self.hits[name] = list(pos)

    work = pd.DataFrame({
        "notes": pd.Series(["=SUM(A1)", "-12.5", "-x", "ok", None, "+1e3", "@me", "\tt"],
                           dtype="str"),
        "landform": pd.Series(["=", 3, np.nan, "-", "- 2", "a", "+", "b"], dtype=object),
        "map_mm": np.arange(8.0)})
    probs = Probs()
    formula_like_problems(work, probs, list(work.columns))
    expected = {name: [k for k, v in enumerate(work[name]) if isinstance(v, str)
                       and v.startswith(FORMULA_STARTS) and not _is_number(v)]
                for name in ("notes", "landform")}
    assert probs.hits == expected == {"notes": [0, 2, 6, 7], "landform": [0, 3, 4, 6]}
