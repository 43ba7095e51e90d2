"""Check the four tables of a campaign and build the frames of :class:`~screenlab.model.CampaignData`.

Every check is a vectorised mask over all rows of a table; a :class:`~screenlab.errors.Problem` is
made only for the rows that fail. All checks run, so one import reports every problem found.

Ranges used (stated in the messages too):

* temperatures: :data:`T_MIN_C` .. :data:`T_MAX_C` degC for well plates and vial blocks (a dry-ice
  bath to a hot aluminium block; common practice, no source), and never below absolute zero
  (-273.15 degC, exact by definition of the kelvin scale);
* readout values: percent -:data:`PERCENT_TOL` .. :data:`PERCENT_MAX`, fraction
  -:data:`FRACTION_TOL` .. :data:`FRACTION_MAX`: chromatography and plate-reader values overshoot
  full scale near full conversion (integration and calibration noise), so values up to 110 % of
  full scale are imported as measured and flagged per well by the kinetics (``above_full_scale``);
  beyond that, or clearly below zero, the value cannot be right (common practice, no source);
  product concentrations down to -:data:`CONC_TOL_REL` x the largest theoretical product
  concentration of the campaign; absorbance :data:`ABS_MIN` .. :data:`ABS_MAX` (plate readers
  saturate near 4; common practice, no source);
* dispersion in (0, 1]; metal_wt_pct in (0, 100]; molar masses, sites_per_unit, loadings,
  substrate concentrations and volumes > 0.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from screenlab import plates as platelib
from screenlab import schema, units
from screenlab.errors import Problem
from screenlab.model import DEFAULT_ANALYTE, ROLES, UNCATALYSED

from .tables import RawTable

T_MIN_C = -100.0
T_MAX_C = 300.0
ABSOLUTE_ZERO_C = -273.15
PERCENT_TOL = 5.0
FRACTION_TOL = 0.05
#: highest percent / fraction value imported (110 % of full scale; above 100 the well is flagged)
PERCENT_MAX = 110.0
FRACTION_MAX = 1.10
CONC_TOL_REL = 0.02
ABS_MIN = -0.1
ABS_MAX = 10.0

#: cell words read as "no value" in optional numeric columns
NA_WORDS = ("", "na", "n/a", "null", "none")
_NAN_WORDS = ("nan", "+nan", "-nan")

CATALYST_COLUMNS = ("catalyst", "name", "family", "molar_mass_g_mol", "sites_per_unit", "metal_wt_pct",
                    "metal_molar_mass_g_mol", "dispersion")
#: optional catalysts.csv column (a key of our own): the id the catalyst had in an earlier campaign
ALIAS_COLUMN = "alias"
PLATE_COLUMNS = ("plate", "format", "temperature_c", "run_date", "notes")
#: what a blank's catalyst cell may hold to say it has none (read as empty; case and padding ignored)
NO_CATALYST_WORDS = frozenset(w for w in NA_WORDS if w) | {"-", "–", "—", "no catalyst", "uncatalysed",
                                                             "uncatalyzed", UNCATALYSED, "(uncatalyzed)"}
LAYOUT_COLUMNS = ("plate", "well", "role", "catalyst", "loading", "loading_unit", "substrate_conc", "volume",
                  "temperature_c")
#: names a factor column may not take (they are columns of the wells frame)
RESERVED_FACTORS = ("row", "col", "substrate_conc_mm", "volume_ul", "analyte", "time", "value")
READING_COLUMNS = ("plate", "well", "time", "value", "analyte")
#: optional layout column: a code unique within the campaign (a vial or injection name), by which
#: readings may name their wells instead of plate + well; a label of the well, not a factor
SAMPLE_COLUMN = "sample"


def unknown_plate_messages(values, plate_ids) -> np.ndarray:
    """For each value (distinct plate cells): the message for a plate id plates.csv does not have,
    naming the id it has that differs only in letter case (plate ids are compared exactly: an
    instrument export that writes ``uv-25`` for ``UV-25`` is told which one was meant)."""
    by_lower: dict[str, list[str]] = {}
    for pid in pd.unique(pd.Series(plate_ids, dtype=object).dropna().astype(str)).tolist():  # a few plates
        by_lower.setdefault(pid.lower(), []).append(pid)
    out = []
    for v in pd.Series(values, dtype=object).tolist():                     # one per distinct cell
        near = by_lower.get(str(v).lower(), []) if isinstance(v, str) else []
        if len(near) == 1 and near[0] != v:
            out.append(f"unknown plate (not in plates.csv; plates.csv has {near[0]!r}: plate ids must match "
                       f"exactly, letter case included)")
        else:
            out.append("unknown plate (not in plates.csv)")
    return np.array(out, dtype=object)


class Distinct:
    """A text column as integer codes into its distinct values, so that elementwise work (lower
    case, membership, lookups, number parsing) runs once per distinct value and is spread back to
    the rows by the codes. ``values`` holds the distinct cells plus one last slot, a missing cell,
    which code -1 (a missing cell in the column) points at."""

    def __init__(self, column: pd.Series):
        codes, uniques = pd.factorize(column, use_na_sentinel=True)
        self.codes = np.asarray(codes, dtype=np.intp)
        uniques = getattr(uniques, "array", uniques)  # an Index for a Series: its array
        arr = getattr(uniques, "_pa_array", None)
        if arr is not None and isinstance(column.dtype, pd.StringDtype):
            arr = pa.concat_arrays([*arr.chunks, pa.nulls(1, arr.type)]) if arr.num_chunks else pa.nulls(1, arr.type)
            self.values = pd.Series(pd.array(arr, dtype=column.dtype), copy=False)
        else:
            distinct = pd.Series(uniques, dtype=column.dtype)
            self.values = pd.concat([distinct, pd.Series([None], dtype=column.dtype)], ignore_index=True)

    def __len__(self) -> int:
        return len(self.codes)

    def spread(self, per_value) -> np.ndarray:
        """Per-distinct-value results (one per ``values`` entry) as one per row."""
        return np.asarray(per_value)[self.codes]

    def isin(self, items) -> np.ndarray:
        """Per distinct value: is it one of ``items``? ``Series.isin`` as pandas computes it for
        Arrow text (the text items, a missing item matching a missing cell), done by one Arrow
        ``is_in`` with the items as an Arrow array (pandas' own path builds the set item by item)."""
        vals = getattr(self.values.array, "_pa_array", None)
        listed = getattr(getattr(items, "array", None), "_pa_array", None)
        if listed is None:
            seq = list(items)
            if vals is not None and all(isinstance(x, str) for x in seq):  # a few words: roles, analytes
                listed = pa.array(seq, type=pa.large_string())
        elif not (pa.types.is_string(listed.type) or pa.types.is_large_string(listed.type)):
            listed = None
        if vals is None or listed is None:
            return self.values.isin(list(items)).to_numpy(dtype=bool)
        if isinstance(listed, pa.ChunkedArray):
            listed = listed.combine_chunks() if listed.num_chunks else pa.array([], type=pa.large_string())
        if len(listed) == 0:
            return np.zeros(len(self.values), dtype=bool)
        hit = pc.is_in(vals, value_set=listed.cast(vals.type))
        return np.asarray(hit.to_numpy(zero_copy_only=False), dtype=bool)

    def lookup(self, mapping: pd.Series) -> np.ndarray:
        """Per distinct value: ``mapping[value]`` as float (NaN when absent; ``Series.map`` with a
        Series of unique index)."""
        pos = mapping.index.get_indexer(self.values)
        return np.append(mapping.to_numpy(dtype=float), np.nan)[pos]

    def take(self, per_value, codes: np.ndarray | None = None) -> pd.api.extensions.ExtensionArray:
        """Per-distinct-value texts as a per-row ``str`` array (``codes`` defaults to the rows' own;
        -1 gives a missing cell)."""
        return pd.array(per_value, dtype="str").take(self.codes if codes is None else codes)


class Checker:
    """Problem collection for one table."""

    def __init__(self, table: RawTable, problems: list[Problem]):
        self.t = table
        self.f = table.frame
        self.rows = table.rows
        self.problems = problems
        self._distinct: dict[str, Distinct] = {}

    @property
    def name(self) -> str:
        return self.t.name

    def col(self, column: str) -> pd.Series:
        if column in self.f.columns:
            return self.f[column]
        return pd.Series(pd.array([""], dtype="str").take(np.zeros(len(self.f), dtype=np.intp)))

    def distinct(self, column: str) -> Distinct:
        """The column (all '' when absent) as a :class:`Distinct`, computed once per checker."""
        if column not in self._distinct:
            self._distinct[column] = Distinct(self.col(column))
        return self._distinct[column]

    def report(self, mask, column: str | None, message, values=None) -> None:
        """One problem per True row of ``mask``; ``message`` is a string or an array of strings."""
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            return
        idx = np.flatnonzero(mask)
        if values is None:
            values = self.col(column).iloc[idx].to_numpy() if column in self.f.columns else None
        else:
            values = np.asarray(values, dtype=object)[idx]
        vals = [None] * len(idx) if values is None else [str(v) for v in values]
        msgs = [message] * len(idx) if isinstance(message, str) else list(np.asarray(message, dtype=object)[idx])
        if self.t.origin is not None:  # a reshaped table: where each cell came from
            files, rows, cols = self.t.origin.locate(column, idx, self.rows)
            self.problems.extend(Problem(str(f), int(r) if r else None, c, v, m)
                                 for f, r, c, v, m in zip(files, rows, cols, vals, msgs))
            return
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

        A column Arrow casts to float64 whole, without a NaN, is taken as it is (no blank, no
        'na' word, no 'nan' spelling can be in it). Otherwise the cells are read once per distinct
        text, by the same element-wise rules, and spread to the rows.
        """
        if column not in self.f.columns:  # every cell blank
            v = np.full(len(self.f), np.nan)
            if required is not None:
                req = np.broadcast_to(np.asarray(required, dtype=bool), v.shape)
                self.report(req, column, what or f"a value is required in '{column}'")
            return v, np.zeros(len(self.f), dtype=bool)
        raw = self.col(column)
        text = raw.str.replace(",", ".", regex=False) if self.t.decimal_comma else raw
        direct = _cast_float(text)
        if direct is not None and not np.isnan(direct).any():
            inf = np.isinf(direct)
            if inf.any():
                self.report(inf, column, "is not a finite number")
                direct[inf] = np.nan
            return direct, ~inf
        d = self.distinct(column)
        u_raw = d.values
        u_text = u_raw.str.replace(",", ".", regex=False) if self.t.decimal_comma else u_raw
        u_low = u_raw.str.lower()
        u_blank = u_low.isin(NA_WORDS).to_numpy()
        u_v = _to_float(u_text, u_blank)
        u_nanword = u_low.isin(_NAN_WORDS).to_numpy()
        blank = d.spread(u_blank)
        self.report(d.spread(~u_blank & np.isnan(u_v) & ~u_nanword), column, "is not a number")
        self.report(d.spread(~u_blank & (np.isinf(u_v) | u_nanword)), column, "is not a finite number")
        v = d.spread(np.where(np.isfinite(u_v), u_v, np.nan))
        if required is not None:
            req = np.broadcast_to(np.asarray(required, dtype=bool), blank.shape)
            self.report(req & blank, column, what or f"a value is required in '{column}'")
        return v, np.isfinite(v)

    def text(self, column: str) -> pd.Series:
        return self.col(column)

    def duplicated(self, keys: list[pd.Series] | pd.Series, valid, column: str, what: str) -> np.ndarray:
        """Report rows repeating an earlier row's key (among ``valid`` rows); returns the mask."""
        valid = np.asarray(valid, dtype=bool)
        idx = np.flatnonzero(valid)
        frame = pd.DataFrame({f"k{i}": (k.reset_index(drop=True).iloc[idx].reset_index(drop=True)
                                        if isinstance(k, pd.Series) else np.asarray(k)[idx])
                              for i, k in enumerate(keys if isinstance(keys, list) else [keys])})
        frame["_row"] = self.rows[idx]
        kcols = [c for c in frame.columns if c != "_row"]
        dup = frame.duplicated(kcols, keep="first").to_numpy()
        if not dup.any():
            return np.zeros(len(self.f), dtype=bool)
        first = frame.groupby(kcols, sort=False)["_row"].transform("first").to_numpy()
        mask = np.zeros(len(self.f), dtype=bool)
        mask[idx[dup]] = True
        msg = np.full(len(self.f), "", dtype=object)
        msg[idx[dup]] = [f"{what} (first on row {int(r)})" for r in first[dup]]
        self.report(mask, column, msg)
        return mask


def _cast_float(text: pd.Series) -> np.ndarray | None:
    """The whole column cast to float64 by Arrow, or None when a cell does not cast (or the column
    is not Arrow text)."""
    arr = getattr(text.array, "_pa_array", None)
    if arr is None:
        return None
    try:
        out = np.asarray(pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False), dtype=np.float64)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError):
        return None
    return out if out.flags.writeable else out.copy()  # the frames get arrays of their own


