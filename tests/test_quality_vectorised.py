"""The batched plate-quality code (all plates at once) against per-plate references.

The Mann-Whitney U test is checked against ``scipy.stats.mannwhitneyu`` called on one group at
a time (the reference implementation), the NaN-aware median against ``numpy.nanmedian``, and
the per-plate columns of ``plate_quality`` against a plain loop over plates written here with
``scipy.stats.mannwhitneyu`` and the 2-D median polish of each plate.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.kinetics import KineticsResult
from screenlab.plates import is_edge
from screenlab.stats.quality import (EDGE_MIN_WELLS, MAD_NORMAL, _nanmedian, mannwhitneyu_grouped, median_polish,
                                     plate_quality)
from quality_campaigns import make_campaign


# --------------------------------------------------------------------------- Mann-Whitney U
def _random_groups(rng, n_groups, *, ties: bool):
    vals, in_x, grp = [], [], []
    for g in range(n_groups):
        n1, n2 = int(rng.integers(1, 25)), int(rng.integers(1, 25))
        v = rng.normal(size=n1 + n2) + (0.8 if g % 3 == 0 else 0.0) * np.r_[np.ones(n1), np.zeros(n2)]
        if ties:
            v = np.round(v, 1)
        vals.append(v)
        in_x.append(np.r_[np.ones(n1, bool), np.zeros(n2, bool)])
        grp.append(np.full(n1 + n2, g))
    vals, in_x, grp = (np.concatenate(a) for a in (vals, in_x, grp))
    perm = rng.permutation(len(vals))  # rows in no particular order
    return vals[perm], in_x[perm], grp[perm]


@pytest.mark.parametrize("ties", [False, True])
def test_grouped_mannwhitneyu_matches_scipy_per_group(ties):
    rng = np.random.default_rng(42 + ties)
    vals, in_x, grp = _random_groups(rng, 120, ties=ties)
    u1, p = mannwhitneyu_grouped(vals, in_x, grp, 120)
    n_exact = 0
    for g in range(120):
        x, y = vals[(grp == g) & in_x], vals[(grp == g) & ~in_x]
        ref = stats.mannwhitneyu(x, y, alternative="two-sided")  # reference: scipy.stats, one group at a time
        assert u1[g] == pytest.approx(ref.statistic, rel=1e-12, abs=1e-12)
        assert p[g] == pytest.approx(ref.pvalue, rel=1e-10, abs=1e-15)
        has_ties = len(np.unique(np.r_[x, y])) < len(x) + len(y)
        n_exact += (min(len(x), len(y)) <= 8) and not has_ties
    if not ties:
        assert n_exact > 20  # the exact branch was exercised, not only the normal approximation


def test_grouped_mannwhitneyu_edge_cases():
    # group 0: one side empty; group 1: all values equal; group 2: not present at all;
    # group 3: small, no ties (exact); group 4: large with ties (asymptotic)
    vals = np.r_[[1.0, 2.0, 3.0], [5.0] * 6, [0.3, 1.2, 2.2, 0.1, 4.5], np.repeat(np.arange(10.0), 3)]
    in_x = np.r_[[True] * 3, [True, False] * 3, [True, True, False, False, False], np.tile([True, False, True], 10)]
    grp = np.r_[[0] * 3, [1] * 6, [3] * 5, [4] * 30]
    u1, p = mannwhitneyu_grouped(vals, in_x, grp, 5)
    assert np.isnan(u1[0]) and np.isnan(p[0]) and np.isnan(u1[2]) and np.isnan(p[2])
    for g in (1, 3, 4):
        x, y = vals[(grp == g) & in_x], vals[(grp == g) & ~in_x]
        ref = stats.mannwhitneyu(x, y, alternative="two-sided")  # reference: scipy.stats
        assert u1[g] == ref.statistic and p[g] == pytest.approx(ref.pvalue, rel=1e-12)
    with pytest.raises(ValueError, match="NaN"):
        mannwhitneyu_grouped([1.0, np.nan], [True, False], [0, 0], 1)
    u1, p = mannwhitneyu_grouped([], [], [], 3)
    assert np.isnan(p).all() and len(p) == 3


# --------------------------------------------------------------------------- NaN-aware median
def test_nanmedian_equals_numpy_nanmedian():
    rng = np.random.default_rng(3)
    a = rng.normal(size=(50, 7, 9))
    a[rng.random(a.shape) < 0.4] = np.nan
    a[3, 2, :] = np.nan          # an all-NaN row
    a[4, :, 5] = np.nan          # an all-NaN column
    a[5] = np.nan                # an all-NaN plate
    a[6, 0, :3] = [np.inf, -np.inf, 1.0]
    a[7, 1, :4] = [2.0, 2.0, 2.0, 2.0]
    with np.errstate(invalid="ignore"), pytest.warns(RuntimeWarning):
        for axis in (0, 1, 2):
            np.testing.assert_array_equal(_nanmedian(a, axis=axis), np.nanmedian(a, axis=axis))
        flat = a.reshape(50, -1)
        np.testing.assert_array_equal(_nanmedian(flat, axis=1), np.nanmedian(flat, axis=1))


# --------------------------------------------------------------------------- plate_quality per plate
def _reference_edge_columns(data, kin):
    """A plain loop over plates: 2-D median polish per plate, MAD, replicate deviations and
    scipy.stats.mannwhitneyu on each plate's edge and interior values."""
    w = kin.wells
    rate = pd.to_numeric(w["rate_mM_per_h"], errors="coerce")
    keys = [k for k in ["catalyst", "loading", "substrate_conc_mM", "temperature_c", *data.factor_names] if k in w]
    rows = []
    for _, p in data.plates.iterrows():
        wp = w[w["plate"] == p["plate"]]
        rp = rate[wp.index]
        edge = is_edge(wp["row"], wp["col"], np.full(len(wp), p["format"]))
        samp = (wp["role"] == "sample").to_numpy() & np.isfinite(rp.to_numpy())
        grid = np.full((p["n_rows"], p["n_cols"]), np.nan)
        grid[wp["row"].to_numpy()[samp], wp["col"].to_numpy()[samp]] = rp.to_numpy()[samp]
        rec = {"plate": p["plate"], "edge_basis": "", "edge_n": 0, "interior_n": 0, "edge_shift_pct": np.nan,
               "edge_p": np.nan, "bscore_max_abs": np.nan, "mad_zero": False}
        if samp.any():
            _, _, _, res, _, _ = median_polish(grid)
            r = res[wp["row"].to_numpy()[samp], wp["col"].to_numpy()[samp]]
            mad = np.median(np.abs(r - np.median(r)))
            rec["mad_zero"] = not mad > 0
            if mad > 0:
                rec["bscore_max_abs"] = np.max(np.abs(r)) / (MAD_NORMAL * mad)
            # replicate deviations: sample wells with a positive rate, groups of 2 or more
            pos = (wp["role"] == "sample").to_numpy() & (rp > 0).to_numpy()
            g = wp[pos].assign(_r=rp[pos], _e=edge[pos])
            gb = g.groupby(keys, dropna=False)["_r"]
            g = g.assign(dev=np.log(g["_r"] / gb.transform("median")), n=gb.transform("size"))
            g = g[g["n"] >= 2]
            e, i = g.loc[g["_e"], "dev"].to_numpy(), g.loc[~g["_e"], "dev"].to_numpy()
            basis = "replicates"
            if min(len(e), len(i)) < EDGE_MIN_WELLS:
                basis = "bscore"
                e, i = r[edge[samp]], r[~edge[samp]]
            rec["edge_n"], rec["interior_n"] = len(e), len(i)
            if min(len(e), len(i)) >= EDGE_MIN_WELLS:
                rec["edge_basis"] = basis
                if basis == "replicates":
                    rec["edge_shift_pct"] = 100 * (np.exp(e.mean() - i.mean()) - 1)
                if np.ptp(np.r_[e, i]) > 0:
                    rec["edge_p"] = stats.mannwhitneyu(e, i, alternative="two-sided").pvalue  # reference: scipy.stats
        rows.append(rec)
    return pd.DataFrame(rows).set_index("plate")


