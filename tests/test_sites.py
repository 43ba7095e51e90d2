"""Active sites per well (screenlab.kinetics.sites)."""
import re

import numpy as np
import pandas as pd
import pytest

from screenlab.kinetics import sites
from screenlab.kinetics.sites import active_sites, has_flag, join_flags

# Standard atomic weights, CIAAW/IUPAC (check-values.md section 10): Pd 106.42, Pt 195.084, Rh 102.90549
PD, PT, RH = 106.42, 195.084, 102.90549


def _cats():
    return pd.DataFrame({
        "catalyst": ["PdOAc2", "PdC", "PtAl", "RhL", "NoMM", "MetalNoMM"],
        "molar_mass_g_mol": [224.508, np.nan, np.nan, 500.0, np.nan, np.nan],
        "sites_per_unit": [1.0, np.nan, np.nan, 2.0, np.nan, np.nan],
        "metal_wt_pct": [np.nan, 5.0, 1.0, np.nan, np.nan, 3.0],
        "metal_molar_mass_g_mol": [np.nan, PD, PT, np.nan, np.nan, np.nan],
        "dispersion": [np.nan, 0.3, np.nan, np.nan, np.nan, np.nan],
    })


def _wells(rows):
    return pd.DataFrame(rows, columns=["catalyst", "loading", "loading_unit", "substrate_conc_mM", "volume_uL"])


def test_hand_examples_against_iupac_atomic_weights():
    w = _wells([
        ["PdOAc2", 1.0, "mg", 100.0, 500.0],     # 1 mg / 224.508 g/mol (C4H6O4Pd, CIAAW weights) x 1000
        ["PdC", 2.0, "mg", 100.0, 500.0],        # 2 mg x 5 % / 106.42 x 1000 x 0.3
        ["PtAl", 10.0, "mg", 100.0, 500.0],      # 10 mg x 1 % / 195.084 x 1000, dispersion default 1
        ["RhL", 0.25, "umol", 100.0, 500.0],     # 0.25 umol x 2 sites per unit
        ["RhL", 5.0, "mg", 100.0, 500.0],        # 5 mg / 500 x 1000 x 2
    ])
    s = active_sites(w, _cats())
    expect = [1.0 / 224.508 * 1000, 2.0 * 0.05 / PD * 1000 * 0.3, 10.0 * 0.01 / PT * 1000, 0.5, 20.0]
    np.testing.assert_allclose(s["sites_umol"], expect, rtol=1e-12)
    assert s["sites_umol"].iloc[1] == pytest.approx(0.281902, abs=1e-6)   # hand arithmetic
    assert list(s["site_basis"]) == ["per_unit", "surface_metal", "surface_metal", "per_unit", "per_unit"]
    assert (s["site_flags"] == "").all()


def test_mol_percent_check_values_section6():
    # check-values.md section 6 (COMPUTED from the definitions): 100 umol substrate, 0.5 mol% -> 0.5 umol
    w = _wells([["PdOAc2", 0.5, "mol%", 100.0, 1000.0], ["RhL", 0.5, "mol %", 100.0, 1000.0]])
    s = active_sites(w, _cats())
    np.testing.assert_allclose(s["sites_umol"], [0.5, 1.0], rtol=1e-12)


def test_unknown_inputs_are_flagged_not_guessed():
    w = _wells([
        ["Nope", 1.0, "umol", 100.0, 500.0],
        ["NoMM", 1.0, "mg", 100.0, 500.0],
        ["MetalNoMM", 1.0, "mg", 100.0, 500.0],
        ["PdOAc2", 1.0, "mol%", np.nan, 500.0],
        ["PdOAc2", np.nan, None, 100.0, 500.0],
        [None, np.nan, None, 100.0, 500.0],
    ])
    inp = w.copy()
    s = active_sites(w, _cats())
    pd.testing.assert_frame_equal(w, inp)          # input not mutated
    assert s["sites_umol"].isna().all()
    assert list(s["site_flags"]) == ["unknown_catalyst", "missing_molar_mass", "missing_metal_molar_mass",
                                     "no_substrate", "no_loading", ""]