def _to_float(text: pd.Series, blank: np.ndarray) -> np.ndarray:
    """Cells -> float64 (NaN where blank or not a number), vectorised.

    The whole column is first cast by Arrow (one C pass; blanks as nulls); any cell Arrow cannot
    read makes the whole column fall back to ``pandas.to_numeric(errors="coerce")``, whose reading
    is the reference here. Both accept the same plain decimal / exponent / inf / nan spellings."""
    arr = getattr(text.array, "_pa_array", None)
    if arr is not None:
        try:
            cast = pc.cast(pc.if_else(pa.array(blank), None, arr), pa.float64())
            return np.array(cast.to_numpy(zero_copy_only=False), dtype=np.float64)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError):
            pass
    v = np.array(pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan))
    v[blank] = np.nan
    return v


def parse_names(names: pd.Series, cache: dict | None = None) -> pd.DataFrame:
    """:func:`screenlab.plates.parse_wells` of distinct well names (missing as ''), with ``cache``
    (name -> parsed well, row, col) shared by the tables of one campaign, so a name the layout
    parsed is not parsed again for the readings."""
    texts = names.fillna("").tolist()
    if cache is None:
        return platelib.parse_wells(np.asarray(texts, dtype=object))
    todo = list(dict.fromkeys(t for t in texts if t not in cache))
    if todo:
        parsed = platelib.parse_wells(np.asarray(todo, dtype=object))
        cache.update(zip(todo, zip(parsed["well"].tolist(), parsed["row"].tolist(), parsed["col"].tolist())))
    well, row, col = zip(*(cache[t] for t in texts)) if texts else ((), (), ())
    return pd.DataFrame({"well": np.array(well, dtype=object), "row": np.array(row, dtype=np.int64),
                         "col": np.array(col, dtype=np.int64)})