def _zero_mad_and_gaps():
    data, kin, _ = make_campaign(seed=14)
    w = kin.wells.copy()
    w.loc[(w.plate == "P40-1") & (w.role == "sample"), "rate_mM_per_h"] = 1.0  # every sample equal: MAD 0
    w.loc[w.index[:5], "rate_mM_per_h"] = np.nan
    return data, KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)


def _drop(seed, keep):
    data, kin, _ = make_campaign(seed=seed, plates_per_t=2)
    w = kin.wells[keep(kin.wells)]
    return data, KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)


CAMPAIGNS = {
    "edge_ring": lambda: make_campaign(seed=5, n_cat=12, temps=(60.0, 70.0), plates_per_t=3, edge_bias=0.25)[:2],
    "clean": lambda: make_campaign(seed=1, plates_per_t=2)[:2],
    "no_replicates": lambda: make_campaign(seed=15, reps=1, n_cat=40, edge_bias=0.3)[:2],       # bscore basis
    "small_plates": lambda: make_campaign(seed=13, fmt=24, reps=2, n_cat=4, plates_per_t=3)[:2],  # mostly untested
    "plates_384": lambda: make_campaign(seed=11, fmt=384, reps=6, n_cat=20, edge_bias=0.1)[:2],
    "zero_mad": _zero_mad_and_gaps,
    # a plate with controls but no sample wells, and a plate with no wells at all in the kinetics
    "plate_without_samples": lambda: _drop(18, lambda w: ~((w.plate == "P50-2") & (w.role == "sample"))),
    "plate_without_wells": lambda: _drop(17, lambda w: w.plate != "P70-1"),
}


