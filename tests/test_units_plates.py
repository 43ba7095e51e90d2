"""Units, plate formats, settings and spreadsheet-safe text."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from screenlab import plates, units
from screenlab.export.safe import neutralise, neutralise_frame
from screenlab.settings import SETTINGS, AnalysisSettings


def test_gas_constant_is_codata():
    # CODATA (exact since the 2019 SI), via scipy.constants: R = N_A k_B = 8.31446261815324 J/mol/K
    assert units.R_J_MOL_K == pytest.approx(8.31446261815324, rel=1e-15)
    assert units.R_J_MOL_K == pytest.approx(constants.N_A * constants.k, rel=1e-15)
    # the constants written in units.py are CODATA's, via scipy.constants, to the last bit
    assert units.R_J_MOL_K == constants.R == constants.physical_constants["molar gas constant"][0]
    assert units.KB_J_K == constants.k and units.H_J_S == constants.h and units.NA_PER_MOL == constants.N_A


def test_celsius_to_kelvin_uses_273_15():
    # SI brochure (9th ed.): T/K = t/degC + 273.15, exactly
    assert units.c_to_k(25.0) == pytest.approx(298.15, abs=1e-12)
    assert units.k_to_c(units.c_to_k(-40.0)) == pytest.approx(-40.0)


@pytest.mark.parametrize("word,factor", [("s", 1 / 3600), ("min", 1 / 60), ("h", 1.0), (" MIN ", 1 / 60)])
def test_time_factors(word, factor):
    assert units.time_factor_to_h(word) == pytest.approx(factor)


@pytest.mark.parametrize("word,factor", [("M", 1000.0), ("mM", 1.0), ("uM", 1e-3), ("µM", 1e-3), ("μm", 1e-3)])
def test_concentration_factors(word, factor):
    assert units.conc_factor_to_mM(word) == pytest.approx(factor)


def test_unknown_unit_names_the_choices():
    with pytest.raises(KeyError, match="unknown volume unit 'gallon'"):
        units.volume_factor_to_uL("gallon")


def test_amount_from_concentration_and_volume():
    # 100 mM in 250 uL = 25 umol (mmol/L x uL = nmol; common arithmetic, no source needed)
    assert units.amount_umol(100.0, 250.0) == pytest.approx(25.0)


@pytest.mark.parametrize("word,expected", [("umol", "umol"), ("µmol", "umol"), ("UMOL", "umol"),
                                           ("mg", "mg"), ("mol%", "mol%"), ("mol %", "mol%"), ("g", None)])
def test_loading_units(word, expected):
    assert units.normalise_loading_unit(word) == expected


# ANSI/SLAS 4-2004 (R2012) "Footprint dimensions"/"Well positions" for microplates: 24 = 4 x 6,
# 48 = 6 x 8, 96 = 8 x 12, 384 = 16 x 24 (rows lettered from A, columns numbered from 1).
@pytest.mark.parametrize("fmt,rows,cols,last", [(24, 4, 6, "D6"), (48, 6, 8, "F8"), (96, 8, 12, "H12"),
                                                (384, 16, 24, "P24")])
def test_slas_well_positions(fmt, rows, cols, last):
    assert plates.FORMATS[fmt] == (rows, cols)
    w = plates.all_wells(fmt)
    assert len(w) == fmt and w["well"].iloc[0] == "A1" and w["well"].iloc[-1] == last
    assert w["well"].is_unique


def test_parse_wells_accepts_padding_and_case():
    out = plates.parse_wells(["a01", " H12", "b 3", "P24", "Q1", "A0", "", None, "A100"])
    assert list(out["well"].iloc[:4]) == ["A1", "H12", "B3", "P24"]
    assert out["well"].iloc[4:].isna().all()
    assert list(out["row"].iloc[:4]) == [0, 7, 1, 15] and list(out["col"].iloc[:4]) == [0, 11, 2, 23]


def test_edge_ring():
    w = plates.all_wells(96)
    edge = plates.is_edge(w["row"], w["col"], 96)
    assert edge.sum() == 2 * 12 + 2 * 6  # 36 outer wells on a 96-well plate
    assert not edge[w["well"] == "B2"].any()


def test_settings_override_order():
    s = AnalysisSettings.from_mapping({"reference_temperature_c": 50, "unknown": 1}, confidence=0.9)
    assert s.reference_temperature_c == 50.0 and s.confidence == 0.9
    assert s.conversion_window_pct == 50.0          # the default: the generic law's early window
    assert {x.name for x in SETTINGS} == set(AnalysisSettings().to_dict())


@pytest.mark.parametrize("text,safe", [
    ('=HYPERLINK("http://x")', '\'=HYPERLINK("http://x")'),
    ("@SUM(A1:A9)", "'@SUM(A1:A9)"),
    ("+cmd|' /C calc'!A0", "'+cmd|' /C calc'!A0"),
    ("-1.5", "-1.5"), ("+3", "+3"), ("-x", "'-x"), ("Pd/C", "Pd/C"), ("", ""),
])
def test_formula_neutralising(text, safe):
    # OWASP "CSV Injection" guidance: prefix cells starting with = + - @ (tab, CR) with a quote
    assert neutralise(text) == safe


def test_neutralise_frame_keeps_numbers_and_input():
    df = pd.DataFrame({"name": ["=1+1", "ok"], "x": [1.0, math.nan]})
    out = neutralise_frame(df)
    assert out["name"].tolist() == ["'=1+1", "ok"] and df["name"].iloc[0] == "=1+1"
    assert np.isnan(out["x"].iloc[1])


def test_settings_out_of_range_are_refused_by_the_settings_themselves():
    from screenlab.errors import UsageError

    with pytest.raises(UsageError, match=r"confidence = 7 is out of range.*conversion_window_pct = -5"):
        AnalysisSettings.from_mapping({"confidence": 7, "conversion_window_pct": -5})
    with pytest.raises(UsageError, match="confidence"):
        AnalysisSettings(confidence=1.0)
    with pytest.raises(UsageError, match="reference_temperature_c"):
        AnalysisSettings(reference_temperature_c=-300.0)
    with pytest.raises(UsageError, match="min_window_points"):
        AnalysisSettings.from_mapping({"min_window_points": 2.5})
    assert AnalysisSettings.from_mapping({"confidence": 0.5, "zprime_min": -2}).confidence == 0.5


def test_units_are_written_with_the_micro_sign_for_reading_only():
    from screenlab.units import shown_unit

    assert [shown_unit(u) for u in ("umol", "uL", "uM", "mg", "mol%", "mM")] == ["µmol", "µL", "µM", "mg", "mol%", "mM"]