def _temperature(ch: Checker, column: str, v: np.ndarray, ok: np.ndarray) -> None:
    below0 = ok & (v < ABSOLUTE_ZERO_C)
    ch.report(below0, column, "temperature below absolute zero (-273.15 degC)")
    ch.report(ok & ~below0 & ((v < T_MIN_C) | (v > T_MAX_C)), column,
              f"temperature outside the plausible range for well plates and vial blocks "
              f"({T_MIN_C:g} to {T_MAX_C:g} degC); is it in kelvin or fahrenheit?")


def _str_or_na(s: pd.Series) -> pd.Series:
    return s.where(s != "", None).astype("str")


def extra_columns_note(ch: Checker, known) -> list[str]:
    extra = [c for c in ch.f.columns if c not in known]
    if extra:
        return [f"{ch.name}: column{'s' if len(extra) > 1 else ''} {', '.join(extra)} not used"]
    return []


# --------------------------------------------------------------------------- catalysts
def check_catalysts(table: RawTable, problems: list[Problem]) -> tuple[pd.DataFrame, list[str]]:
    ch = Checker(table, problems)
    notes = extra_columns_note(ch, CATALYST_COLUMNS + (ALIAS_COLUMN,))
    if not ch.require_columns(["catalyst"]):
        return _empty_catalysts(), notes
    cid = ch.text("catalyst")
    missing = (cid == "").to_numpy()
    ch.report(missing, "catalyst", "a catalyst id is required")
    ch.duplicated(cid, ~missing, "catalyst", "duplicate catalyst id")
    ch.report((cid.str.strip().str.lower() == UNCATALYSED).to_numpy(), "catalyst",
              f"'{UNCATALYSED}' is reserved for the background (blank) rows of the analysis; give the catalyst "
              "another id")
    out = {"catalyst": cid.astype("str")}
    name = ch.text("name")
    out["name"] = name.where(name != "", cid).astype("str")
    out["family"] = ch.text("family").astype("str")
    mm, mm_ok = ch.number("molar_mass_g_mol")
    ch.report(mm_ok & (mm <= 0), "molar_mass_g_mol", "molar mass must be > 0 g/mol")
    spu, spu_ok = ch.number("sites_per_unit")
    ch.report(spu_ok & (spu <= 0), "sites_per_unit", "sites_per_unit must be > 0")
    wt, wt_ok = ch.number("metal_wt_pct")
    ch.report(wt_ok & ((wt <= 0) | (wt > 100)), "metal_wt_pct", "metal_wt_pct must be > 0 and <= 100 (% by mass)")
    mmm, mmm_ok = ch.number("metal_molar_mass_g_mol")
    ch.report(mmm_ok & (mmm <= 0), "metal_molar_mass_g_mol", "metal molar mass must be > 0 g/mol")
    mmm_blank = ch.text("metal_molar_mass_g_mol").str.lower().isin(NA_WORDS).to_numpy()
    ch.report(wt_ok & mmm_blank, "metal_molar_mass_g_mol",
              "metal_wt_pct is given, so metal_molar_mass_g_mol is needed too", values=wt)
    disp, disp_ok = ch.number("dispersion")
    ch.report(disp_ok & ((disp <= 0) | (disp > 1)), "dispersion",
              "dispersion must be in (0, 1] (fraction of metal atoms at the surface)")
    out["molar_mass_g_mol"] = mm
    out["sites_per_unit"] = np.where(np.isnan(spu), 1.0, spu)
    out["metal_wt_pct"] = wt
    out["metal_molar_mass_g_mol"] = mmm
    out["dispersion"] = np.where(np.isnan(disp), 1.0, disp)
    if ALIAS_COLUMN in ch.f.columns:  # only when the file has it, so older campaigns keep their frame
        alias = ch.text(ALIAS_COLUMN)
        given = (alias != "").to_numpy()
        ch.report(given & (alias == cid).to_numpy(), ALIAS_COLUMN,
                  "the alias (the id this catalyst had before) is the catalyst's own id")
        ch.report(given & (alias != cid).to_numpy() & alias.isin(set(cid[~missing])).to_numpy(), ALIAS_COLUMN,
                  "the alias is the id of another catalyst in this file; an alias names the id this catalyst "
                  "had in an earlier campaign")
        out[ALIAS_COLUMN] = _str_or_na(alias)
    return pd.DataFrame(out).reset_index(drop=True), notes


