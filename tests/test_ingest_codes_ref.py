"""Layout and readings checks (distinct-value codes, Arrow ``is_in``, sort shortcuts) against the
implementation they replaced, kept below verbatim with its own ``Checker`` (``OldChecker``): on
random tables with every kind of problem the new code must give the same problems, in the same
order, and the same frames. Also ``Checker.number`` alone, old against new.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pytest

from screenlab import plates as platelib
from screenlab import units
from screenlab.errors import Problem
from screenlab.ingest import validate as v
from screenlab.ingest.validate import _to_float as v_to_float
from screenlab.ingest.tables import RawTable, read_table
from screenlab.ingest.validate import (ABS_MAX, ABS_MIN, CONC_TOL_REL, FRACTION_MAX, FRACTION_TOL, LAYOUT_COLUMNS, NA_WORDS,
                                       PERCENT_MAX, PERCENT_TOL, READING_COLUMNS, RESERVED_FACTORS, T_MAX_C, T_MIN_C,
                                       ABSOLUTE_ZERO_C, _NAN_WORDS, _empty_catalysts, _empty_plates, _empty_wells,
                                       extra_columns_note, parse_wells_fast)
from screenlab.model import DEFAULT_ANALYTE, ROLES

# ------------------------------------------------------------------ the previous code, verbatim
class OldChecker:
    """Problem collection for one table."""

    def __init__(self, table: RawTable, problems: list[Problem]):
        self.t = table
        self.f = table.frame
        self.rows = table.rows
        self.problems = problems

    @property
    def name(self) -> str:
        return self.t.name

    def col(self, column: str) -> pd.Series:
        if column in self.f.columns:
            return self.f[column]
        return pd.Series([""] * len(self.f), dtype="str")

    def report(self, mask, column: str | None, message, values=None) -> None:
        """One problem per True row of ``mask``; ``message`` is a string or an array of strings."""
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            return
        idx = np.flatnonzero(mask)
        if values is None:
            values = self.col(column).to_numpy() if column in self.f.columns else None
        vals = [None] * len(idx) if values is None else [str(v) for v in np.asarray(values, dtype=object)[idx]]
        msgs = [message] * len(idx) if isinstance(message, str) else list(np.asarray(message, dtype=object)[idx])
        rows = self.rows[idx]
        self.problems.extend(Problem(self.name, int(r), column, v, m) for r, v, m in zip(rows, vals, msgs))

    def whole(self, column: str | None, message: str, value=None) -> None:
        self.problems.append(Problem(self.name, None, column, value, message))

    def require_columns(self, required) -> bool:
        missing = [c for c in required if c not in self.f.columns]
        if missing:
            found = ", ".join(self.f.columns) or "none"
            self.problems.append(Problem(self.name, 1, ", ".join(missing), None,
                                         f"missing required column{'s' if len(missing) > 1 else ''}: "
                                         f"{', '.join(missing)} (found: {found})"))
        return not missing

    def number(self, column: str, *, required=None, what: str | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Parse a numeric column.

        Returns (values, ok): values are floats (NaN where blank or bad); ok is True where the cell
        holds a finite number. ``required`` (bool mask or True) reports blanks on those rows.
        """
        raw = self.col(column)
        text = raw.str.replace(",", ".", regex=False) if self.t.decimal_comma else raw
        low = raw.str.lower()
        blank = low.isin(NA_WORDS).to_numpy()
        v = v_to_float(text, blank)      # cell -> float reading: unchanged by the rewrite, shared
        nanword = low.isin(_NAN_WORDS).to_numpy()
        notnum = ~blank & np.isnan(v) & ~nanword
        nonfinite = ~blank & (np.isinf(v) | nanword)
        self.report(notnum, column, "is not a number")
        self.report(nonfinite, column, "is not a finite number")
        v = np.where(np.isfinite(v), v, np.nan)
        if required is not None:
            req = np.broadcast_to(np.asarray(required, dtype=bool), blank.shape)
            self.report(req & blank, column, what or f"a value is required in '{column}'")
        return v, np.isfinite(v)

    def text(self, column: str) -> pd.Series:
        return self.col(column)

    def duplicated(self, keys: list[pd.Series] | pd.Series, valid, column: str, what: str) -> np.ndarray:
        """Report rows repeating an earlier row's key (among ``valid`` rows); returns the mask."""
        frame = pd.DataFrame({f"k{i}": (k.reset_index(drop=True) if isinstance(k, pd.Series) else k)
                              for i, k in enumerate(keys if isinstance(keys, list) else [keys])})
        frame["_row"] = self.rows
        frame = frame[np.asarray(valid, dtype=bool)]
        kcols = [c for c in frame.columns if c != "_row"]
        dup = frame.duplicated(kcols, keep="first")
        if not dup.any():
            return np.zeros(len(self.f), dtype=bool)
        first = frame.groupby(kcols, sort=False)["_row"].transform("first")
        mask = np.zeros(len(self.f), dtype=bool)
        mask[frame.index[dup.to_numpy()]] = True
        msg = np.full(len(self.f), "", dtype=object)
        msg[frame.index[dup.to_numpy()]] = [f"{what} (first on row {int(r)})" for r in first[dup].to_numpy()]
        self.report(mask, column, msg)
        return mask



