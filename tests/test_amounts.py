"""Readings -> product amounts: each readout kind against hand calculations and outside examples."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from screenlab.errors import UsageError
from screenlab.kinetics import amounts
from screenlab.kinetics.amounts import product_amounts
from screenlab.model import CampaignData, Manifest


def _data(readings, kind, wells=None, **manifest):
    if wells is None:
        wells = pd.DataFrame({"plate": ["P1", "P1"], "well": ["A1", "A2"], "row": [0, 0], "col": [0, 1],
                              "role": ["sample", "blank"], "catalyst": ["C1", pd.NA], "loading": [0.5, np.nan],
                              "loading_unit": ["umol", pd.NA], "substrate_conc_mM": [500.0, 500.0],
                              "volume_uL": [200.0, 200.0], "temperature_c": [60.0, 60.0]})
    rd = pd.DataFrame(readings, columns=["plate", "well", "analyte", "time_h", "value"])
    return CampaignData(manifest=Manifest(name="t", readout_kind=kind, **manifest), catalysts=pd.DataFrame(),
                        plates=pd.DataFrame(), wells=wells, readings=rd)


def test_columns_and_no_mutation():
    d = _data([("P1", "A1", "product", 0.0, 0.0), ("P1", "A1", "product", 1.0, 10.0)], "conversion",
              readout_scale="percent")
    before = d.readings.copy()
    out = product_amounts(d)
    assert list(out.columns[:6]) == ["plate", "well", "analyte", "time_h", "product_mM", "conversion_pct"]
    pd.testing.assert_frame_equal(d.readings, before)


def test_ton_tof_worked_arithmetic_from_yield():
    # check-values.md section 6 (COMPUTED worked arithmetic): 100 umol substrate, 0.5 mol% catalyst
    # (0.5 umol), 8 % yield after 10 min -> 8 umol product, TON 16, TOF 16 / 600 s = 0.026667 s-1 = 96 h-1.
    # 100 umol in 200 uL is 500 mM.
    d = _data([("P1", "A1", "product", 0.0, 0.0), ("P1", "A1", "product", 10 / 60, 8.0)], "yield",
              readout_scale="percent")
    out = product_amounts(d)
    p = out["product_mM"].to_numpy()[1]
    product_umol = p * 200.0 * 1e-3                       # mM x uL = nmol
    assert product_umol == pytest.approx(8.0, rel=1e-12)
    ton = product_umol / 0.5
    assert ton == pytest.approx(16.0, rel=1e-12)
    assert ton / (10 * 60) == pytest.approx(0.026667, rel=1e-4)
    assert ton / (10 / 60) == pytest.approx(96.0, rel=1e-12)
    assert out["conversion_pct"].to_numpy()[1] == pytest.approx(8.0, rel=1e-12)


def test_conversion_fraction_with_stoichiometry():
    # hand calculation: 25 % of 500 mM converted, 2 product per substrate -> 250 mM, conversion 25 %
    d = _data([("P1", "A1", "product", 2.0, 0.25)], "conversion", readout_scale="fraction",
              product_per_substrate=2.0)
    out = product_amounts(d)
    assert out["product_mM"].iloc[0] == pytest.approx(250.0)
    assert out["conversion_pct"].iloc[0] == pytest.approx(25.0)


def test_product_conc_in_micromolar():
    d = _data([("P1", "A1", "product", 1.0, 750.0)], "product_conc", concentration_unit="uM")
    out = product_amounts(d)
    assert out["product_mM"].iloc[0] == pytest.approx(0.75)
    assert out["conversion_pct"].iloc[0] == pytest.approx(0.75 / 500 * 100)


def test_beer_lambert_hand_calculation_with_t0_baseline():
    # A = epsilon l c: A = 0.45 with epsilon 18000 L/mol/cm and l = 0.5 cm -> c = 0.45 / 9000 = 50 uM
    # (hand calculation; same law as check-values.md section 8: 50 uM, eps 18000, l 0.56 -> A 0.504)
    d = _data([("P1", "A1", "product", 0.0, 0.04), ("P1", "A1", "product", 1.0, 0.49),
               ("P1", "A2", "product", 0.0, 0.04), ("P1", "A2", "product", 1.0, 0.04 + 0.504)],
              "absorbance", epsilon_M_cm=18000.0, path_length_cm=0.5)
    out = product_amounts(d)
    a1 = out[out["well"] == "A1"]
    assert a1["product_mM"].to_numpy() == pytest.approx([0.0, 0.050], abs=1e-12)
    assert (a1["baseline"] == "t0").all()
    d2 = _data(d.readings.values.tolist(), "absorbance", epsilon_M_cm=18000.0, path_length_cm=0.56)
    a2 = product_amounts(d2)
    assert a2[a2["well"] == "A2"]["product_mM"].iloc[1] == pytest.approx(0.050, rel=1e-9)


def test_absorbance_without_t0_uses_first_reading():
    d = _data([("P1", "A1", "product", 0.5, 0.10), ("P1", "A1", "product", 1.0, 0.28)], "absorbance",
              epsilon_M_cm=18000.0, path_length_cm=0.5)
    out = product_amounts(d)
    assert (out["baseline"] == "first_reading").all()
    assert out["product_mM"].to_numpy() == pytest.approx([0.0, 0.18 / 9000 * 1000])


def test_absorbance_needs_epsilon_and_path():
    d = _data([("P1", "A1", "product", 0.0, 0.1)], "absorbance", epsilon_M_cm=None, path_length_cm=0.5)
    with pytest.raises(UsageError, match="epsilon_M_cm"):
        product_amounts(d)


def test_enantiomers_summed_into_main_and_byproducts_kept():
    rows = [("P1", "A1", "R", 1.0, 10.0), ("P1", "A1", "S", 1.0, 4.0), ("P1", "A1", "B1", 1.0, 2.0),
            ("P1", "A1", "R", 2.0, 20.0), ("P1", "A1", "S", 2.0, 8.0), ("P1", "A1", "R", 3.0, 30.0)]
    d = _data(rows, "yield", readout_scale="percent", analyte_main="P", byproducts=("B1",),
              enantiomers=("R", "S"))
    out = product_amounts(d)
    main = out[out["analyte"] == "P"].set_index("time_h")
    # yields 14 % and 28 % of 500 mM; at t = 3 h S is missing, so no sum
    assert main.loc[1.0, "product_mM"] == pytest.approx(70.0)
    assert main.loc[2.0, "conversion_pct"] == pytest.approx(28.0)
    assert np.isnan(main.loc[3.0, "product_mM"])
    assert set(out["analyte"]) == {"P", "R", "S", "B1"}
    assert out[out["analyte"] == "B1"]["product_mM"].iloc[0] == pytest.approx(10.0)


def test_well_without_substrate_has_nan_conversion():
    wells = pd.DataFrame({"plate": ["P1"], "well": ["A1"], "row": [0], "col": [0], "role": ["sample"],
                          "catalyst": ["C1"], "loading": [1.0], "loading_unit": ["umol"],
                          "substrate_conc_mM": [np.nan], "volume_uL": [200.0], "temperature_c": [25.0]})
    d = _data([("P1", "A1", "product", 1.0, 3.0)], "product_conc", wells=wells)
    out = product_amounts(d)
    assert out["product_mM"].iloc[0] == 3.0 and np.isnan(out["conversion_pct"].iloc[0])


# ------------------------------------------------------------------------------- the well lookup

@pytest.mark.parametrize("seed", [0, 1, 2])
def test_well_index_matches_multiindex_lookup_in_any_order(seed):
    rng = np.random.default_rng(seed)
    plates = np.array(["P1", "P2", "P10", "x;y"], dtype=object)
    wells = np.array(["A1", "A2", "B1", "H12"], dtype=object)
    keys = pd.DataFrame([(p, w) for p in plates for w in wells], columns=["plate", "well"])
    keys = keys.sample(frac=0.7, random_state=seed).reset_index(drop=True)      # some wells absent
    n = 300
    rows = pd.DataFrame({"plate": rng.choice(plates, n), "well": rng.choice(wells, n)})
    rows = rows.sort_values(["plate", "well"]).reset_index(drop=True) if seed == 0 else rows
    for dtype in ("str", object):
        r = rows.astype(dtype)
        k = keys.astype(dtype)
        got = amounts.well_index(r["plate"], r["well"], k["plate"], k["well"])
        # pandas reference: a MultiIndex lookup
        ref = pd.MultiIndex.from_frame(k.astype(str)).get_indexer(pd.MultiIndex.from_frame(r.astype(str)))
        np.testing.assert_array_equal(got, ref)


def test_well_index_duplicate_keys_take_the_first():
    k = pd.DataFrame({"plate": ["P", "P", "P"], "well": ["A1", "B1", "A1"]})
    got = amounts.well_index(pd.Series(["P", "P", "Q"]), pd.Series(["A1", "B1", "A1"]), k["plate"], k["well"])
    np.testing.assert_array_equal(got, [0, 1, -1])


def test_product_amounts_equal_the_merge_reference(small_synthetic):
    campaign = small_synthetic
    got = amounts.product_amounts(campaign)
    rd = campaign.readings[["plate", "well", "analyte", "time_h", "value"]]
    w = campaign.wells[["plate", "well", "substrate_conc_mM"]].drop_duplicates(["plate", "well"])
    ref = rd.merge(w, on=["plate", "well"], how="left")          # pandas reference: a left merge
    theo = ref["substrate_conc_mM"].to_numpy(float) * float(campaign.manifest.product_per_substrate)
    product = ref["value"].to_numpy(float) * 0.01 * theo               # synthetic yields are percent
    assert list(got.columns) == list(amounts.AMOUNT_COLUMNS)
    np.testing.assert_allclose(got["product_mM"], product, rtol=1e-14, equal_nan=True)
    np.testing.assert_allclose(got["conversion_pct"], ref["value"].to_numpy(float), rtol=1e-12, equal_nan=True)
    assert (got["well"].to_numpy(object) == ref["well"].to_numpy(object)).all()


@pytest.mark.parametrize("chunks", [1, 3])
def test_well_index_arrow_path_with_missing_values_and_chunks(chunks):
    rng = np.random.default_rng(chunks)
    plates = np.array(["P1", "P2", None], dtype=object)
    wells = np.array(["A1", "B2", None], dtype=object)
    keys = pd.DataFrame({"plate": rng.choice(plates, 12), "well": rng.choice(wells, 12)})
    rows = pd.DataFrame({"plate": rng.choice(plates, 200), "well": rng.choice(wells, 200)})
    rows = rows.sort_values(["plate", "well"], na_position="last").reset_index(drop=True)

    def arrow(values):
        arr = pa.array([None if pd.isna(v) else v for v in values], type=pa.large_string())
        parts = np.array_split(np.arange(len(arr)), chunks)
        return pd.Series(pd.arrays.ArrowStringArray(pa.chunked_array([arr.take(pa.array(p)) for p in parts])),
                         dtype="str")

    got = amounts.well_index(arrow(rows["plate"]), arrow(rows["well"]), arrow(keys["plate"]), arrow(keys["well"]))
    # the object-column path (checked against pandas above) as the reference for the Arrow path
    ref = amounts.well_index(rows["plate"].astype(object), rows["well"].astype(object),
                             keys["plate"].astype(object), keys["well"].astype(object))
    np.testing.assert_array_equal(got, ref)