@pytest.mark.parametrize("name", sorted(CAMPAIGNS))
def test_plate_quality_edge_columns_match_per_plate_loop(name):
    data, kin = CAMPAIGNS[name]()
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    ref = _reference_edge_columns(data, kin)
    assert list(q.index) == list(ref.index)
    assert q["edge_basis"].tolist() == ref["edge_basis"].tolist()
    assert q["edge_n"].tolist() == ref["edge_n"].tolist()
    assert q["interior_n"].tolist() == ref["interior_n"].tolist()
    for col in ("edge_shift_pct", "edge_p", "bscore_max_abs"):
        np.testing.assert_allclose(q[col].to_numpy(float), ref[col].to_numpy(float), rtol=1e-10, atol=1e-300,
                                   equal_nan=True, err_msg=col)
    assert q["flags"].str.contains("bscore_undefined").tolist() == ref["mad_zero"].tolist()
    assert q["edge_p"].notna().any() or name == "small_plates"


def test_plate_quality_counts_moments_and_cvs_match_per_plate_loop():
    data, kin = _zero_mad_and_gaps()
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    w = kin.wells.assign(_r=pd.to_numeric(kin.wells["rate_mM_per_h"], errors="coerce"))
    for plate, g in w.groupby("plate"):
        for role in ("sample", "reference", "blank"):
            assert q.loc[plate, f"n_{role}"] == int((g["role"].eq(role) & g["_r"].notna()).sum())
        for role in ("reference", "blank"):
            v = g.loc[g["role"] == role, "_r"].dropna().to_numpy()
            assert q.loc[plate, f"{role}_mean_mM_per_h"] == pytest.approx(v.mean(), rel=1e-12)
            assert q.loc[plate, f"{role}_sd_mM_per_h"] == pytest.approx(v.std(ddof=1), rel=1e-12)
        s = g[(g["role"] == "sample") & g["_r"].notna()]
        cvs = []
        for _, rg in s.groupby(["catalyst", "loading", "substrate_conc_mM", "temperature_c"], dropna=False):
            v = rg["_r"].to_numpy()
            if len(v) >= 2 and v.mean() > 0:
                cvs.append(100 * v.std(ddof=1) / v.mean())
        assert q.loc[plate, "n_replicate_groups"] == len(cvs)
        assert q.loc[plate, "replicate_cv_median_pct"] == pytest.approx(np.median(cvs), rel=1e-12)
    flags = q["flags"].str.split(";")
    assert all(f == [""] or all(f) for f in flags)  # no empty codes from the join
