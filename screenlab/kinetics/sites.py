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

import re
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


def _code_pattern(code: str) -> str:
    return r"(?:^|;)" + re.escape(code) + r"(?:;|$)"


def join_flags(existing, masks: Mapping[str, np.ndarray], index=None) -> pd.Series:
    """Append flag codes to an existing ``;``-joined flag column, vectorised.

    ``existing`` is a Series of strings (NA/empty for none) or None; ``masks`` maps each code to a
    boolean array (a loop over a few codes, never over rows). Codes already present are not
    repeated. Returns a new object-dtype Series of str.
    """
    if existing is None:
        n = len(next(iter(masks.values()))) if masks else len(index)
        cur = pd.Series([""] * n, index=index, dtype=object)
    else:
        cur = pd.Series(existing, copy=True).astype(object)
        cur = cur.where(cur.notna(), "").astype(str).astype(object)
        if index is not None:
            cur.index = index
    for code, mask in masks.items():
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            continue
        present = cur.str.contains(_code_pattern(code), regex=True).to_numpy(dtype=bool)
        add = mask & ~present
        vals = cur.to_numpy(dtype=object)
        sep = np.where(vals == "", "", ";").astype(object)
        cur = pd.Series(np.where(add, vals + sep + code, vals), index=cur.index, dtype=object)
    return cur


def has_flag(flags, code: str) -> np.ndarray:
    """Boolean array: which rows of a ``;``-joined flag column carry ``code``."""
    s = pd.Series(flags, copy=False).astype(object)
    s = s.where(s.notna(), "").astype(str)
    return s.str.contains(_code_pattern(code), regex=True).to_numpy(dtype=bool)


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
    cat_key = wells["catalyst"].astype(object).where(wells["catalyst"].notna(), None) if "catalyst" in wells else \
        pd.Series([None] * n, index=idx, dtype=object)
    has_cat = cat_key.notna().to_numpy()
    looked = pd.DataFrame({"catalyst": cat_key.to_numpy(dtype=object)}).merge(
        cats.astype({"catalyst": object}), on="catalyst", how="left", validate="many_to_one")
    known = has_cat & looked["catalyst"].isin(cats["catalyst"].astype(object)).to_numpy()

    mm = _num(looked, "molar_mass_g_mol")
    spu = _num(looked, "sites_per_unit")
    spu = np.where(np.isfinite(spu), spu, 1.0)
    wt = _num(looked, "metal_wt_pct")
    metal_mm = _num(looked, "metal_molar_mass_g_mol")
    disp = _num(looked, "dispersion")
    disp = np.where(np.isfinite(disp), disp, 1.0)

    loading = _num(wells, "loading")
    unit_raw = wells["loading_unit"] if "loading_unit" in wells else pd.Series([None] * n, index=idx)
    words = unit_raw.astype(object).where(unit_raw.notna(), "").astype(str)
    words = words.str.strip().str.lower().str.replace("µ", "u").str.replace("μ", "u").str.replace(" ", "")
    lookup = {w: units.normalise_loading_unit(w) for w in pd.unique(words) if w}  # distinct words, not rows
    unit = words.map({k: (v or "") for k, v in lookup.items()}).fillna("").to_numpy(dtype=object)
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
