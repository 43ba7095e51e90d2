"""screenlab.pipeline: the one analysis path, and the ring blanks it leaves out.

Rule (common practice, no source): when the sample wells on a plate's outer ring read differently
from its interior (the edge test of plate quality), the ring blanks would misstate the background
of the interior wells, so a plate that also has interior blanks has its ring blanks left out of the
blank means (flag ``blank_left_out``). The demo's th-screen-2026 campaign has such a plate.
"""
from __future__ import annotations

import io
from contextlib import redirect_stdout

import numpy as np
import pandas as pd
import pytest

from screenlab.cli import main
from screenlab.kinetics import after_rates, analyse_kinetics
from screenlab.pipeline import analyse, kinetics, settings_for
from screenlab.plates import is_edge
from screenlab.store import Store


@pytest.fixture(scope="module")
def th_screen(demo_store):
    store = Store(demo_store, read_only=True)
    try:
        return store.load_campaign("th-screen-2026")
    finally:
        store.close()


def _edge_plates(quality: pd.DataFrame) -> set[str]:
    return set(quality.loc[quality["flags"].str.split(";").apply(lambda f: "edge_effect" in f), "plate"].astype(str))


def _ring_blanks(w: pd.DataFrame, data, plates: set[str]) -> np.ndarray:
    """The rule in plain steps: blank wells on the outer ring of ``plates``, on a plate that has an
    interior blank too."""
    fmt = w["plate"].map(data.plates.set_index("plate")["format"]).to_numpy(dtype=np.int64)
    ring = is_edge(w["row"].to_numpy(), w["col"].to_numpy(), fmt)
    blank = (w["role"] == "blank").to_numpy()
    on = w["plate"].astype(str).isin(plates).to_numpy()
    interior_blank = pd.Series(blank & ~ring & on).groupby(w["plate"].to_numpy()).transform("any").to_numpy()
    return blank & ring & on & interior_blank


def _ring_samples(w: pd.DataFrame, data, plates: set[str]) -> np.ndarray:
    """The rule in plain steps: sample and benchmark wells on the outer ring of ``plates`` whose
    group (plate, catalyst, temperature, loading, substrate level, factor levels) has a well in
    the plate's interior too."""
    fmt = w["plate"].map(data.plates.set_index("plate")["format"]).to_numpy(dtype=np.int64)
    ring = is_edge(w["row"].to_numpy(), w["col"].to_numpy(), fmt)
    cat = w["role"].isin(["sample", "reference"]).to_numpy()
    on = w["plate"].astype(str).isin(plates).to_numpy()
    keys = ["plate", "catalyst", "temperature_c", "loading", "loading_unit", "substrate_conc_mM",
            *data.factor_names]
    interior = pd.Series(cat & ~ring & on).groupby([w[k] for k in keys], dropna=False).transform("any").to_numpy()
    return cat & ring & on & interior


def test_ring_samples_of_edge_effect_plates_are_left_out_where_the_interior_carries_them(th_screen):
    """On the demo's TH-70 (its ring evaporates and reads high), the ring wells of a group with an
    interior well on that plate are left out of the group; S-NI-SI, inactive, read active from its
    two ring wells while its interior well, reading like the blank, was taken for a failed well."""
    data = th_screen
    a = analyse(data)
    w = a.kinetics.wells
    expected = _ring_samples(w, data, _edge_plates(a.quality))
    left_out = w["flags"].astype(str).str.split(";").apply(lambda f: "edge_left_out" in f).to_numpy()
    assert expected.sum() > 10
    np.testing.assert_array_equal(left_out, expected)
    r = a.kinetics.rates
    ni = r[(r["catalyst"] == "S-NI-SI") & (r["temperature_c"] == 70.0)].iloc[0]
    assert ni["censored"] == "upper" and "excluded_edge_wells" in ni["flags"]
    ni_wells = w[(w["catalyst"] == "S-NI-SI") & (w["plate"] == "TH-70")]
    assert not ni_wells["flags"].astype(str).str.contains("failed_well").any()


def test_ring_blanks_of_edge_effect_plates_are_left_out(th_screen):
    data = th_screen
    a = analyse(data)
    edge_plates = _edge_plates(a.quality)
    assert edge_plates, "the demo campaign has a plate with an edge effect"
    w = a.kinetics.wells
    expected = _ring_blanks(w, data, edge_plates)
    left_out = w["flags"].astype(str).str.split(";").apply(lambda f: "blank_left_out" in f).to_numpy()
    assert expected.any()
    np.testing.assert_array_equal(left_out, expected)


def test_one_pass_equals_the_analysis_repeated_without_those_blanks(th_screen):
    # the definition in plain steps: analyse with every blank, find the edge-effect plates in plate
    # quality, then repeat everything from the blank step without their ring blanks
    data = th_screen
    settings = settings_for(data)
    a = analyse(data, settings)
    full = analyse_kinetics(data, settings)
    drop = _ring_blanks(full.per_well, data, _edge_plates(a.quality))
    ring = _ring_samples(full.per_well, data, _edge_plates(a.quality))
    two_pass = after_rates(data, settings, full.amounts, full.per_well, full.selectivity, drop_blank=drop,
                           drop_wells=ring)
    one_pass = kinetics(data, settings)
    for name in ("wells", "blanks", "rates", "arrhenius", "orders"):
        pd.testing.assert_frame_equal(getattr(one_pass, name), getattr(two_pass, name), check_exact=True, obj=name)
        pd.testing.assert_frame_equal(getattr(a.kinetics, name), getattr(two_pass, name), check_exact=True, obj=name)


def test_rates_command_shows_the_analysis_the_ranking_and_the_app_read(demo_store, th_screen):
    # `screenlab rates` prints the rates table of pipeline.analyse (which `rank` and the app's pages
    # read), ring blanks of the edge-effect plate left out: same rows, same TOF intervals
    buf = io.StringIO()
    with redirect_stdout(buf):
        assert main(["rates", "--store", str(demo_store), "--campaign", "th-screen-2026", "--format", "csv"]) == 0
    shown = pd.read_csv(io.StringIO(buf.getvalue()))
    table = analyse(th_screen).kinetics.rates
    assert len(shown) == len(table)
    for col in ("tof_per_h", "tof_ci_low", "tof_ci_high", "enhancement"):
        np.testing.assert_allclose(shown[col].to_numpy(float), table[col].to_numpy(float), rtol=1e-12,
                                   equal_nan=True, err_msg=col)


def test_edge_blanks_of_wells_without_a_known_plate_is_nothing_to_leave_out(small_synthetic):
    # wells whose plate is missing have no ring: an edge effect flagged on a plate leaves none out
    from screenlab.pipeline import edge_blanks

    w = pd.DataFrame({"plate": pd.Series([None, None], dtype="str"), "well": ["A1", "B2"], "row": [0, 1],
                      "col": [0, 1], "role": ["blank", "blank"]})
    edge = pd.DataFrame({"plate": [small_synthetic.plates["plate"].iloc[0]], "edge_effect": [True]})
    assert edge_blanks(w, small_synthetic, edge=edge) is None