def _old_temperature(ch: OldChecker, column: str, v: np.ndarray, ok: np.ndarray) -> None:
    below0 = ok & (v < ABSOLUTE_ZERO_C)
    ch.report(below0, column, "temperature below absolute zero (-273.15 degC)")
    ch.report(ok & ~below0 & ((v < T_MIN_C) | (v > T_MAX_C)), column,
              f"temperature outside the plausible range for well plates and vial blocks "
              f"({T_MIN_C:g} to {T_MAX_C:g} degC); is it in kelvin or fahrenheit?")



def old_check_layout(table: RawTable, problems: list[Problem], *, plates: pd.DataFrame | None,
                 catalysts: pd.DataFrame | None,
                 conc_factor: float | None, volume_factor: float | None) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """Validate layout.csv against plates and catalysts; returns (wells frame, factor names).

    ``plates`` / ``catalysts`` None (their file could not be read) skips the cross-checks with them.
    """
    ch = OldChecker(table, problems)
    check_plate_ids = plates is not None
    check_catalyst_ids = catalysts is not None
    plates = plates if plates is not None else _empty_plates()
    catalysts = catalysts if catalysts is not None else _empty_catalysts()
    f = ch.f
    ch.require_columns(["plate", "well", "role", "substrate_conc", "volume"])
    n = len(f)
    # roles
    role = ch.text("role").str.lower()
    if "role" in f.columns:
        ch.report((role == "").to_numpy(), "role", "a role is required: sample, blank, reference or empty")
        ch.report(((role != "") & ~role.isin(ROLES)).to_numpy(), "role",
                  "unknown role; expected sample, blank, reference or empty")
    is_cat = role.isin(("sample", "reference")).to_numpy()
    is_blank = (role == "blank").to_numpy()
    is_empty = (role == "empty").to_numpy()
    is_used = role.isin(("sample", "reference", "blank")).to_numpy()
    if is_cat.any():
        missing = [c for c in ("catalyst", "loading", "loading_unit") if c not in f.columns]
        if missing:
            ch.whole(", ".join(missing), f"sample and reference wells need the column{'s' if len(missing) > 1 else ''} "
                                        f"{', '.join(missing)}")
    # plate and well
    pid = ch.text("plate")
    plate_fmt = dict(zip(plates["plate"], plates["format"]))
    known_plate = pid.isin(list(plate_fmt)).to_numpy()
    if "plate" in f.columns:
        ch.report((pid == "").to_numpy(), "plate", "a plate id is required")
        if check_plate_ids:
            ch.report(((pid != "") & ~known_plate), "plate", "unknown plate (not in plates.csv)")
    parsed = parse_wells_fast(ch.text("well"))
    well_ok = parsed["well"].notna().to_numpy()
    if "well" in f.columns:
        ch.report(~well_ok, "well", "not a well name (expected a row letter and a column number, e.g. A1 or a01)")
    fmt = pid.map(plate_fmt).fillna(0).astype(np.int64).to_numpy()
    nr, nc = platelib.format_dims(fmt)
    outside = well_ok & known_plate & (fmt > 0) & ((parsed["row"].to_numpy() >= nr) | (parsed["col"].to_numpy() >= nc))
    if outside.any():  # messages built for the failing rows only
        last = np.array(list(platelib.ROW_LETTERS))[np.clip(nr - 1, 0, 15)]
        msg = np.full(n, "", dtype=object)
        idx = np.flatnonzero(outside)
        msg[idx] = [f"well outside the plate's {a}-well format (rows A-{b}, columns 1-{c})"
                    for a, b, c in zip(fmt[idx], last[idx], nc[idx])]
        ch.report(outside, "well", msg)
    wells = parsed["well"].astype("str")
    placed = well_ok & (pid != "").to_numpy()
    ch.duplicated([pid, wells], placed, "well", "duplicate well in the layout")
    # catalyst
    cat = ch.text("catalyst")
    has_cat = (cat != "").to_numpy()
    if "catalyst" in f.columns:
        ch.report(is_cat & ~has_cat, "catalyst", "a sample or reference well needs a catalyst")
        if check_catalyst_ids:
            ch.report(is_cat & has_cat & ~cat.isin(list(catalysts["catalyst"])).to_numpy(), "catalyst",
                      "unknown catalyst (not in catalysts.csv)")
        ch.report(is_blank & has_cat, "catalyst",
                  "a blank well must not name a catalyst (a blank is everything but the catalyst)")
    loading = np.full(n, np.nan)
    if "loading" in f.columns:
        loading, lok = ch.number("loading", required=is_cat, what="a sample or reference well needs a loading")
        ch.report(is_cat & lok & (loading <= 0), "loading", "loading must be > 0")
    lu_raw = ch.text("loading_unit")
    codes, uniq = pd.factorize(lu_raw)  # normalise the few distinct unit words, not every row
    canon = np.array([units.normalise_loading_unit(u) for u in uniq] + [None], dtype=object)
    lu = pd.Series(canon[codes], index=f.index, dtype=object)
    if "loading_unit" in f.columns:
        ch.report(is_cat & (lu_raw == "").to_numpy(), "loading_unit",
                  "a sample or reference well needs a loading_unit (umol, mg or mol%)")
        ch.report(is_cat & (lu_raw != "").to_numpy() & lu.isna().to_numpy(), "loading_unit",
                  "unknown loading unit; expected umol, mg or mol%")
    # substrate and volume
    conc = np.full(n, np.nan)
    vol = np.full(n, np.nan)
    if "substrate_conc" in f.columns:
        conc, cok = ch.number("substrate_conc", required=is_used,
                              what="substrate_conc is required for every well except empty ones")
        ch.report(is_used & cok & (conc <= 0), "substrate_conc", "substrate_conc must be > 0")
    if "volume" in f.columns:
        vol, vok = ch.number("volume", required=is_used, what="volume is required for every well except empty ones")
        ch.report(is_used & vok & (vol <= 0), "volume", "volume must be > 0")
    # can the loading become active sites?
    if "catalyst" in f.columns and "loading_unit" in f.columns and len(catalysts):
        cinfo = catalysts.set_index("catalyst")
        cinfo = cinfo[~cinfo.index.duplicated()]
        mm = cat.map(cinfo["molar_mass_g_mol"]).to_numpy(dtype=float)
        wt = cat.map(cinfo["metal_wt_pct"]).to_numpy(dtype=float)
        mmm = cat.map(cinfo["metal_molar_mass_g_mol"]).to_numpy(dtype=float)
        known_cat = cat.isin(list(cinfo.index)).to_numpy()
        mg = is_cat & known_cat & (lu == "mg").to_numpy()
        ch.report(mg & np.isnan(mm) & ~(np.isfinite(wt) & np.isfinite(mmm)), "loading_unit",
                  "an mg loading needs molar_mass_g_mol, or metal_wt_pct and metal_molar_mass_g_mol, "
                  "for this catalyst in catalysts.csv")
    molpct = is_cat & (lu == "mol%").to_numpy()
    ch.report(molpct & ~(conc > 0), "loading_unit",
              "a mol% loading needs a substrate_conc > 0 (mol% is relative to the substrate)")
    # temperature override
    tw = np.full(n, np.nan)
    if "temperature_c" in f.columns:
        tw, twok = ch.number("temperature_c")
        _old_temperature(ch, "temperature_c", tw, twok)
    plate_t = pid.map(dict(zip(plates["plate"], plates["temperature_c"]))).to_numpy(dtype=float)
    temp = np.where(np.isfinite(tw), tw, plate_t)
    # factors
    factors = [c for c in f.columns if c not in LAYOUT_COLUMNS]
    for c in factors:
        if c in RESERVED_FACTORS:
            ch.whole(c, f"'{c}' cannot be a factor column name (it is a reserved column of the wells table); rename it")
    cf = conc_factor if conc_factor is not None else np.nan
    vf = volume_factor if volume_factor is not None else np.nan
    out = pd.DataFrame({
        "plate": pid.astype("str"),
        "well": wells,
        "row": parsed["row"].to_numpy(dtype=np.int64),
        "col": parsed["col"].to_numpy(dtype=np.int64),
        "role": role.astype("str"),
        "catalyst": cat.where(is_cat & has_cat, None).astype("str"),
        "loading": np.where(is_cat, loading, np.nan),
        "loading_unit": lu.where(is_cat, None).astype("str"),
        "substrate_conc_mM": np.where(is_empty, np.nan, conc * cf),
        "volume_uL": np.where(is_empty, np.nan, vol * vf),
        "temperature_c": temp,
    })
    for c in factors:
        out[c] = f[c].astype("str").to_numpy()
    out = out.sort_values(["plate", "row", "col"], kind="stable").reset_index(drop=True)
    return out, tuple(factors)



