"""Active sites in a well (umol), following campaign-format.md "Active sites in a well".

========================  ====================================================================
loading_unit              sites_umol
========================  ====================================================================
``umol``                  loading x sites_per_unit
``mg`` (metal_wt_pct)     loading x metal_wt_pct/100 / metal_molar_mass_g_mol x 1000 x dispersion
``mg`` (otherwise)        loading / molar_mass_g_mol x 1000 x sites_per_unit
``mol%``                  loading/100 x substrate_conc_mM x volume_uL x 1e-3 x sites_per_unit
========================  ====================================================================

(mg / (g/mol) = mmol, hence x 1000 for umol; mM x uL = nmol, hence x 1e-3 for umol.) The
``site_basis`` column says which denominator was used: ``per_unit`` (formula units times
sites_per_unit) or ``surface_metal`` (metal atoms times dispersion). With dispersion absent (1)
the surface-metal count is the total metal, so the TOF is a lower bound of the per-site TOF.

This module also holds :func:`join_flags`, the small vectorised helper the kinetics modules use to
build their ``;``-joined flag columns.
"""
from __future__ import annotations

import copy
from collections.abc import Mapping

import numpy as np
import pandas as pd

from screenlab import units
from screenlab._groups import FlagIndex

#: flag codes set here (code -> one plain sentence)
FLAGS: dict[str, str] = {
    "unknown_catalyst": "The well names a catalyst that is not in catalysts.csv, so its sites are unknown.",
    "no_loading": "The well has no usable loading or loading unit, so its sites are unknown.",
    "missing_molar_mass": "Loading in mg but the catalyst has no molar mass (nor metal content), so sites are unknown.",
    "missing_metal_molar_mass": "metal_wt_pct is given without metal_molar_mass_g_mol, so sites are unknown.",
    "no_substrate": "Loading in mol% but the well has no substrate amount, so sites are unknown.",
}


def text_array(words, codes):
    """``words[codes]`` as the column a frame makes of that object array (pandas infers the column
    type from the distinct words), built by one take instead of one string conversion per row."""
    words = np.asarray(words, dtype=object)
    codes = np.asarray(codes, dtype=np.intp)
    if not len(codes) or not len(words):
        return words[codes]                   # empty: an object column, as before
    return pd.Series(words, copy=False).array.take(codes)


def with_columns(frame: pd.DataFrame, new: dict) -> pd.DataFrame:
    """A new frame: ``frame``'s columns (those named in ``new`` replaced in place) then the other
    columns of ``new`` in order, as successive ``out[c] = v`` on a copy would give; ``frame`` is not
    changed (no deep copy: pandas copy-on-write keeps the shared columns apart)."""
    out = frame.copy(deep=False)
    for c in [c for c in new if c in frame.columns]:
        out[c] = new[c]
    fresh = {c: v for c, v in new.items() if c not in frame.columns}
    if fresh:
        attrs = copy.deepcopy(frame.attrs)
        out = pd.concat([out, pd.DataFrame(fresh, index=out.index)], axis=1)
        out.attrs = attrs
    return out


def frame_of(frame: pd.DataFrame, cols, rows: np.ndarray | None, new: dict) -> pd.DataFrame:
    """One new frame (default index): ``frame[cols]`` at positions ``rows`` (all when None), then the
    columns of ``new`` (one named like a taken column replaces it in place), built in one go.
    The frame's ``attrs`` are kept."""
    data = {}
    at = None
    for c in cols:
        s = frame[c]
        if isinstance(s.dtype, np.dtype):
            v = s.to_numpy()
            data[c] = v if rows is None else v[rows]
            continue
        arr = s.array
        if rows is None:
            data[c] = arr
        elif isinstance(arr, pd.arrays.ArrowStringArray):
            import pyarrow as pa
            at = pa.array(rows) if at is None else at          # the positions converted once
            data[c] = type(arr)(arr._pa_array.take(at), dtype=arr.dtype)
        else:
            data[c] = arr.take(rows)
    data.update(new)
    out = pd.DataFrame(data)
    out.attrs = copy.deepcopy(frame.attrs)
    return out


def join_flags(existing, masks: Mapping[str, np.ndarray], index=None) -> pd.Series:
    """Append flag codes to an existing ``;``-joined flag column, vectorised.

    ``existing`` is a Series of strings (NA/empty for none) or None; ``masks`` maps each code to a
    boolean array (a loop over a few codes, never over rows). Codes already present are not
    repeated. Returns a new object-dtype Series of str.
    """
    if existing is None:
        n = len(next(iter(masks.values()))) if masks else len(index)
        fi = FlagIndex(None, n=n)
    else:
        fi = FlagIndex(existing)
        if index is None:
            index = pd.Series(existing, copy=False).index
    return pd.Series(fi.join(masks), index=index, dtype=object)


def has_flag(flags, code: str) -> np.ndarray:
    """Boolean array: which rows of a ``;``-joined flag column carry ``code``."""
    return FlagIndex(flags).has(code)


def _num(frame: pd.DataFrame, col: str, default: float = np.nan) -> np.ndarray:
    if col not in frame.columns:
        return np.full(len(frame), default, dtype=float)
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)


