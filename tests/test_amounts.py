"""Readings -> product amounts: each readout kind against hand calculations and outside examples."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screenlab.errors import UsageError
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