def old_check_readings(table: RawTable, problems: list[Problem], *, wells: pd.DataFrame | None,
                   plates: pd.DataFrame | None, info: dict) -> tuple[pd.DataFrame, list[str]]:
    """Validate readings.csv against the layout and the manifest (``info`` from parse_manifest).

    ``wells`` / ``plates`` None (their file could not be read) skips the cross-checks with them.
    """
    ch = OldChecker(table, problems)
    check_wells = wells is not None
    check_plate_ids = plates is not None
    wells = wells if wells is not None else _empty_wells()
    plates = plates if plates is not None else _empty_plates()
    f = ch.f
    notes = extra_columns_note(ch, READING_COLUMNS)
    ch.require_columns(["plate", "well", "time", "value"])
    n = len(f)
    # plates and wells as integer codes over their distinct texts: checks, the layout lookup, the
    # duplicate test and the final sort work on the codes, never on per-row strings
    pid = ch.text("plate")
    p_codes, p_uniq = pd.factorize(pid)
    p_uniq = pd.Index(p_uniq)
    known_plate = p_uniq.isin(list(plates["plate"]))[p_codes] if n else np.zeros(0, dtype=bool)
    if "plate" in f.columns:
        p_blank = (p_uniq == "")[p_codes] if n else np.zeros(0, dtype=bool)
        ch.report(p_blank, "plate", "a plate id is required")
        if check_plate_ids:
            ch.report(~p_blank & ~known_plate, "plate", "unknown plate (not in plates.csv)")
    w_codes, w_uniq = pd.factorize(ch.text("well").fillna(""))
    w_name = platelib.parse_wells(np.asarray(w_uniq, dtype=object))["well"].astype("str")
    c_of_w, c_uniq = pd.factorize(w_name, use_na_sentinel=True)  # distinct raw name -> canonical name code
    c_codes = c_of_w[w_codes] if n else np.zeros(0, dtype=np.intp)  # per row; -1: not a well name
    well_ok = c_codes >= 0
    well = pd.Series(pd.array(w_name, dtype="str").take(w_codes), copy=False)
    if "well" in f.columns:
        ch.report(~well_ok, "well", "not a well name (expected a row letter and a column number, e.g. A1 or a01)")
    # layout (plate, well) -> role of its first row, as one int64 key per layout row and per reading
    n_c = max(len(c_uniq), 1)
    lay_p = p_uniq.get_indexer(wells["plate"].astype("str"))
    lay_c = pd.Index(c_uniq).get_indexer(wells["well"].astype("str"))
    lay_ok = (lay_p >= 0) & (lay_c >= 0)
    lay_key, first = np.unique(lay_p[lay_ok].astype(np.int64) * n_c + lay_c[lay_ok], return_index=True)
    lay_empty = wells["role"].to_numpy(dtype=object)[np.flatnonzero(lay_ok)[first]] == "empty"
    row_key = p_codes.astype(np.int64) * n_c + c_codes
    pos = np.clip(np.searchsorted(lay_key, row_key), 0, max(len(lay_key) - 1, 0))
    in_layout = well_ok & (lay_key[pos] == row_key) if len(lay_key) else np.zeros(n, dtype=bool)
    check_place = known_plate & well_ok & check_wells
    ch.report(check_place & ~in_layout, "well", "reading for a well that is not in layout.csv")
    on_empty = in_layout & lay_empty[pos] if len(lay_key) else np.zeros(n, dtype=bool)
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
    a_codes, a_uniq = pd.factorize(analyte)
    # duplicates
    p_filled = (p_uniq != "")[p_codes] if n else np.zeros(0, dtype=bool)
    ch.duplicated([p_codes, c_codes, a_codes, t], tok & well_ok & p_filled, "time",
                  "duplicate reading for the same plate, well, analyte and time")
    tf = info.get("time_factor")
    time_h = t * (tf if tf is not None else np.nan)
    # sort by plate, well, analyte, time_h (text in code-point order, missing last; stable), as
    # DataFrame.sort_values would, from the ranks of the distinct texts
    def rank(uniq) -> np.ndarray:
        r = np.full(len(uniq) + 1, len(uniq), dtype=np.int64)  # last slot: missing (code -1)
        present = np.flatnonzero(pd.notna(np.asarray(uniq, dtype=object)))
        order = present[np.argsort(np.asarray(uniq, dtype=object)[present], kind="stable")]
        r[order] = np.arange(len(order))
        return r
    order = np.lexsort((time_h, rank(a_uniq)[a_codes], rank(c_uniq)[c_codes], rank(p_uniq)[p_codes])) \
        if n else np.zeros(0, dtype=np.intp)
    out = pd.DataFrame({
        "plate": pd.array(pid.array, dtype="str").take(order),
        "well": well.array.take(order),
        "analyte": pd.array(analyte.array, dtype="str").take(order),
        "time_h": time_h[order],
        "value": v[order],
    })
    return out, notes


