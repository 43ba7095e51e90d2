"""The synthetic campaign generator: folder round trip, structure, determinism, generating kinetics."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from screenlab.ingest import read_campaign
from screenlab.synthetic import REFERENCE_CATALYST, SyntheticSpec, synthetic_campaign, truth_table, write_campaign_folder


@pytest.mark.parametrize("spec", [SyntheticSpec(n_plates=5, seed=3), SyntheticSpec(n_plates=2, fmt=384, seed=1,
                                                                                    n_times=5)])
def test_folder_reads_back_as_the_same_campaign(tmp_path, spec):
    data = synthetic_campaign(spec)
    write_campaign_folder(tmp_path / "c", spec)
    with warnings.catch_warnings():
        warnings.simplefilter("error")          # the reader finds nothing worth a note
        back = read_campaign(tmp_path / "c").data
    for name in ("catalysts", "plates", "wells", "readings"):
        pd.testing.assert_frame_equal(getattr(data, name), getattr(back, name), check_exact=False, rtol=1e-12)
    assert back.manifest == data.manifest
    assert back.factor_names == data.factor_names == ("solvent",)
    assert back.content_hash() == data.content_hash()


def test_layout_follows_the_design():
    spec = SyntheticSpec(n_plates=6, seed=2)    # one full set of 4 temperatures and half a set
    d = synthetic_campaign(spec)
    w = d.wells
    assert len(w) == 6 * 96 and len(d.plates) == 6
    per_plate = w.groupby(["plate", "role"]).size().unstack(fill_value=0)
    assert (per_plate["blank"] == 4).all() and (per_plate["reference"] == 4).all()
    assert (per_plate["sample"] == 29 * 3).all() and (per_plate["empty"] == 1).all()
    assert (w.loc[w["role"] == "reference", "catalyst"] == REFERENCE_CATALYST).all()
    assert w.loc[w["role"].isin(["blank", "empty"]), "catalyst"].isna().all()
    # every candidate of a set: 3 wells at each of the set's temperatures
    s = w[w["role"] == "sample"].groupby(["catalyst", "temperature_c"]).size()
    assert (s == 3).all()
    n_temps = s.groupby(level=0).size()
    assert sorted(n_temps.unique()) == [2, 4]    # the half set has two temperatures
    assert len(n_temps) == spec.n_candidates == 2 * 29
    assert len(d.readings) == spec.n_readings == 6 * 95 * 8
    assert d.readings.groupby(["plate", "well"]).size().eq(8).all()
    assert set(d.plates["temperature_c"]) == {40.0, 50.0, 60.0, 70.0}
    # positions are shuffled per plate, not the same layout copied
    roles = w.pivot(index="plate", columns="well", values="role")
    assert roles.nunique(axis=0).gt(1).any()


def test_same_seed_same_campaign_other_seed_other_campaign():
    a = synthetic_campaign(n_plates=3, seed=7)
    b = synthetic_campaign(n_plates=3, seed=7)
    c = synthetic_campaign(n_plates=3, seed=8)
    assert a.content_hash() == b.content_hash()
    assert a.content_hash() != c.content_hash()


def test_noise_free_courses_follow_first_order_arrhenius_kinetics():
    # Independent re-computation of the generating model: Arrhenius k(T) = k_ref exp(-Ea/R (1/T - 1/Tref))
    # with R and 0 degC from scipy.constants (CODATA), and the first-order course Y = 1 - exp(-k t)
    # (integrated first-order rate law, e.g. Atkins' Physical Chemistry, "integrated rate laws").
    spec = SyntheticSpec(n_plates=4, seed=11, noise_pct=0.0)
    d = synthetic_campaign(spec)
    truth = truth_table(spec).set_index("catalyst")
    R = constants.R
    tref = 60.0 + constants.zero_Celsius

    def arr(v, ea, t_c):
        return v * np.exp(-ea * 1e3 / R * (1 / (t_c + constants.zero_Celsius) - 1 / tref))

    m = d.readings.merge(d.wells, on=["plate", "well"])
    blank = arr(truth.loc["(uncatalysed)", "tof_ref_per_h"], truth.loc["(uncatalysed)", "ea_kj_mol"],
                m["temperature_c"].to_numpy())
    cat = m["catalyst"].fillna("(uncatalysed)").to_numpy()
    tof = np.where(m["role"].isin(["sample", "reference"]),
                   arr(truth.loc[cat, "tof_ref_per_h"].to_numpy(), truth.loc[cat, "ea_kj_mol"].to_numpy(),
                       m["temperature_c"].to_numpy()), 0.0)
    site_mM = m["loading"].fillna(0).to_numpy() / m["volume_uL"].to_numpy() * 1e3   # umol/uL -> mM
    k = tof * site_mM / m["substrate_conc_mM"].to_numpy() + blank
    expected = 100 * (1 - np.exp(-k * m["time_h"].to_numpy()))
    np.testing.assert_allclose(m["value"].to_numpy(), expected, atol=0.005 + 1e-9)   # two decimals in the files
    assert (m.loc[m["time_h"] == 0, "value"] == 0).all()


def test_analysis_recovers_the_generating_activation_energies():
    # The kinetics core on generated data should find the Ea the data were made with; the median error
    # over active candidates is a loose check of generator and core together (common practice, no source).
    from screenlab.kinetics import analyse_kinetics

    spec = SyntheticSpec(n_plates=8, seed=5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        kin = analyse_kinetics(synthetic_campaign(spec))
    truth = truth_table(spec).rename(columns={"ea_kj_mol": "ea_true", "tof_ref_per_h": "tof_true"})
    m = kin.arrhenius.merge(truth.drop(columns="role"), on="catalyst")
    m = m[(m["tof_true"] > 2) & np.isfinite(m["ea_kj_mol"]) & (m["catalyst"] != "(uncatalysed)")]
    assert len(m) >= 40
    err = m["ea_kj_mol"] - m["ea_true"]
    assert abs(err.median()) < 2.0
    assert err.abs().median() < 4.0
    # TOF at the reference temperature within 25 % for most (initial slopes run slightly low on curved courses)
    ratio = m["tof_ref_per_h"] / m["tof_true"]
    assert ((ratio > 0.75) & (ratio < 1.25)).mean() > 0.9


@pytest.mark.parametrize("kwargs", [dict(fmt=100), dict(n_plates=0), dict(temperatures_c=()),
                                    dict(fmt=24, n_blanks=12, n_reference=12)])
def test_impossible_specs_are_refused(kwargs):
    with pytest.raises(ValueError):
        SyntheticSpec(**kwargs)
