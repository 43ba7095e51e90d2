"""The next-round campaign folder: design rules and acceptance by the campaign reader."""
from __future__ import annotations

import shutil
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screenlab.errors import UsageError
from screenlab.export.nextround import design_next_round
from screenlab.plates import is_edge

DEMO = Path(__file__).resolve().parents[1] / "demo_campaign" / "th-screen-2026"


@pytest.fixture(scope="module")
def demo():
    from screenlab.ingest.reader import read_campaign

    if not DEMO.exists():
        pytest.skip("demo campaign not generated")
    return read_campaign(DEMO).data


def _with_time_zero(folder: Path, tmp: Path) -> Path:
    """A copy with one t = 0 reading (value 0) per filled well: lets the reader check the rest."""
    dst = tmp / "with_readings"
    shutil.copytree(folder, dst)
    lay = pd.read_csv(dst / "layout.csv")
    filled = lay[lay["role"] != "empty"]
    pd.DataFrame({"plate": filled["plate"], "well": filled["well"], "time": 0, "value": 0}).to_csv(
        dst / "readings.csv", index=False)
    return dst


def test_folder_is_read_back_with_the_design(demo, tmp_path):
    from screenlab.ingest.reader import read_campaign

    picks = ["RU-01", "RU-04", "MN-01"]
    out = design_next_round(tmp_path / "nr", demo, picks, seed=3, temperatures_c=[50, 60, 70])
    assert sorted(p.name for p in out.iterdir()) == ["campaign.toml", "catalysts.csv", "layout.csv", "plates.csv"]
    back = read_campaign(_with_time_zero(out, tmp_path)).data
    w = back.wells
    assert back.name == "th-screen-2026-next"
    assert sorted(back.plates["temperature_c"].unique()) == [50.0, 60.0, 70.0]
    # benchmark and blanks on every plate
    per = w.groupby(["plate", "role"]).size().unstack(fill_value=0)
    assert (per["reference"] == 4).all() and (per["blank"] == 4).all()
    # nothing compared sits on the outer ring
    filled = w[w["role"] != "empty"]
    assert not is_edge(filled["row"], filled["col"], 96).any()
    # each candidate x3 at its standard condition on every plate; loading series at 70 degC only
    samp = w[w["role"] == "sample"]
    std = demo.wells[demo.wells["catalyst"].isin(picks)].groupby("catalyst")["loading"].agg(lambda s: s.mode()[0])
    for cat in picks:
        c = samp[samp["catalyst"] == cat]
        assert set(c["temperature_c"]) == {50.0, 60.0, 70.0}
        at_std = c[np.isclose(c["loading"], std[cat])]
        assert at_std.groupby("temperature_c").size().tolist() == [3, 3, 3]
        hot = c[c["temperature_c"] == 70.0]
        np.testing.assert_allclose(sorted(set(hot["loading"] / std[cat])), [0.5, 1.0, 2.0])
    # units and factor levels carried over
    assert (samp["substrate_conc_mM"] == 200.0).all() and (samp["volume_uL"] == 500.0).all()
    assert "base" in back.factor_names and (samp["base"] == "KOtBu").all()


def test_seeded_positions(demo, tmp_path):
    a = design_next_round(tmp_path / "a", demo, ["RU-01", "RU-04"], seed=7)
    b = design_next_round(tmp_path / "b", demo, ["RU-01", "RU-04"], seed=7)
    c = design_next_round(tmp_path / "c", demo, ["RU-01", "RU-04"], seed=8)
    la, lb, lc = (pd.read_csv(p / "layout.csv") for p in (a, b, c))
    pd.testing.assert_frame_equal(la, lb)
    assert not la["role"].equals(lc["role"])


def test_overflow_spills_to_more_plates(demo, tmp_path):
    cats = demo.catalysts["catalyst"].tolist()[:20]
    out = design_next_round(tmp_path / "big", demo, cats, temperatures_c=[60], seed=0, loading_factors=())
    plates = pd.read_csv(out / "plates.csv")
    lay = pd.read_csv(out / "layout.csv")
    # 20 (19 without the benchmark if listed) x 3 = 57-60 wells + 8 controls > 60 interior wells
    assert len(plates) == 2
    assert (lay[lay.role == "reference"].groupby("plate").size() == 4).all()


def test_plate_too_small(demo, tmp_path):
    with pytest.raises(UsageError):
        design_next_round(tmp_path / "x", demo, ["RU-01"], fmt=24, n_blanks=4, n_reference=4)
    with pytest.raises(UsageError):
        design_next_round(tmp_path / "x", demo, ["NOPE"])


def test_manifest_is_valid_toml(demo, tmp_path):
    out = design_next_round(tmp_path / "t", demo, ["RU-01"], name='odd "name" \\ x')
    doc = tomllib.loads((out / "campaign.toml").read_text())
    assert doc["campaign"]["name"] == 'odd "name" \\ x'
    assert doc["units"] == {"time": "min", "concentration": "mM", "volume": "uL"}
    assert doc["readout"]["kind"] == "yield"


def test_reader_accepts_folder_without_readings(demo, tmp_path):
    from screenlab.ingest.reader import read_campaign

    out = design_next_round(tmp_path / "nr", demo, ["RU-01", "RU-04"], seed=1)
    read_campaign(out)