# ------------------------------------------------------------------ random tables
PLATES_CSV = "plate,format,temperature_c\nP1,96,40\nP2,24,50\nP 3,384,60\n"
CATALYSTS_CSV = ("catalyst,molar_mass_g_mol,metal_wt_pct,metal_molar_mass_g_mol\n"
                 "C1,350,,\nC2,,5,106.4\nC3,,,\nREF,412.5,,\nC1,351,,\n")


def _pick(rng, options):
    return options[int(rng.integers(len(options)))]


def _layout_csv(rng, delim: str) -> bytes:
    wells = [f"{r}{c}" for r in "ABCH" for c in (1, 2, 3, 12)] + ["a01", " b2 ", "Z99", "", "H13", "P24", "A 1"]
    cols = ["plate", "well", "role", "catalyst", "loading", "loading_unit", "substrate_conc", "volume"]
    extra = [c for c in ("temperature_c", "solvent", "Base X", "row") if rng.random() < 0.4]
    dropped = [c for c in cols if rng.random() < 0.04]
    header = [c for c in cols if c not in dropped] + extra
    numbers = ["1", "0.5", "2,5", "-1", "0", "", "na", "N/A", "nan", "inf", "x", "1e3", " 3 "]
    lines = [delim.join(header)]
    for _ in range(int(rng.integers(0, 70))):
        cell = {
            "plate": _pick(rng, ["P1", "P2", "P 3", "PX", "", "p1"]),
            "well": _pick(rng, wells),
            "role": _pick(rng, ["sample", "Sample", "blank", "BLANK", "reference", "empty", "", "smaple"]),
            "catalyst": _pick(rng, ["C1", "C2", "C3", "REF", "CX", ""]),
            "loading": _pick(rng, numbers),
            "loading_unit": _pick(rng, ["umol", "µmol", "mg", "MG", "mol%", "mol %", "kg", ""]),
            "substrate_conc": _pick(rng, numbers),
            "volume": _pick(rng, numbers),
            "temperature_c": _pick(rng, ["", "40", "400", "-300", "x"]),
            "solvent": _pick(rng, ["toluene", "THF", "", "'=A1"]),
            "Base X": _pick(rng, ["KOtBu", ""]),
            "row": "1",
        }
        lines.append(delim.join(cell[c] if c in cell else "" for c in header))
    if len(lines) > 3 and rng.random() < 0.5:  # sorted by plate and well as a writer would
        lines = lines[:1] + sorted(lines[1:])
    return ("\n".join(lines) + "\n").encode()