def _empty_catalysts() -> pd.DataFrame:
    return schema.empty_frame(schema.CATALYSTS)


def _empty_plates() -> pd.DataFrame:
    return schema.empty_frame(schema.PLATES)


def _empty_wells() -> pd.DataFrame:
    return schema.empty_frame(schema.WELLS)


# --------------------------------------------------------------------------- plates
def check_plates(table: RawTable, problems: list[Problem]) -> tuple[pd.DataFrame, list[str]]:
    ch = Checker(table, problems)
    notes = extra_columns_note(ch, PLATE_COLUMNS)
    ch.require_columns(["plate", "format", "temperature_c"])
    pid = ch.text("plate")
    if "plate" in ch.f.columns:
        missing = (pid == "").to_numpy()
        ch.report(missing, "plate", "a plate id is required")
        ch.duplicated(pid, ~missing, "plate", "duplicate plate id")
    fmt = np.zeros(len(pid), dtype=np.int64)
    if "format" in ch.f.columns:
        fv, fok = ch.number("format", required=True, what="a format is required (24, 48, 96 or 384)")
        good = fok & np.isin(fv, list(platelib.FORMATS))
        ch.report(fok & ~good, "format",
                  "format must be 24, 48, 96 or 384 wells (4x6, 6x8, 8x12, 16x24; ANSI/SLAS 4-2004 layouts)")
        fmt = np.where(good, fv, 0).astype(np.int64)
    t = np.full(len(pid), np.nan)
    if "temperature_c" in ch.f.columns:
        t, tok = ch.number("temperature_c", required=True, what="a plate temperature is required (degC)")
        _temperature(ch, "temperature_c", t, tok)
    rd = ch.text("run_date")
    if "run_date" in ch.f.columns:
        given = (rd != "").to_numpy()
        parsed = pd.to_datetime(rd.where(rd != "", None), format="ISO8601", errors="coerce")
        ch.report(given & parsed.isna().to_numpy(), "run_date", "run_date must be an ISO date (YYYY-MM-DD)")
        iso = parsed.dt.strftime("%Y-%m-%d")
        rd = rd.where(~parsed.notna(), iso)
    nr, nc = platelib.format_dims(fmt)
    frame = pd.DataFrame({
        "plate": pid.astype("str"), "format": fmt, "n_rows": nr.astype(np.int64), "n_cols": nc.astype(np.int64),
        "temperature_c": t, "run_date": _str_or_na(rd), "notes": _str_or_na(ch.text("notes")),
    })
    return frame.reset_index(drop=True), notes