def active_sites(wells: pd.DataFrame, catalysts: pd.DataFrame) -> pd.DataFrame:
    """Active sites of each well.

    ``wells`` needs ``catalyst, loading, loading_unit, substrate_conc_mM, volume_uL``;
    ``catalysts`` is :attr:`CampaignData.catalysts`. Returns a new frame with the index of
    ``wells`` and columns ``sites_umol`` (float, NaN when unknown or for wells without catalyst),
    ``site_basis`` (``per_unit`` | ``surface_metal`` | ``""``) and ``site_flags`` (codes of
    :data:`FLAGS`). Inputs are not changed.
    """
    sites, basis, (flag_words, flag_codes) = site_arrays(wells, catalysts)
    basis_col = text_array(BASIS_WORDS, basis) if len(wells) else np.zeros(0, dtype=str)
    return pd.DataFrame({"sites_umol": sites, "site_basis": basis_col,
                         "site_flags": text_array(flag_words, flag_codes)}, index=wells.index)


#: ``site_basis`` words by the codes :func:`site_arrays` returns
BASIS_WORDS = ("", "per_unit", "surface_metal")


def site_arrays(wells: pd.DataFrame, catalysts: pd.DataFrame, factorized=None):
    """:func:`active_sites` as arrays: ``sites_umol`` (float), the ``site_basis`` code per well
    (into :data:`BASIS_WORDS`) and the site flags as (distinct texts, code per well).
    ``factorized`` may hold ``pd.factorize`` of the ``catalyst`` / ``loading_unit`` columns."""
    factorized = factorized or {}
    n = len(wells)
    idx = wells.index
    # distinct catalyst names once (Arrow-fast), then one lookup per name
    if "catalyst" in factorized:
        cat_codes, cat_names = factorized["catalyst"]
    else:
        cat_codes, cat_names = (pd.factorize(wells["catalyst"]) if "catalyst" in wells
                                else (np.full(n, -1, dtype=np.int64), pd.Index([], dtype=object)))
    cat_codes = np.asarray(cat_codes, dtype=np.int64)
    has_cat = cat_codes >= 0
    # catalyst row per well by one index lookup over the distinct names (no merge); a name listed
    # twice in catalysts.csv takes its first row
    listed = pd.Index(catalysts["catalyst"] if "catalyst" in catalysts.columns else [], dtype=None)
    first_rows = np.arange(len(listed))
    if not listed.is_unique:
        first_rows = np.flatnonzero(~listed.duplicated(keep="first"))
        listed = listed[first_rows]
    name_pos = listed.get_indexer(cat_names) if len(listed) else np.full(len(cat_names), -1)
    pos = np.where(has_cat, np.append(name_pos, -1)[cat_codes], -1)
    known = pos >= 0
    row = first_rows[np.maximum(pos, 0)] if len(first_rows) else np.zeros(n, dtype=np.int64)

    def per_well(col: str) -> np.ndarray:
        v = _num(catalysts, col)
        return np.where(known, v[row], np.nan) if v.size else np.full(n, np.nan)

    mm = per_well("molar_mass_g_mol")
    spu = per_well("sites_per_unit")
    spu = np.where(np.isfinite(spu), spu, 1.0)
    wt = per_well("metal_wt_pct")
    metal_mm = per_well("metal_molar_mass_g_mol")
    disp = per_well("dispersion")
    disp = np.where(np.isfinite(disp), disp, 1.0)

    loading = _num(wells, "loading")
    unit_raw = wells["loading_unit"] if "loading_unit" in wells else pd.Series([None] * n, index=idx)
    u_codes, u_words = factorized["loading_unit"] if "loading_unit" in factorized else pd.factorize(unit_raw)
    normal = []
    for w in u_words:                                  # distinct words, not rows
        w = str(w).strip().lower().replace("µ", "u").replace("μ", "u").replace(" ", "")
        normal.append((units.normalise_loading_unit(w) or "") if w else "")
    unit_words = np.array(normal + [""], dtype=object)
    u_codes = np.asarray(u_codes, dtype=np.int64)
    conc = _num(wells, "substrate_conc_mM")
    vol = _num(wells, "volume_uL")

    is_umol = (unit_words == "umol")[u_codes]            # compared per distinct word, not per row
    is_mg = (unit_words == "mg")[u_codes]
    is_pct = (unit_words == "mol%")[u_codes]
    metal = is_mg & np.isfinite(wt)
    with np.errstate(invalid="ignore", divide="ignore"):
        s_umol = loading * spu
        s_mg_unit = loading / mm * 1000.0 * spu
        s_mg_metal = loading * wt / 100.0 / metal_mm * 1000.0 * disp
        s_pct = loading / 100.0 * units.amount_umol(conc, vol) * spu
    sites = np.select([is_umol, metal, is_mg, is_pct], [s_umol, s_mg_metal, s_mg_unit, s_pct], default=np.nan)
    sites = np.where(known, sites, np.nan)
    sites = np.where(np.isfinite(sites) & (sites > 0), sites, np.nan)
    basis = np.where(known & metal & np.isfinite(sites), 2, np.where(known & np.isfinite(sites), 1, 0))

    no_loading = has_cat & known & (~(is_umol | is_mg | is_pct) | ~np.isfinite(loading) | (loading <= 0))
    flags = FlagIndex(None, n=n).join_codes({
        "unknown_catalyst": has_cat & ~known,
        "no_loading": no_loading,
        "missing_metal_molar_mass": known & metal & ~np.isfinite(metal_mm) & ~no_loading,
        "missing_molar_mass": known & is_mg & ~metal & ~np.isfinite(mm) & ~no_loading,
        "no_substrate": known & is_pct & ~(np.isfinite(conc) & np.isfinite(vol) & (conc > 0)) & ~no_loading,
    })
    return sites, basis, flags
