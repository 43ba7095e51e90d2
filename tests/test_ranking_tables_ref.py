"""The ranking's per-catalyst tables (flags union, plate information, candidate table) against the
plain per-row versions they replaced, kept here as the reference: same frames, dtypes included."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import screenlab.stats.ranking as R
from screenlab.pipeline import analyse
from screenlab.synthetic import SyntheticSpec, synthetic_campaign

from ranking_refs import _merge_codes_ref


def _plate_info_ref(kin, quality, plates_used=None) -> pd.DataFrame:
    """The replaced version: every column filtered, isin, one Python join per catalyst."""
    w = kin.wells
    w = w[w["catalyst"].notna() & w["role"].astype(str).isin(["sample", "reference"])]
    cp = w[["catalyst", "plate"]].astype(str).drop_duplicates()
    if plates_used is not None and len(plates_used):
        used = plates_used.dropna().astype(str).str.split(";").explode().rename("plate").reset_index()
        used.columns = ["catalyst", "plate"]
        cp = pd.concat([cp[~cp["catalyst"].isin(used["catalyst"])], used], ignore_index=True)
    if quality is None or quality.empty:
        return pd.DataFrame({"catalyst": cp["catalyst"].unique(), "all_failed": False, "any_failed": False,
                             "any_unchecked": False, "plate_flags": ""})
    q = quality.assign(plate=quality["plate"].astype(str)).set_index("plate")
    cp = cp.assign(failed=cp["plate"].map(q["status"]).eq("failed").to_numpy(),
                   unchecked=cp["plate"].map(q["status"]).eq("unchecked").to_numpy(),
                   pf=cp["plate"].map(q["flags"]).fillna("").astype(str).to_numpy())
    status_codes = ("failed", "no_benchmark")
    cp = cp.assign(pf=cp["pf"].str.split(";").map(lambda c: ";".join(x for x in c if x not in status_codes)))
    agg = cp.groupby("catalyst").agg(all_failed=("failed", "all"), any_failed=("failed", "any"),
                                     any_unchecked=("unchecked", "any"),
                                     plate_flags=("pf", lambda s: ";".join(_merge_codes_ref(*[[x] for x in s]))))
    return agg.reset_index()


def test_merge_codes_matches_the_loop():
    rng = np.random.default_rng(3)
    pool = ["", "a", "b", "a;b", "b;a", ";a;", "c;a;c", None, np.nan, "a;;b"]
    cols = [list(rng.choice(np.array(pool, dtype=object), 400)) for _ in range(3)]
    cols[1] = pd.Series(cols[1], dtype="str")                         # Arrow-backed text, with NaN
    cols[2] = np.where(rng.random(400) < 0.5, "reference", "")         # numpy text
    assert R._merge_codes(*cols) == _merge_codes_ref(*[list(c) for c in cols])
    assert R._merge_codes([], []) == []


@pytest.fixture(scope="module")
def analysed():
    data = synthetic_campaign(SyntheticSpec(n_plates=12, seed=5))
    return data, analyse(data)


def _flagged_quality(quality: pd.DataFrame, seed: int) -> pd.DataFrame:
    """The plate-quality frame with invented statuses and flag strings (repeats, 'failed' inside)."""
    rng = np.random.default_rng(seed)
    n = len(quality)
    return quality.assign(status=rng.choice(["ok", "failed", "ok", "unchecked"], n),
                          flags=rng.choice(["", "edge_effect", "failed;low_z", "low_z;edge_effect;low_z", "failed",
                                            "no_benchmark;failed;edge_effect", "no_benchmark"], n))


@pytest.mark.parametrize("which", ["none", "real", "flagged"])
def test_plate_info_matches_reference(analysed, which):
    data, a = analysed
    kin = a.kinetics
    quality = {"none": None, "real": a.quality, "flagged": _flagged_quality(a.quality, 1)}[which]
    pd.testing.assert_frame_equal(R._plate_info(kin, quality), _plate_info_ref(kin, quality))
    used = kin.rates.assign(catalyst=kin.rates["catalyst"].astype(str)).drop_duplicates("catalyst")
    used = used.set_index("catalyst")["plates"].iloc[::2]           # half of the catalysts by their rates row
    pd.testing.assert_frame_equal(R._plate_info(kin, quality, used), _plate_info_ref(kin, quality, used))


@pytest.mark.parametrize("metric", ["tof", "ea", "enhancement", "ton"])
def test_candidate_table_matches_reference_helpers(analysed, monkeypatch, metric):
    data, a = analysed
    quality = _flagged_quality(a.quality, 2)
    got = R.candidate_table(a.kinetics, quality, metric=metric, catalysts=data.catalysts)
    monkeypatch.setattr(R, "_merge_codes", _merge_codes_ref)
    monkeypatch.setattr(R, "_plate_info", _plate_info_ref)
    expected = R.candidate_table(a.kinetics, quality, metric=metric, catalysts=data.catalysts)
    pd.testing.assert_frame_equal(got, expected)
    assert got["flags"].str.contains("on_failed_plate").any()        # the flagged plates reach the table