# --------------------------------------------------------------------------- layout
def _text_ranks(values: pd.Series) -> np.ndarray:
    """Rank of each entry of ``values`` in code-point order, missing entries after all texts (as
    ``sort_values`` orders a text column), ties sharing a rank."""
    present = values.notna().to_numpy(dtype=bool)
    ranks = np.full(len(values), 0, dtype=np.int64)
    texts = values[present].astype(str).tolist()
    order = sorted(range(len(texts)), key=texts.__getitem__)  # distinct values, not rows
    r = np.empty(len(texts), dtype=np.int64)
    r[order] = np.arange(len(texts), dtype=np.int64)
    ranks[present] = r
    ranks[~present] = len(texts)
    return ranks


def check_layout(table: RawTable, problems: list[Problem], *, plates: pd.DataFrame | None,
                 catalysts: pd.DataFrame | None,
                 conc_factor: float | None, volume_factor: float | None,
                 well_names: dict | None = None) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """Validate layout.csv against plates and catalysts; returns (wells frame, factor names).

    ``plates`` / ``catalysts`` None (their file could not be read) skips the cross-checks with them;
    ``well_names`` is a cache of parsed well names (see :func:`parse_names`).

    Text columns are handled as codes into their distinct values (:class:`Distinct`): every
    element-wise test, lookup and conversion runs once per distinct cell and is spread to the rows.
    """
    ch = Checker(table, problems)
    check_plate_ids = plates is not None
    check_catalyst_ids = catalysts is not None
    plates = plates if plates is not None else _empty_plates()
    catalysts = catalysts if catalysts is not None else _empty_catalysts()
    f = ch.f
    ch.require_columns(["plate", "well", "role", "substrate_conc", "volume"])
    n = len(f)
    # roles
    rd = ch.distinct("role")
    role_u = rd.values.str.lower()
    if "role" in f.columns:
        ch.report(rd.spread((role_u == "").to_numpy()), "role", "a role is required: sample, blank, reference or empty")
        ch.report(rd.spread(((role_u != "") & ~role_u.isin(ROLES)).to_numpy()), "role",
                  "unknown role; expected sample, blank, reference or empty")
    is_cat = rd.spread(role_u.isin(("sample", "reference")).to_numpy())
    is_blank = rd.spread((role_u == "blank").to_numpy())
    is_empty = rd.spread((role_u == "empty").to_numpy())
    is_used = rd.spread(role_u.isin(("sample", "reference", "blank")).to_numpy())
    if is_cat.any():
        missing = [c for c in ("catalyst", "loading", "loading_unit") if c not in f.columns]
        if missing:
            ch.whole(", ".join(missing), f"sample and reference wells need the column{'s' if len(missing) > 1 else ''} "
                                        f"{', '.join(missing)}")
    # plate and well
    pd_ = ch.distinct("plate")
    plate_fmt = dict(zip(plates["plate"], plates["format"]))
    pid_u = pd_.values
    known_plate = pd_.spread(pd_.isin(plate_fmt))
    pid_blank = pd_.spread((pid_u == "").to_numpy())
    if "plate" in f.columns:
        ch.report(pid_blank, "plate", "a plate id is required")
        if check_plate_ids:
            ch.report(pd_.spread((pid_u != "").to_numpy()) & ~known_plate, "plate",
                      pd_.spread(unknown_plate_messages(pid_u, plates["plate"])))
    wd = ch.distinct("well")
    parsed_u = parse_names(wd.values, well_names)
    well_u = parsed_u["well"].astype("str")
    well_ok = wd.spread(well_u.notna().to_numpy())
    if "well" in f.columns:
        ch.report(~well_ok, "well", "not a well name (expected a row letter and a column number, e.g. A1 or a01)")
    fmt = pd_.spread(np.array([plate_fmt.get(p, 0) if not pd.isna(p) else 0 for p in pid_u.tolist()], dtype=np.int64))
    nr, nc = platelib.format_dims(fmt)
    row = wd.spread(parsed_u["row"].to_numpy(dtype=np.int64))
    col = wd.spread(parsed_u["col"].to_numpy(dtype=np.int64))
    outside = well_ok & known_plate & (fmt > 0) & ((row >= nr) | (col >= nc))
    if outside.any():  # messages built for the failing rows only
        last = np.array(list(platelib.ROW_LETTERS))[np.clip(nr - 1, 0, 15)]
        msg = np.full(n, "", dtype=object)
        idx = np.flatnonzero(outside)
        msg[idx] = [f"well outside the plate's {a}-well format (rows A-{b}, columns 1-{c})"
                    for a, b, c in zip(fmt[idx], last[idx], nc[idx])]
        ch.report(outside, "well", msg)
    # canonical well names: distinct raw name -> code of its canonical name (-1: not a well)
    canon_of_u, canon = pd.factorize(well_u, use_na_sentinel=True)
    canon_code = wd.spread(canon_of_u)
    placed = well_ok & ~pid_blank
    key = pd_.codes.astype(np.int64) * (len(canon) + 1) + (canon_code + 1)  # one int per (plate, well)
    ch.duplicated([key], placed, "well", "duplicate well in the layout")
    # catalyst
    cd = ch.distinct("catalyst")
    cat_u = cd.values
    has_cat = cd.spread((cat_u != "").to_numpy())
    if "catalyst" in f.columns:
        ch.report(is_cat & ~has_cat, "catalyst", "a sample or reference well needs a catalyst")
        if check_catalyst_ids:
            ch.report(is_cat & has_cat & ~cd.spread(cd.isin(catalysts["catalyst"])), "catalyst",
                      "unknown catalyst (not in catalysts.csv)")
        # a blank's cell may say it has none ("-", "none", the background's own name): read as empty
        says_none = cd.spread(cat_u.str.strip().str.lower().isin(NO_CATALYST_WORDS).to_numpy())
        ch.report(is_blank & has_cat & ~says_none, "catalyst",
                  "a blank well must not name a catalyst (a blank is everything but the catalyst)")
    loading = np.full(n, np.nan)
    if "loading" in f.columns:
        loading, lok = ch.number("loading", required=is_cat, what="a sample or reference well needs a loading")
        ch.report(is_cat & lok & (loading <= 0), "loading", "loading must be > 0")
    ud = ch.distinct("loading_unit")  # normalise the few distinct unit words, not every row
    lu_u = np.array([None if u is None or (isinstance(u, float) and np.isnan(u)) else units.normalise_loading_unit(u)
                     for u in ud.values.iloc[:-1].tolist()] + [None], dtype=object)
    lu_blank = ud.spread((ud.values == "").to_numpy())
    lu_none = ud.spread(pd.isna(lu_u))
    if "loading_unit" in f.columns:
        ch.report(is_cat & lu_blank, "loading_unit",
                  "a sample or reference well needs a loading_unit (umol, mg or mol%)")
        ch.report(is_cat & ~lu_blank & lu_none, "loading_unit",
                  "unknown loading unit; expected umol, mg or mol%")
    lu_mg = ud.spread(lu_u == "mg")
    lu_molpct = ud.spread(lu_u == "mol%")
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
        mm = cd.spread(cd.lookup(cinfo["molar_mass_g_mol"]))
        wt = cd.spread(cd.lookup(cinfo["metal_wt_pct"]))
        mmm = cd.spread(cd.lookup(cinfo["metal_molar_mass_g_mol"]))
        known_cat = cd.spread(cd.isin(cinfo.index))
        mg = is_cat & known_cat & lu_mg
        ch.report(mg & np.isnan(mm) & ~(np.isfinite(wt) & np.isfinite(mmm)), "loading_unit",
                  "an mg loading needs molar_mass_g_mol, or metal_wt_pct and metal_molar_mass_g_mol, "
                  "for this catalyst in catalysts.csv")
    molpct = is_cat & lu_molpct
    ch.report(molpct & ~(conc > 0), "loading_unit",
              "a mol% loading needs a substrate_conc > 0 (mol% is relative to the substrate)")
    # temperature override
    tw = np.full(n, np.nan)
    if "temperature_c" in f.columns:
        tw, twok = ch.number("temperature_c")
        _temperature(ch, "temperature_c", tw, twok)
    plate_temp = dict(zip(plates["plate"], plates["temperature_c"]))
    plate_t = pd_.spread(np.array([plate_temp.get(p, np.nan) if not pd.isna(p) else np.nan for p in pid_u.tolist()],
                                  dtype=float))
    temp = np.where(np.isfinite(tw), tw, plate_t)
    # sample codes (optional): one code names one well of the campaign
    has_sample = SAMPLE_COLUMN in f.columns
    if has_sample:
        code = ch.text(SAMPLE_COLUMN)
        ch.duplicated(code, (code != "").to_numpy(), SAMPLE_COLUMN,
                      "duplicate sample code (a code names one well of the campaign)")
    # factors
    factors = [c for c in f.columns if c not in LAYOUT_COLUMNS and c != SAMPLE_COLUMN]
    for c in factors:
        if c in RESERVED_FACTORS:
            ch.whole(c, f"'{c}' cannot be a factor column name (it is a reserved column of the wells table); rename it")
    cf = conc_factor if conc_factor is not None else np.nan
    vf = volume_factor if volume_factor is not None else np.nan
    # rows sorted by plate (text order, missing last), row, col; stable
    p_rank = pd_.spread(_text_ranks(pid_u))
    presorted = _nondecreasing([p_rank, row, col])  # a layout written plate by plate, row by row
    order = None if presorted else np.lexsort((col, row, p_rank))

    def ordered(x: np.ndarray) -> np.ndarray:
        return x if order is None else x[order]

    p_codes, w_codes, r_codes, c_codes, u_codes = (ordered(d.codes) for d in (pd_, wd, rd, cd, ud))
    cat_keep, unit_keep = ordered(is_cat & has_cat), ordered(is_cat)
    plate_text = f["plate"] if "plate" in f.columns else None
    out = pd.DataFrame({
        "plate": (plate_text.array if order is None and plate_text is not None and plate_text.dtype == "str"
                  else pd_.take(pid_u, p_codes)),
        "well": wd.take(well_u, w_codes),
        "row": ordered(row),
        "col": ordered(col),
        "role": rd.take(role_u, r_codes),
        "catalyst": cd.take(cat_u, np.where(cat_keep, c_codes, -1)),
        "loading": ordered(np.where(is_cat, loading, np.nan)),
        "loading_unit": ud.take(lu_u, np.where(unit_keep, u_codes, -1)),
        "substrate_conc_mM": ordered(np.where(is_empty, np.nan, conc * cf)),
        "volume_uL": ordered(np.where(is_empty, np.nan, vol * vf)),
        "temperature_c": ordered(temp),
    })
    for c in factors:
        out[c] = ordered(f[c].astype("str").to_numpy())
    if has_sample:  # not a factor: a label of the well (kept, shown, used to match sample-named readings)
        out[SAMPLE_COLUMN] = pd.array(ordered(_str_or_na(f[SAMPLE_COLUMN]).to_numpy(dtype=object)), dtype="str")
    return out, tuple(factors)


