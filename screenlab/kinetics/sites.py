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

from collections.abc import Mapping

import numpy as np
import pandas as pd

from screenlab import units

#: flag codes set here (code -> one plain sentence)
FLAGS: dict[str, str] = {
    "unknown_catalyst": "The well names a catalyst that is not in catalysts.csv, so its sites are unknown.",
    "no_loading": "The well has no usable loading or loading unit, so its sites are unknown.",
    "missing_molar_mass": "Loading in mg but the catalyst has no molar mass (nor metal content), so sites are unknown.",
    "missing_metal_molar_mass": "metal_wt_pct is given without metal_molar_mass_g_mol, so sites are unknown.",
    "no_substrate": "Loading in mol% but the well has no substrate amount, so sites are unknown.",
}


class FlagIndex:
    """A ``;``-joined flag column factorised once: each distinct string is parsed once, rows keep a code.

    A flag column holds few distinct strings (combinations of a few codes), so the work below loops
    over distinct strings, never over rows. ``has(code)``: which rows carry ``code`` as a whole
    ``;``-separated token. ``join(masks)``: each row's flags with the codes whose mask is true
    appended in order, codes already present not repeated.
    """

    def __init__(self, flags, n: int | None = None):
        if flags is None:
            vals = np.full(int(n or 0), "", dtype=object)
        else:
            s = pd.Series(flags, copy=False).astype(object)
            vals = s.where(s.notna(), "").to_numpy(dtype=object)
        codes, uniques = pd.factorize(vals)
        self.codes = np.asarray(codes, dtype=np.int64)
        self.uniques = [str(u) for u in uniques]
        self._tokens = [set(u.split(";")) for u in self.uniques]

    def has(self, code: str) -> np.ndarray:
        present = np.array([code in tk for tk in self._tokens], dtype=bool)
        return present[self.codes] if len(self.codes) else np.zeros(0, bool)

    def join(self, masks: Mapping[str, np.ndarray]) -> np.ndarray:
        """Object array of str (see the class docstring)."""
        items = [(c, np.asarray(m, dtype=bool)) for c, m in masks.items()]
        n = len(self.codes)
        if not n:
            return np.zeros(0, dtype=object)
        bits = np.zeros(n, dtype=np.int64)
        for i, (code, mask) in enumerate(items):          # a loop over a few codes
            bits |= (mask & ~self.has(code)).astype(np.int64) << i
        combo = self.codes * (1 << len(items)) + bits
        cc, cu = pd.factorize(combo)
        text = np.empty(len(cu), dtype=object)
        for j, c in enumerate(cu):                         # a loop over distinct flag combinations
            base, b = self.uniques[int(c) >> len(items)], int(c) & ((1 << len(items)) - 1)
            added = [code for i, (code, _) in enumerate(items) if b >> i & 1]
            text[j] = ";".join([base, *added]) if base else ";".join(added)
        return text[cc]


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
    n = len(wells)
    idx = wells.index
    cat_cols = ["catalyst", "molar_mass_g_mol", "sites_per_unit", "metal_wt_pct", "metal_molar_mass_g_mol",
                "dispersion"]
    cats = catalysts.reindex(columns=cat_cols).drop_duplicates("catalyst")
    # distinct catalyst names once (Arrow-fast), then one lookup per name
    cat_codes, cat_names = (pd.factorize(wells["catalyst"]) if "catalyst" in wells
                            else (np.full(n, -1, dtype=np.int64), pd.Index([], dtype=object)))
    cat_codes = np.asarray(cat_codes, dtype=np.int64)
    has_cat = cat_codes >= 0
    # catalyst row per well by one index lookup over the distinct names (no merge)
    names = cats["catalyst"].astype(object).to_numpy(dtype=object)
    named = pd.notna(names)
    name_pos = pd.Index(names[named]).get_indexer(pd.Index(np.asarray(cat_names, dtype=object)))
    pos = np.where(has_cat, np.append(name_pos, -1)[cat_codes], -1)
    known = pos >= 0
    row = np.flatnonzero(named)[np.maximum(pos, 0)] if named.any() else np.zeros(n, dtype=np.int64)

    def per_well(col: str) -> np.ndarray:
        v = _num(cats, col)
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
    u_codes, u_words = pd.factorize(unit_raw)
    normal = []
    for w in u_words:                                  # distinct words, not rows
        w = str(w).strip().lower().replace("µ", "u").replace("μ", "u").replace(" ", "")
        normal.append((units.normalise_loading_unit(w) or "") if w else "")
    unit = np.array(normal + [""], dtype=object)[np.asarray(u_codes, dtype=np.int64)]
    conc = _num(wells, "substrate_conc_mM")
    vol = _num(wells, "volume_uL")

    is_umol = unit == "umol"
    is_mg = unit == "mg"
    is_pct = unit == "mol%"
    metal = is_mg & np.isfinite(wt)
    with np.errstate(invalid="ignore", divide="ignore"):
        s_umol = loading * spu
        s_mg_unit = loading / mm * 1000.0 * spu
        s_mg_metal = loading * wt / 100.0 / metal_mm * 1000.0 * disp
        s_pct = loading / 100.0 * units.amount_umol(conc, vol) * spu
    sites = np.select([is_umol, metal, is_mg, is_pct], [s_umol, s_mg_metal, s_mg_unit, s_pct], default=np.nan)
    sites = np.where(known, sites, np.nan)
    sites = np.where(np.isfinite(sites) & (sites > 0), sites, np.nan)
    basis = np.where(known & metal & np.isfinite(sites), "surface_metal",
                     np.where(known & np.isfinite(sites), "per_unit", ""))

    no_loading = has_cat & known & (~(is_umol | is_mg | is_pct) | ~np.isfinite(loading) | (loading <= 0))
    flags = join_flags(None, {
        "unknown_catalyst": has_cat & ~known,
        "no_loading": no_loading,
        "missing_metal_molar_mass": known & metal & ~np.isfinite(metal_mm) & ~no_loading,
        "missing_molar_mass": known & is_mg & ~metal & ~np.isfinite(mm) & ~no_loading,
        "no_substrate": known & is_pct & ~(np.isfinite(conc) & np.isfinite(vol) & (conc > 0)) & ~no_loading,
    }, index=idx)
    return pd.DataFrame({"sites_umol": sites, "site_basis": basis, "site_flags": flags.to_numpy()}, index=idx)