def test_join_flags_vectorised_and_deduplicated():
    f = join_flags(pd.Series(["a", "", None, "ab"]), {"b": np.array([1, 1, 0, 1], bool), "a": np.ones(4, bool)})
    assert list(f) == ["a;b", "b;a", "a", "ab;b;a"]
    assert list(has_flag(f, "a")) == [True, True, True, True]
    assert list(has_flag(pd.Series(["ab", "b;abc", None]), "a")) == [False, False, False]


# ------------------------------------------------------------------------------- flag columns

def _regex_has(values, code):
    """The rule: ``code`` is one whole ``;``-separated token (a regular expression)."""
    pat = r"(?:^|;)" + re.escape(code) + r"(?:;|$)"
    return np.array([bool(re.search(pat, "" if pd.isna(v) else str(v))) for v in values])


def _regex_join(values, masks):
    """The rule: codes whose mask is true appended with ``;`` in order, none repeated."""
    out = []
    for i, v in enumerate(values):
        cur = "" if pd.isna(v) else str(v)
        for code, mask in masks.items():
            if mask[i] and not re.search(r"(?:^|;)" + re.escape(code) + r"(?:;|$)", cur):
                cur = code if cur == "" else cur + ";" + code
        out.append(cur)
    return out


@pytest.mark.parametrize("seed", range(4))
def test_flag_helpers_follow_the_token_rule(seed):
    rng = np.random.default_rng(seed)
    pool = ["", "a", "b", "ab", "a;b", "b;ab", "c;a", None, "few_points"]
    vals = pd.Series(rng.choice(np.array(pool, dtype=object), 200), dtype=object)
    masks = {c: rng.random(200) < 0.3 for c in ("a", "ab", "few_points", "z")}
    for code in ("a", "b", "ab", "few", "few_points", "z"):
        np.testing.assert_array_equal(sites.has_flag(vals, code), _regex_has(vals, code))
    got = sites.join_flags(vals, masks)
    assert got.tolist() == _regex_join(vals, masks)
    fresh = sites.join_flags(None, masks)
    assert fresh.tolist() == _regex_join([""] * 200, masks)


def test_text_array_is_the_column_an_object_array_makes():
    words = np.array(["", "a", "a;b"], dtype=object)
    codes = np.array([2, 0, 1, 1, 0])
    ref = pd.Series(words[codes])
    got = pd.Series(sites.text_array(words, codes))
    pd.testing.assert_series_equal(got, ref)
    none = np.zeros(0, dtype=int)
    assert pd.Series(sites.text_array(words, none)).dtype == pd.Series(words[none]).dtype


def test_active_sites_lookup_equals_a_merge_reference(small_synthetic):
    campaign = small_synthetic
    # pandas reference: the catalysts joined to the wells by a left merge; sites by the rules of the module docstring
    wells = campaign.wells.copy()
    wells.loc[wells.index[:3], "catalyst"] = "not-in-library"
    got = sites.active_sites(wells, campaign.catalysts)
    looked = wells[["catalyst"]].astype(object).merge(
        campaign.catalysts.drop_duplicates("catalyst").astype({"catalyst": object}), on="catalyst", how="left")
    has = wells["catalyst"].notna().to_numpy()
    known = has & looked["catalyst"].isin(campaign.catalysts["catalyst"].astype(object)).to_numpy()
    assert (got["site_flags"].to_numpy(object)[has & ~known] == "unknown_catalyst").all()
    assert got["sites_umol"].to_numpy(float)[~known].tolist() == [] or np.isnan(got["sites_umol"].to_numpy(float)[~known]).all()
    unit = wells["loading_unit"].astype(str).str.strip().str.lower().to_numpy(object)
    umol = known & (unit == "umol")
    spu = pd.to_numeric(looked["sites_per_unit"], errors="coerce").fillna(1.0).to_numpy(float)
    ref = wells["loading"].to_numpy(float) * spu
    assert umol.any() or (known & (unit == "mg")).any()
    np.testing.assert_allclose(got["sites_umol"].to_numpy(float)[umol], ref[umol], rtol=1e-14)
    mg = known & (unit == "mg") & looked["metal_wt_pct"].isna().to_numpy()
    ref_mg = wells["loading"].to_numpy(float) / looked["molar_mass_g_mol"].to_numpy(float) * 1000.0 * spu
    np.testing.assert_allclose(got["sites_umol"].to_numpy(float)[mg], ref_mg[mg], rtol=1e-14)