def _nondecreasing(keys: list[np.ndarray]) -> bool:
    """Rows already in lexicographic order of integer ``keys`` (primary first), so that a stable
    sort would leave them where they are."""
    if not len(keys[0]):
        return True
    undecided = np.ones(len(keys[0]) - 1, dtype=bool)
    for k in keys:
        a, b = k[:-1], k[1:]
        if (undecided & (a > b)).any():
            return False
        undecided &= a == b
    return True


# --------------------------------------------------------------------------- readings
def _fold(keys: list[tuple[np.ndarray, int]]) -> np.ndarray | None:
    """Small non-negative integer keys (each with its number of values) folded into one int64 whose
    numeric order is their lexicographic order (mixed radix), or None when it would not fit."""
    span = 1
    for _, size in keys:
        span *= max(int(size), 1)
    if span >= 2 ** 62:
        return None
    out = np.array(keys[0][0], dtype=np.int64)
    for k, size in keys[1:]:
        np.multiply(out, max(int(size), 1), out=out)
        np.add(out, k, out=out)
    return out


def _sort_rows(group: np.ndarray, time: np.ndarray) -> np.ndarray:
    """``np.lexsort((time, group))``: a stable sort by group; the time sort is skipped when every
    group's times already come in order (NaN after numbers, as lexsort puts them)."""
    order = np.argsort(group, kind="stable")
    g, t = group[order], time[order]
    same = g[1:] == g[:-1]
    a, b = t[:-1], t[1:]
    back = (a > b) | (np.isnan(a) & ~np.isnan(b))
    if (same & back).any():
        return np.lexsort((time, group))
    return order