def _tables(rng, delim):
    plates, _ = v.check_plates(read_table("plates.csv", PLATES_CSV.encode(), []), [])
    catalysts, _ = v.check_catalysts(read_table("catalysts.csv", CATALYSTS_CSV.encode(), []), [])
    return plates, catalysts, _layout_csv(rng, delim)


def _same_problems(a: list[Problem], b: list[Problem]) -> None:
    assert [str(p) for p in a] == [str(p) for p in b]
    assert a == b


@pytest.mark.parametrize("delim", [",", ";"])
def test_check_layout_matches_the_previous_implementation(delim):
    rng = np.random.default_rng(11 if delim == "," else 12)
    for _ in range(30):
        plates, catalysts, data = _tables(rng, delim)
        for p, c in ((plates, catalysts), (None, catalysts), (plates, None)):
            got_p, ref_p = [], []
            t1 = read_table("layout.csv", data, got_p)
            t2 = read_table("layout.csv", data, ref_p)
            if t1 is None:
                assert t2 is None and got_p == ref_p
                continue
            kw = dict(plates=p, catalysts=c, conc_factor=1.0, volume_factor=1e3)
            got, got_f = v.check_layout(t1, got_p, **kw)
            ref, ref_f = old_check_layout(t2, ref_p, **kw)
            _same_problems(got_p, ref_p)
            assert got_f == ref_f
            if not set(got_f) & set(RESERVED_FACTORS):  # a reserved factor name (always reported)
                pd.testing.assert_frame_equal(got, ref)  # overwrote a wells column in the old frame


