"""check_readings (integer-coded plate/well keys, lexsort) against the straightforward string-key
implementation it replaced (kept below verbatim as ``reference_check_readings``: per-row
"plate + separator + well" keys looked up in a pandas Index, DataFrame.sort_values on the text
columns). Random small readings tables with unknown plates, bad and lower-case wells, wells not in
the layout, empty wells, duplicates and blank cells; problems and the frame must be identical.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.ingest import validate as v
from screenlab.ingest.tables import read_table
from screenlab.ingest.validate import (ABS_MAX, ABS_MIN, CONC_TOL_REL, DEFAULT_ANALYTE, FRACTION_MAX, FRACTION_TOL,  # noqa: F401
                                       PERCENT_MAX, PERCENT_TOL, READING_COLUMNS, Checker, _empty_plates, _empty_wells,
                                       extra_columns_note, parse_wells_fast)


def reference_check_readings(table: RawTable, problems: list[Problem], *, wells: pd.DataFrame | None,
                   plates: pd.DataFrame | None, info: dict) -> tuple[pd.DataFrame, list[str]]:
    """Validate readings.csv against the layout and the manifest (``info`` from parse_manifest).

    ``wells`` / ``plates`` None (their file could not be read) skips the cross-checks with them.
    """
    ch = Checker(table, problems)
    check_wells = wells is not None
    check_plate_ids = plates is not None
    wells = wells if wells is not None else _empty_wells()
    plates = plates if plates is not None else _empty_plates()
    f = ch.f
    notes = extra_columns_note(ch, READING_COLUMNS)
    ch.require_columns(["plate", "well", "time", "value"])
    n = len(f)
    pid = ch.text("plate")
    known_plate = pid.isin(list(plates["plate"])).to_numpy()
    if "plate" in f.columns:
        ch.report((pid == "").to_numpy(), "plate", "a plate id is required")
        if check_plate_ids:
            ch.report((pid != "").to_numpy() & ~known_plate, "plate", "unknown plate (not in plates.csv)")
    parsed = parse_wells_fast(ch.text("well"))
    well = parsed["well"].astype("str")
    well_ok = parsed["well"].notna().to_numpy()
    if "well" in f.columns:
        ch.report(~well_ok, "well", "not a well name (expected a row letter and a column number, e.g. A1 or a01)")
    sep = "\x1f"
    lay_keys = pd.Index(wells["plate"].astype("str") + sep + wells["well"].astype("str")).drop_duplicates()
    lay_roles = wells.assign(_k=wells["plate"].astype("str") + sep + wells["well"].astype("str")) \
        .drop_duplicates("_k").set_index("_k")["role"].reindex(lay_keys).to_numpy(dtype=object)
    pos = lay_keys.get_indexer(pid + sep + well.fillna(""))
    in_layout = pos >= 0
    check_place = known_plate & well_ok & check_wells
    ch.report(check_place & ~in_layout, "well", "reading for a well that is not in layout.csv")
    roles = np.where(in_layout, lay_roles[np.clip(pos, 0, None)] if len(lay_roles) else None, None)
    on_empty = in_layout & (roles == "empty")
    ch.report(on_empty, "well", "reading on a well marked empty in layout.csv")
    # time
    t = np.full(n, np.nan)
    tok = np.zeros(n, dtype=bool)
    if "time" in f.columns:
        t, tok = ch.number("time", required=True, what="a time is required")
        ch.report(tok & (t < 0), "time", "time must be >= 0 (time since the start of the reaction)")
    # value
    v = np.full(n, np.nan)
    if "value" in f.columns:
        v, vok = ch.number("value", required=True, what="a value is required")
        kind, scale = info.get("kind"), info.get("scale")
        if kind in ("conversion", "yield") and scale == "percent":
            ch.report(vok & ((v < -PERCENT_TOL) | (v > PERCENT_MAX)), "value",
                      f"a percent {kind} must lie in -{PERCENT_TOL:g}..{PERCENT_MAX:g} (values up to "
                      f"{PERCENT_MAX:g} % of full scale are taken as measured and flagged; beyond that, or "
                      "clearly below zero, the value cannot be right)")
        elif kind in ("conversion", "yield") and scale == "fraction":
            ch.report(vok & ((v < -FRACTION_TOL) | (v > FRACTION_MAX)), "value",
                      f"a fractional {kind} must lie in -{FRACTION_TOL:g}..{FRACTION_MAX:g} (values up to "
                      f"{FRACTION_MAX:g} are taken as measured and flagged); is it in percent?")
        elif kind == "product_conc":
            top = np.nanmax(wells["substrate_conc_mM"].to_numpy(dtype=float), initial=0.0) if len(wells) else 0.0
            cf = info.get("conc_factor") or np.nan
            tol = CONC_TOL_REL * top * info.get("product_per_substrate", 1.0) / cf if np.isfinite(cf) else 0.0
            tol = tol if np.isfinite(tol) else 0.0
            ch.report(vok & (v < -tol), "value",
                      f"negative product concentration beyond noise (tolerance -{tol:.3g} {info.get('conc_unit', '')}, "
                      f"{CONC_TOL_REL * 100:g} % of the largest theoretical product concentration)")
        elif kind == "absorbance":
            ch.report(vok & ((v < ABS_MIN) | (v > ABS_MAX)), "value",
                      f"absorbance outside {ABS_MIN:g}..{ABS_MAX:g} (plate readers saturate near 4)")
    # analytes
    declared = bool(info.get("analytes_declared"))
    kind = info.get("kind")
    an = ch.text("analyte")
    if "analyte" in f.columns:
        if not declared:
            ch.whole("analyte", "readings have an analyte column but campaign.toml declares no [analytes] table")
        ch.report((an == "").to_numpy(), "analyte", "an analyte name is required")
        names = pd.unique(an[an != ""])
        if kind in ("conversion", "absorbance") and len(names) > 1:
            ch.whole("analyte", f"a {kind} readout gives one value per well and time, but the readings name "
                                f"{len(names)} analytes; several analytes need a yield or product_conc readout")
        if declared:
            main = info.get("main", DEFAULT_ANALYTE)
            byp = tuple(info.get("byproducts") or ())
            en = info.get("enantiomers")
            allowed = ({main} if not en else set()) | set(byp) | set(en or ())
            listed = ", ".join(sorted(allowed))
            unknown = (an != "").to_numpy() & ~an.isin(list(allowed)).to_numpy()
            if en:
                is_main = (an == main).to_numpy()
                ch.report(is_main, "analyte",
                          f"'{main}' is the sum of the enantiomers {en[0]} and {en[1]} and has no readings of its "
                          "own; read the two enantiomers instead")
                unknown &= ~is_main
                for e in en:  # two names
                    if not (an == e).any():
                        ch.whole("analyte", f"enantiomer '{e}' is declared in campaign.toml but never read", e)
            ch.report(unknown, "analyte", f"unknown analyte; campaign.toml [analytes] declares {listed}")
    elif declared:
        ch.whole("analyte", "campaign.toml declares [analytes], so readings.csv needs an analyte column")
    analyte = an if "analyte" in f.columns else pd.Series([DEFAULT_ANALYTE] * n, dtype="str")
    # duplicates
    ch.duplicated([pid, well, analyte, pd.Series(t)], tok & well_ok & (pid != "").to_numpy(), "time",
                  "duplicate reading for the same plate, well, analyte and time")
    tf = info.get("time_factor")
    out = pd.DataFrame({
        "plate": pid.astype("str").to_numpy(),
        "well": well.to_numpy(),
        "analyte": analyte.astype("str").to_numpy(),
        "time_h": t * (tf if tf is not None else np.nan),
        "value": v,
    })
    out = out.astype({"plate": "str", "well": "str", "analyte": "str"})
    out = out.sort_values(["plate", "well", "analyte", "time_h"], kind="stable").reset_index(drop=True)
    return out, notes


def _case(rng):
    plates = [f"P{i}" for i in range(int(rng.integers(1, 4)))]
    wells_all = [f"{r}{c}" for r in "ABC" for c in range(1, 4)]
    lay_rows = []
    for p in plates:
        for w in rng.choice(wells_all, size=int(rng.integers(1, 8)), replace=False):
            lay_rows.append((p, str(w), str(rng.choice(["sample", "blank", "empty"]))))
    if lay_rows and rng.random() < 0.5:
        lay_rows.append(lay_rows[0][:2] + ("empty",))  # a repeated layout key: first role counts
    wells = pd.DataFrame(lay_rows, columns=["plate", "well", "role"]).astype("str")
    wells["substrate_conc_mM"] = 100.0
    plate_frame = pd.DataFrame({"plate": pd.array(plates, dtype="str")})
    lines = ["plate,well,time,value"]
    for _ in range(int(rng.integers(0, 60))):
        p = str(rng.choice(plates + ["PX", ""]))
        w = str(rng.choice(wells_all + ["a01", " b2", "Z99", "", "A1"]))
        t = str(rng.choice(["0", "1", "2.5", "", "x", "1.0"]))
        val = str(rng.choice(["1", "50", "101", "", "nan"]))
        lines.append(",".join([p, w, t, val]))
    return "\n".join(lines).encode(), wells, plate_frame


def test_check_readings_matches_string_key_reference():
    rng = np.random.default_rng(7)
    info = {"kind": "yield", "scale": "percent", "time_factor": 1 / 60}
    for _ in range(40):
        data, wells, plate_frame = _case(rng)
        for w, p in ((wells, plate_frame), (None, None)):
            got_p, ref_p = [], []
            t1 = read_table("readings.csv", data, got_p)
            t2 = read_table("readings.csv", data, ref_p)
            got, _ = v.check_readings(t1, got_p, wells=w, plates=p, info=info)
            ref, _ = reference_check_readings(t2, ref_p, wells=w, plates=p, info=info)
            assert got_p == ref_p
            pd.testing.assert_frame_equal(got, ref)