def _index_of(index: pd.Index, values: pd.Series) -> np.ndarray:
    """``index.get_indexer(values)`` looked up once per distinct value of ``values``."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    pos = index.get_indexer(pd.Index(uniques))
    return np.append(pos, index.get_indexer(pd.Index([None], dtype=values.dtype)))[codes]


def check_readings(table: RawTable, problems: list[Problem], *, wells: pd.DataFrame | None,
                   plates: pd.DataFrame | None, info: dict,
                   well_names: dict | None = None) -> tuple[pd.DataFrame, list[str]]:
    """Validate readings.csv against the layout and the manifest (``info`` from parse_manifest).

    ``wells`` / ``plates`` None (their file could not be read) skips the cross-checks with them.

    Plates, wells and analytes are integer codes over their distinct texts (:class:`Distinct`):
    the checks, the layout lookup, the duplicate test and the final sort work on the codes, never
    on per-row strings. Duplicates are found from the sorted rows (equal plate, well, analyte and
    time are neighbours there); only the few rows in such runs go through the exact test.
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
    pd_ = ch.distinct("plate")
    p_codes = pd_.codes
    p_u = pd_.values
    known_plate = pd_.spread(pd_.isin(plates["plate"]))
    p_blank = pd_.spread((p_u == "").to_numpy())
    if "plate" in f.columns:
        ch.report(p_blank, "plate", "a plate id is required")
        if check_plate_ids:
            ch.report(~p_blank & ~known_plate, "plate", pd_.spread(unknown_plate_messages(p_u, plates["plate"])))
    wd = ch.distinct("well")
    w_name = parse_names(wd.values, well_names)["well"].astype("str")
    c_of_w, c_uniq = pd.factorize(w_name, use_na_sentinel=True)  # distinct raw name -> canonical name code
    c_codes = wd.spread(c_of_w)  # per row; -1: not a well name
    well_ok = c_codes >= 0
    if "well" in f.columns:
        ch.report(~well_ok, "well", "not a well name (expected a row letter and a column number, e.g. A1 or a01)")
    # layout (plate, well) -> role of its first row, as one int64 key per layout row and per reading
    n_p, n_c = len(p_u), max(len(c_uniq), 1)
    lay_p = _index_of(pd.Index(p_u.iloc[:-1]), wells["plate"].astype("str"))
    lay_c = _index_of(pd.Index(c_uniq), wells["well"].astype("str"))
    lay_ok = (lay_p >= 0) & (lay_c >= 0)
    keys = lay_p[lay_ok].astype(np.int64) * n_c + lay_c[lay_ok]
    first = ~pd.Index(keys).duplicated(keep="first")
    lay_key = keys[first]
    lay_empty = (wells["role"] == "empty").to_numpy(dtype=bool)[np.flatnonzero(lay_ok)[first]]
    placed = well_ok & (p_codes >= 0)
    row_key = p_codes.astype(np.int64)
    np.multiply(row_key, n_c, out=row_key)
    np.add(row_key, c_codes, out=row_key)
    row_key[~placed] = 0
    if n_p * n_c <= max(4 * (n + len(wells)), 1 << 20):  # direct address table
        slot = np.full(n_p * n_c, -1, dtype=np.int64)
        slot[lay_key] = np.arange(len(lay_key))
        hit = slot[row_key]
    else:  # sparse key space: binary search
        srt = np.argsort(lay_key)
        pos = np.clip(np.searchsorted(lay_key[srt], row_key), 0, max(len(lay_key) - 1, 0))
        hit = np.where(lay_key[srt][pos] == row_key, srt[pos], -1) if len(lay_key) else np.full(n, -1)
    in_layout = placed & (hit >= 0)
    check_place = known_plate & well_ok & check_wells
    ch.report(check_place & ~in_layout, "well", "reading for a well that is not in layout.csv")
    on_empty = in_layout & lay_empty[np.maximum(hit, 0)] if len(lay_key) else np.zeros(n, dtype=bool)
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
    if "analyte" in f.columns:
        ad = ch.distinct("analyte")
        a_u = ad.values
        seen = np.bincount(ad.codes % len(a_u), minlength=len(a_u)) > 0 if n else np.zeros(len(a_u), dtype=bool)
        if not declared:
            ch.whole("analyte", "readings have an analyte column but campaign.toml declares no [analytes] table")
        ch.report(ad.spread((a_u == "").to_numpy()), "analyte", "an analyte name is required")
        n_names = int((seen & (a_u != "").to_numpy()).sum())
        if kind in ("conversion", "absorbance") and n_names > 1:
            ch.whole("analyte", f"a {kind} readout gives one value per well and time, but the readings name "
                                f"{n_names} analytes; several analytes need a yield or product_conc readout")
        if declared:
            main = info.get("main", DEFAULT_ANALYTE)
            byp = tuple(info.get("byproducts") or ())
            en = info.get("enantiomers")
            allowed = ({main} if not en else set()) | set(byp) | set(en or ())
            listed = ", ".join(sorted(allowed))
            unknown = (a_u != "").to_numpy() & ~ad.isin(allowed)
            if en:
                is_main = (a_u == main).to_numpy()
                ch.report(ad.spread(is_main), "analyte",
                          f"'{main}' is the sum of the enantiomers {en[0]} and {en[1]} and has no readings of its "
                          "own; read the two enantiomers instead")
                unknown &= ~is_main
                for e in en:  # two names
                    if not (seen & (a_u == e).to_numpy()).any():
                        ch.whole("analyte", f"enantiomer '{e}' is declared in campaign.toml but never read", e)
            ch.report(ad.spread(unknown), "analyte", f"unknown analyte; campaign.toml [analytes] declares {listed}")
        a_codes, a_u_out = ad.codes, a_u
    else:
        if declared:
            ch.whole("analyte", "campaign.toml declares [analytes], so readings.csv needs an analyte column")
        a_codes = np.zeros(n, dtype=np.intp)
        a_u_out = pd.Series([DEFAULT_ANALYTE, None], dtype="str")
    tf = info.get("time_factor")
    time_h = t * (tf if tf is not None else np.nan)
    # sort by plate, well, analyte, time_h (text in code-point order, missing last; stable), as
    # DataFrame.sort_values would, from the ranks of the distinct texts
    p_rank = _text_ranks(p_u)[p_codes]
    c_rank = _text_ranks(pd.concat([pd.Series(c_uniq, dtype="str"), pd.Series([None], dtype="str")],
                                   ignore_index=True))[c_codes]
    a_rank = _text_ranks(a_u_out)[a_codes]
    group = _fold([(p_rank, n_p), (c_rank, len(c_uniq) + 1), (a_rank, len(a_u_out))]) if n else None
    if not n:
        order = np.zeros(0, dtype=np.intp)
    elif group is None:
        order = np.lexsort((time_h, a_rank, c_rank, p_rank))
    else:
        order = _sort_rows(group, time_h)
    # duplicates: rows with the same plate, well, analyte and time share (group, time_h), so they
    # are neighbours in the sorted order; the exact test runs on the rows of such runs only
    valid = tok & well_ok & ~p_blank
    if group is not None and tf is not None and np.isfinite(tf) and tf > 0:
        g, th = group[order], time_h[order]
        tie = (g[1:] == g[:-1]) & (th[1:] == th[:-1])
        run = np.zeros(n, dtype=bool)
        run[1:] |= tie
        run[:-1] |= tie
        candidate = np.zeros(n, dtype=bool)
        candidate[order] = run
        valid &= candidate
    ch.duplicated([p_codes, c_codes, a_codes, t], valid, "time",
                  "duplicate reading for the same plate, well, analyte and time")
    # rows already grouped by plate in text order keep their plate cells (the sort moves rows
    # only within a plate), so the column is the file's own
    plate_text = f["plate"] if "plate" in f.columns else None
    same_plates = plate_text is not None and plate_text.dtype == "str" and _nondecreasing([p_rank])
    out = pd.DataFrame({
        "plate": plate_text.array if same_plates else pd_.take(p_u, p_codes[order]),
        "well": wd.take(w_name, wd.codes[order]),
        "analyte": pd.array(a_u_out, dtype="str").take(a_codes[order]),
        "time_h": time_h[order],
        "value": v[order],
    })
    return out, notes