def _readings_csv(rng) -> bytes:
    analyte = rng.random() < 0.6
    header = ["plate", "well", "time", "value"] + (["analyte"] if analyte else [])
    lines = [",".join(header)]
    for _ in range(int(rng.integers(0, 80))):
        row = [_pick(rng, ["P1", "P2", "PX", "", "P 3"]), _pick(rng, ["A1", "a01", "B2", "H12", "Z9", "", "A2"]),
               _pick(rng, ["0", "1", "1.0", "2.5", "", "x", "-1", "inf"]),
               _pick(rng, ["1", "50", "101", "", "nan", "0.5", "-3", "x"])]
        if analyte:
            row.append(_pick(rng, ["P", "B1", "P_R", "P_S", "", "Q"]))
        lines.append(",".join(row))
    if rng.random() < 0.5:
        lines = lines[:1] + sorted(lines[1:])
    return "\n".join(lines).encode()


INFOS = [
    {"kind": "yield", "scale": "percent", "time_factor": 1 / 60},
    {"kind": "conversion", "scale": "fraction", "time_factor": 1.0},
    {"kind": "product_conc", "time_factor": 1 / 3600, "conc_factor": 1.0, "conc_unit": "mM"},
    {"kind": "absorbance", "time_factor": 1 / 60},
    {"kind": "yield", "scale": "percent", "time_factor": 1 / 60, "analytes_declared": True, "main": "P",
     "byproducts": ("B1",)},
    {"kind": "product_conc", "time_factor": 1.0, "conc_factor": 1.0, "analytes_declared": True, "main": "P",
     "byproducts": ("B1",), "enantiomers": ("P_R", "P_S")},
    {"kind": "yield", "scale": "percent"},  # no time unit: a broken manifest
]


def test_check_readings_matches_the_previous_implementation():
    rng = np.random.default_rng(5)
    plates, catalysts, _ = _tables(rng, ",")
    layout = read_table("layout.csv", b"plate,well,role,catalyst,loading,loading_unit,substrate_conc,volume\n"
                        b"P1,A1,sample,C1,1,umol,10,100\nP1,B2,empty,,,,,\nP2,a01,blank,,,,10,100\n"
                        b"P1,H12,reference,REF,1,umol,10,100\nP1,A1,blank,,,,10,100\n", [])
    wells, _ = v.check_layout(layout, [], plates=plates, catalysts=catalysts, conc_factor=1.0, volume_factor=1.0)
    for _ in range(45):
        data = _readings_csv(rng)
        info = INFOS[int(rng.integers(len(INFOS)))]
        for w, p in ((wells, plates), (None, None), (wells, None)):
            got_p, ref_p = [], []
            t1 = read_table("readings.csv", data, got_p)
            t2 = read_table("readings.csv", data, ref_p)
            got, got_n = v.check_readings(t1, got_p, wells=w, plates=p, info=info)
            ref, ref_n = old_check_readings(t2, ref_p, wells=w, plates=p, info=info)
            _same_problems(got_p, ref_p)
            assert got_n == ref_n
            pd.testing.assert_frame_equal(got, ref)


NUMBER_CELLS = ["1", "2.5", "-0", "1e-3", "1,5", "", "na", "N/A", "null", "None", "nan", "+nan", "-NaN", "inf",
                "-Infinity", "x", "1.2.3", "0x10", " 4", "1_000"]


@pytest.mark.parametrize("decimal_comma", [False, True])
def test_number_matches_the_previous_implementation(decimal_comma):
    rng = np.random.default_rng(3)
    for trial in range(150):
        size = int(rng.integers(0, 40))
        pool = NUMBER_CELLS if trial % 3 else ["1", "2.5", "1e3", "inf", "-7"]  # some columns cast whole
        cells = [pool[int(i)] for i in rng.integers(0, len(pool), size)]
        frame = pd.DataFrame({"x": pd.array(cells, dtype="str")})
        table = RawTable("t.csv", frame, np.arange(size, dtype=np.int64) + 2, decimal_comma=decimal_comma)
        required = rng.random(size) < 0.5 if trial % 2 else None
        for column in ("x", "absent"):
            got_p, ref_p = [], []
            gv, gok = v.Checker(table, got_p).number(column, required=required, what="needed")
            rv, rok = OldChecker(table, ref_p).number(column, required=required, what="needed")
            _same_problems(got_p, ref_p)
            np.testing.assert_array_equal(gv, rv)
            np.testing.assert_array_equal(gok, rok)


def test_distinct_isin_and_lookup_match_pandas():
    rng = np.random.default_rng(9)
    words = ["a", "b", "B", "", "ü", "a b"]
    for _ in range(100):
        cells = [words[int(i)] for i in rng.integers(0, len(words), int(rng.integers(0, 30)))]
        s = pd.Series(pd.array(cells, dtype="str"))
        if len(s) and rng.random() < 0.3:
            s.iloc[0] = None  # a missing cell
        d = v.Distinct(s)
        items = [words[int(i)] for i in rng.integers(0, len(words), int(rng.integers(0, 4)))]
        for given in (items, set(items), pd.Series(items, dtype="str"), pd.Index(items, dtype="str"),
                      items + [None]):
            np.testing.assert_array_equal(d.spread(d.isin(given)), s.isin(list(given)).to_numpy())
        keys = pd.Index(sorted(set(items)), dtype="str")
        mapping = pd.Series(rng.random(len(keys)), index=keys)
        np.testing.assert_array_equal(d.spread(d.lookup(mapping)), s.map(mapping).to_numpy(dtype=float))
        pd.testing.assert_extension_array_equal(d.take(d.values), pd.array(s.array, dtype="str"))
