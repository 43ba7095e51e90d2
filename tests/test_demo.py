"""The demo campaigns: determinism, the import contract, the scenario and its planted flaws.

Outside references are named beside each check (scipy.integrate, scipy.stats, scipy.constants,
IUPAC/CIAAW atomic weights and textbook worked examples from docs/check-values.md).
"""
from __future__ import annotations

import csv
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants, integrate, stats

from screenlab import demo
from screenlab.demo.common import csv_bytes
from screenlab.plates import FORMATS, is_edge, parse_wells

REPO = Path(__file__).resolve().parent.parent
COMMITTED = REPO / "demo_campaign"
TABLES = ("catalysts.csv", "plates.csv", "layout.csv", "readings.csv")


@pytest.fixture(scope="module")
def fresh(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    demo.generate_demo(out)
    return out


def _files(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def _read_grids(folder: Path, layout: pd.DataFrame) -> pd.DataFrame:
    """The readings of a readings/ folder of plate grids, read by the contract's rules
    (docs/campaign-format.md, "Other forms of readings") with the csv module: lines above the first
    'time' row skipped; per block the time, the header of column numbers and one row per plate
    row; empty cells are no reading; positions the layout marks empty are not imported."""
    rows = []
    for path in sorted((folder / "readings").glob("*.csv")):
        plate = path.stem
        with open(path, newline="", encoding="utf-8") as fh:
            lines = list(csv.reader(fh))
        time = cols = None
        for line in lines:
            if not any(line):
                continue
            if line[0] == "time":
                time, cols = float(line[1]), None
            elif time is not None and line[0] == "":
                cols = [int(c) for c in line[1:] if c]
            elif time is not None and cols is not None:
                for c, v in zip(cols, line[1:]):
                    if v != "":
                        rows.append({"plate": plate, "well": f"{line[0]}{c}", "time": time, "value": float(v)})
    rd = pd.DataFrame(rows)
    used = layout.loc[layout["role"] != "empty", ["plate", "well"]]
    return rd.merge(used, on=["plate", "well"], how="inner")


def _load(root: Path, name: str):
    folder = root / name
    man = tomllib.loads((folder / "campaign.toml").read_text())
    frames = {t[:-4]: pd.read_csv(folder / t, keep_default_na=True) for t in TABLES if (folder / t).is_file()}
    if "readings" not in frames:
        frames["readings"] = _read_grids(folder, frames["layout"])
    return man, frames


# ---------------------------------------------------------------------------------------------
# determinism and the committed copy

def test_generator_is_deterministic(fresh, tmp_path):
    again = tmp_path / "again"
    demo.generate_demo(again)
    fa, fb = _files(fresh), _files(again)
    assert fa.keys() == fb.keys()
    assert all(fa[k] == fb[k] for k in fa)
    # a different seed really changes the data (the seed is used)
    other = demo.build_campaigns(demo.DEFAULT_SEED + 1)[0].readings
    same = demo.build_campaigns(demo.DEFAULT_SEED)[0].readings
    assert not other["value"].equals(same["value"])


def test_committed_demo_equals_fresh_generation(fresh):
    committed, new = _files(COMMITTED), _files(fresh)
    assert sorted(committed) == sorted(new), "run python scripts/make_demo.py"
    differ = [k for k in new if committed[k] != new[k]]
    assert not differ, f"demo_campaign/ is stale in {differ}; run python scripts/make_demo.py"


def test_generate_replaces_only_its_own_folders(tmp_path):
    keep = tmp_path / "notes.txt"
    keep.write_text("mine")
    stale = tmp_path / "th-screen-2026" / "old.csv"
    stale.parent.mkdir()
    stale.write_text("x")
    demo.generate_demo(tmp_path)
    assert keep.read_text() == "mine" and not stale.exists()


def test_demo_folder_is_the_checkout_folder(monkeypatch, tmp_path):
    monkeypatch.delenv("SCREENLAB_DEMO_DIR", raising=False)
    assert demo.demo_folder() == COMMITTED
    monkeypatch.setenv("SCREENLAB_DEMO_DIR", str(tmp_path))
    assert demo.demo_folder() == tmp_path


# ---------------------------------------------------------------------------------------------
# the import contract, checked independently of screenlab.ingest

@pytest.mark.parametrize("name", demo.CAMPAIGNS)
def test_campaign_follows_the_format(fresh, name):
    man, f = _load(fresh, name)
    assert man["campaign"]["name"] == name
    assert man["units"]["time"] in ("s", "min", "h")
    assert man["units"]["concentration"] in ("M", "mM", "uM")
    assert man["units"]["volume"] in ("L", "mL", "uL")
    assert man["readout"]["kind"] in ("conversion", "yield", "product_conc", "absorbance")
    cat, pl, lay, rd = f["catalysts"], f["plates"], f["layout"], f["readings"]
    assert cat["catalyst"].is_unique and pl["plate"].is_unique
    assert set(pl["format"]) <= set(FORMATS)
    assert set(lay["role"]) <= {"sample", "blank", "reference", "empty"}
    assert not lay.duplicated(["plate", "well"]).any()
    # wells valid for their plate's format
    parsed = parse_wells(lay["well"])
    fmt = lay["plate"].map(pl.set_index("plate")["format"])
    nr = fmt.map(lambda f_: FORMATS[f_][0])
    nc = fmt.map(lambda f_: FORMATS[f_][1])
    assert (parsed["well"] == lay["well"]).all()
    assert ((parsed["row"] < nr) & (parsed["col"] < nc)).all()
    # catalysed wells name a known catalyst with a loading; blanks and samples have substrate
    cat_wells = lay[lay["role"].isin(["sample", "reference"])]
    assert cat_wells["catalyst"].isin(cat["catalyst"]).all()
    assert cat_wells["loading"].gt(0).all() and cat_wells["loading_unit"].isin(["umol", "mg", "mol%"]).all()
    filled = lay[lay["role"] != "empty"]
    assert filled["substrate_conc"].gt(0).all() and filled["volume"].gt(0).all()
    assert lay.loc[lay["role"] == "blank", "catalyst"].isna().all()
    # mg loadings need a molar mass or a metal content (contract: catalysts.csv)
    mg = cat.set_index("catalyst").loc[cat_wells.loc[cat_wells["loading_unit"] == "mg", "catalyst"].unique()]
    assert (mg["molar_mass_g_mol"].notna() | mg["metal_wt_pct"].notna()).all()
    # readings refer to filled wells, times >= 0, one extra named factor column at least
    keys = rd[["plate", "well"]].drop_duplicates().merge(lay, how="left", on=["plate", "well"])
    assert keys["role"].notna().all() and (keys["role"] != "empty").all()
    assert rd["time"].ge(0).all() and rd["value"].notna().all()
    extra = set(lay.columns) - {"plate", "well", "role", "catalyst", "loading", "loading_unit",
                                "substrate_conc", "volume", "temperature_c"}
    assert extra
    # every plate has blanks and the benchmark
    for role in ("blank", "reference"):
        assert set(lay.loc[lay["role"] == role, "plate"]) == set(pl["plate"])
    if man["readout"]["kind"] in ("conversion", "yield"):
        # exported as measured: noise around 0 and full conversion stays, inside the import's -5..110 %
        assert man["readout"]["scale"] == "percent" and rd["value"].between(-5, 110).all()


def test_truth_is_outside_the_campaign_folders(fresh):
    for name in demo.CAMPAIGNS:
        assert not (fresh / name / "truth.csv").exists()
        truth = demo.read_truth(name, fresh)
        _, f = _load(fresh, name)
        assert set(truth["catalyst"]) == set(f["catalysts"]["catalyst"]) | {demo.UNCATALYSED}
    assert not (fresh / demo.TRUTH_DIR / "campaign.toml").exists()


def test_readme_covers_flaws_and_safety():
    text = (COMMITTED / "README.md").read_text()
    for word in ("invented", "Failed well", "Edge plate", "Transport-limited", "Deactivation",
                 "Induction", "safety", "exotherm", "pressure", "pyrophoric"):
        assert word.lower() in text.lower(), word


# ---------------------------------------------------------------------------------------------
# the main campaign: scenario

@pytest.fixture(scope="module")
def main(fresh):
    man, f = _load(fresh, "th-screen-2026")
    return man, f, demo.read_truth("th-screen-2026", fresh)


def test_main_campaign_design(main):
    man, f, truth = main
    lay, pl, rd = f["layout"], f["plates"], f["readings"]
    assert man["readout"]["kind"] in ("conversion", "yield")
    cand = truth[truth["role"] == "sample"]
    assert len(cand) >= 24 and cand["family"].nunique() >= 3
    assert set(pl["temperature_c"]) == {40.0, 50.0, 60.0, 70.0}
    screen = lay[lay["plate"].isin(["TH-40", "TH-50", "TH-60", "TH-70"]) & (lay["role"] == "sample")]
    counts = screen.groupby(["plate", "catalyst"]).size()
    assert (counts == 3).all() and len(counts) == 4 * len(cand)
    per_well = rd.groupby(["plate", "well"]).size()
    assert per_well.between(6, 8).all()
    # the three dosing styles of the contract, with IUPAC metal atomic weights
    units = set(lay["loading_unit"].dropna())
    assert {"umol", "mg"} <= units
    cat = f["catalysts"].set_index("catalyst")
    sup = cat[cat["metal_wt_pct"].notna()]
    # CIAAW/IUPAC standard atomic weights (check-values.md section 10, CONFIRMED)
    iupac = {"Ru": 101.07, "Pd": 106.42, "Pt": 195.084, "Ir": 192.217, "Ni": 58.6934, "Cu": 63.546}
    metals = truth.set_index("catalyst").loc[sup.index, "formula"]
    assert len(sup) >= 4
    np.testing.assert_allclose(sup["metal_molar_mass_g_mol"], metals.map(iupac), rtol=1e-9)
    assert sup["dispersion"].between(0, 1).all()
    # loading series (one catalyst, >= 3 loadings) and substrate series (>= 3 levels), one temperature
    ser = lay[lay["plate"] == "TH-60S"]
    by_cat = ser.groupby("catalyst")
    assert by_cat["loading"].nunique().max() >= 3 and by_cat["substrate_conc"].nunique().max() >= 3
    assert lay["base"].dropna().nunique() >= 2


def test_main_truth_spans_the_scenario(main):
    _, _, truth = main
    t = truth.set_index("catalyst")
    blank = t.loc[demo.UNCATALYSED]
    assert 100 <= blank["ea_kj_mol"] <= 110
    act = t[(t["role"] != "blank") & (t["tof_ref_per_h"] > 0)]
    normal = act[act["behaviour"] != "transport_limited"]
    assert normal["ea_kj_mol"].between(35, 95).all()
    assert (act["ea_kj_mol"] < 20).sum() >= 1
    assert act["tof_ref_per_h"].max() / act["tof_ref_per_h"].min() >= 100
    assert 1 <= (t["behaviour"] == "inactive").sum() <= 2
    assert {"deactivating", "induction", "transport_limited"} <= set(t["behaviour"])
    # several indistinguishable in the middle: >= 5 true TOFs within +-10 % of 42 h-1
    assert act["tof_ref_per_h"].between(38, 46).sum() >= 5


def test_failed_well_and_missing_reading(main):
    _, f, _ = main
    rd, lay = f["readings"], f["layout"]
    m = rd.merge(lay, on=["plate", "well"])
    flat = m[m["role"] == "sample"].groupby(["plate", "well"])["value"].max()
    failed = flat[flat == 0.0]
    assert len(failed) == 1 and failed.index[0][0] == "TH-60"
    n = rd.groupby(["plate", "well"]).size()
    assert (n == 7).sum() == 1 and (n == 8).sum() == len(n) - 1


def test_edge_plate_reads_high(main):
    """Outer-ring wells of TH-70 sit above their inner replicates; on TH-60 they do not.

    One-sided Mann-Whitney U test, scipy.stats.mannwhitneyu (outside reference).
    """
    _, f, _ = main
    m = f["readings"].merge(f["layout"], on=["plate", "well"])
    m = m[(m["time"] == 30) & m["role"].isin(["sample", "reference"])]
    wells = parse_wells(m["well"])
    m = m.assign(edge=is_edge(wells["row"], wells["col"], 96))
    p = {}
    for plate in ("TH-60", "TH-70"):
        sub = m[(m["plate"] == plate) & m["value"].between(5, 85)]
        ratio = sub["value"] / sub.groupby("catalyst")["value"].transform("median")
        p[plate] = stats.mannwhitneyu(ratio[sub["edge"]], ratio[~sub["edge"]], alternative="greater").pvalue
    assert p["TH-70"] < 1e-3
    assert p["TH-60"] > 0.01


def test_start_readings_follow_the_noise_model(main):
    """t = 0 readings are N(0, 0.8 %) as exported (not clipped at 0), and some yields near full
    conversion read above 100 % (instrument overshoot). Reference: scipy.stats.kstest / norm."""
    _, f, _ = main
    rd = f["readings"]
    v = rd.loc[rd["time"] == 0, "value"].to_numpy()
    assert (v < 0).any()
    assert stats.kstest(v, stats.norm(scale=0.8).cdf).pvalue > 0.001
    assert (rd["value"] > 100).sum() >= 3


def test_slow_wells_have_three_points_in_the_initial_window(main):
    """Wells whose true yield at 30 min is <= 15 % keep >= 3 readings inside the 20 % window."""
    _, f, truth = main
    m = f["readings"].merge(f["layout"], on=["plate", "well"])
    m = m[m["role"] == "sample"].merge(f["plates"][["plate", "temperature_c"]], on="plate")
    t = truth.set_index("catalyst")
    tw = t.reindex(m["catalyst"].to_numpy())
    blank = t.loc[demo.UNCATALYSED]
    k_b = blank["blank_rate_ref_mM_per_h"] / 200.0 * demo.arrhenius_factor(blank["ea_kj_mol"], m["temperature_c"], 60.0)
    tof = tw["tof_ref_per_h"].to_numpy() * demo.arrhenius_factor(tw["ea_kj_mol"].fillna(0).to_numpy(),
                                                                 m["temperature_c"], 60.0)
    # k_cat = k2 x [sites] with k2 = TOF / [S]0,std (200 mM) and the standard sites in 0.5 mL
    # (series wells with fewer sites are slower, so this only errs towards leaving them out)
    k_cat = tof / 200.0 * tw["sites_umol"].to_numpy() / 0.5
    x30 = demo.first_order_conversion(0.5, k_cat, k_b)
    m = m.assign(x30=x30, normal=(tw["behaviour"] == "normal").to_numpy())
    keyed = m.groupby(["plate", "well"]).agg(x30=("x30", "first"), normal=("normal", "first"),
                                             n_in=("value", lambda v: int((v <= 20).sum())))
    slow = keyed[keyed["normal"] & (keyed["x30"] <= 0.15)]
    assert len(slow) > 100
    assert (slow["n_in"] >= 3).all(), slow[slow["n_in"] < 3]


# ---------------------------------------------------------------------------------------------
# second and third campaigns

def test_absorbance_campaign(fresh):
    man, f = _load(fresh, "ester-hydrolysis-uv")
    assert man["readout"]["kind"] == "absorbance"
    eps, path = man["readout"]["epsilon_M_cm"], man["readout"]["path_length_cm"]
    assert eps > 0 and 0 < path < 1
    cand = f["catalysts"]
    assert 8 <= len(cand) <= 13
    assert set(f["plates"]["format"]) == {96} and 2 <= f["plates"]["temperature_c"].nunique() <= 3
    assert f["readings"].groupby(["plate", "well"]).size().between(10, 12).all()
    # no well reads above full conversion of its substrate (Beer-Lambert ceiling), noise aside
    m = f["readings"].merge(f["layout"], on=["plate", "well"])
    ceiling = demo.beer_lambert_absorbance(m["substrate_conc"], eps, path)
    assert (m["value"] <= ceiling * 1.05 + 0.02).all()
    # the planted air bubble: exactly one reading jumps > 0.2 AU above both neighbours
    v = m.sort_values(["plate", "well", "time"])
    g = v.groupby(["plate", "well"])["value"]
    jump = (v["value"] - g.shift(1) > 0.2) & (v["value"] - g.shift(-1) > 0.2)
    assert jump.sum() == 1 and v.loc[jump, "plate"].iloc[0] == "UV-35"


def test_beer_lambert_against_worked_example():
    # check-values.md section 8 (COMPUTED there from A = eps l c): 50 uM, eps 18000, l 0.56 cm -> 0.504
    assert demo.beer_lambert_absorbance(0.050, 18000, 0.56) == pytest.approx(0.504, rel=1e-12)
    assert demo.beer_lambert_absorbance(0.050, 18380, 0.56) == pytest.approx(0.5146, abs=1e-4)


def test_several_analyte_campaign(fresh):
    man, f = _load(fresh, "henry-chiral-2026")
    an = man["analytes"]
    assert man["readout"]["kind"] in ("yield", "product_conc")
    assert an["main"] == "P" and len(an["enantiomers"]) == 2 and an["byproducts"]
    rd = f["readings"]
    assert set(rd["analyte"]) == set(an["enantiomers"]) | set(an["byproducts"])
    assert f["plates"]["temperature_c"].nunique() == 2
    truth = demo.read_truth("henry-chiral-2026", fresh).set_index("catalyst")
    assert 7 <= (truth["role"] != "blank").sum() <= 10
    # observed ee and selectivity of a fast catalyst at the last reading match the truth
    # (the racemic background dilutes them slightly)
    m = rd.merge(f["layout"], on=["plate", "well"])
    last = m[(m["time"] == m["time"].max()) & (m["catalyst"] == "CU-DA1")]
    w = last.pivot_table(index=["plate", "well"], columns="analyte", values="value").sum()
    ee = 100 * (w["P_R"] - w["P_S"]) / (w["P_R"] + w["P_S"])
    sel = 100 * (w["P_R"] + w["P_S"]) / w.sum()
    assert ee == pytest.approx(truth.loc["CU-DA1", "ee_pct"], abs=4)
    assert sel == pytest.approx(truth.loc["CU-DA1", "selectivity_pct"], abs=3)
    assert (truth["ee_pct"] < 0).any()


# ---------------------------------------------------------------------------------------------
# the generator's equations against outside references

@pytest.mark.parametrize("kd,tau", [(0.0, 0.0), (0.6, 0.0), (0.0, 0.75), (0.4, 0.5)])
def test_integrated_course_matches_ode_solution(kd, tau):
    """X(t) from the closed form equals scipy.integrate.solve_ivp of
    dX/dt = (k_cat a(t) + k_blank)(1 - X), a(t) = (1 - exp(-t/tau)) exp(-kd t)."""
    k_cat, k_b = 1.3, 0.02
    t = np.linspace(0, 6, 25)

    def act(s):
        return (1 - np.exp(-s / tau) if tau > 0 else 1.0) * np.exp(-kd * s)

    sol = integrate.solve_ivp(lambda s, x: (k_cat * act(s) + k_b) * (1 - x), (0, 6), [0.0], t_eval=t,
                              rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(demo.first_order_conversion(t, k_cat, k_b, kd, tau), sol.y[0], atol=1e-8)


def test_arrhenius_factor_against_textbook_examples():
    # OpenStax Chemistry 2e section 12.5 (CONFIRMED answers in check-values.md 2e):
    # rate x 1.47 from 30 to 37 C <-> Ea 43.0 kJ/mol; sucrose 2.1e-11 (27 C) -> 8.5e-11 (37 C), Ea 108 kJ/mol
    assert demo.arrhenius_factor(43.03, 37.0, 30.0) == pytest.approx(1.47, rel=2e-3)
    assert demo.arrhenius_factor(108.22, 37.0, 27.0) == pytest.approx(8.5 / 2.1, rel=2e-3)
    # definition with CODATA R (scipy.constants)
    expect = np.exp(-60e3 / constants.R * (1 / 343.15 - 1 / 333.15))
    assert demo.arrhenius_factor(60.0, 70.0, 60.0) == pytest.approx(expect, rel=1e-12)


def test_molar_mass_against_iupac_values():
    # molar masses from CIAAW/IUPAC standard atomic weights, check-values.md section 10
    # (COMPUTED there from CONFIRMED atomic weights); tolerance +-0.01 g/mol as suggested there
    cases = {"C4H6O4Pd": 224.508, "C18H15P": 262.292, "C16H24Cl2Rh2": 493.079, "NiCl2.6H2O": 237.683,
             "C6H5NO3": 139.110, "K2PtCl4": 415.081, "RuCl3": 207.420, "C72H60P4Pd": 1155.587}
    for formula, mm in cases.items():
        assert demo.molar_mass(formula) == pytest.approx(mm, abs=0.01), formula
    with pytest.raises(ValueError, match="Xx"):
        demo.molar_mass("C2Xx")


def test_sites_follow_the_contract_formulas(main):
    _, f, truth = main
    t = truth.set_index("catalyst")
    cat = f["catalysts"].set_index("catalyst")
    # supported: mg x wt%/100 / M_metal x dispersion, in umol (campaign-format.md)
    r = cat.loc["S-RU-C"]
    assert t.loc["S-RU-C", "sites_umol"] == pytest.approx(
        3.0e3 * r["metal_wt_pct"] / 100 / r["metal_molar_mass_g_mol"] * r["dispersion"], rel=1e-6)
    # weighed complex: mg / molar mass; dimer: umol x sites_per_unit
    assert t.loc["FE-01", "sites_umol"] == pytest.approx(0.30e3 / cat.loc["FE-01", "molar_mass_g_mol"], rel=1e-5)
    assert t.loc["IR-03", "sites_umol"] == pytest.approx(0.25 * 2)


# ---------------------------------------------------------------------------------------------
# with the project's reader, store and kinetics

@pytest.mark.filterwarnings("ignore::screenlab.errors.DataQualityWarning")  # the grid demo's notes
def test_every_demo_campaign_reads_without_error():
    from screenlab import ingest

    found = ingest.find_campaigns(COMMITTED)
    assert sorted(Path(p).name for p in found) == sorted(demo.CAMPAIGNS)
    for folder in found:
        res = ingest.read_campaign(folder)   # raises ValidationError on any problem
        data = getattr(res, "data", res)
        assert data.name == Path(folder).name
        assert len(data.readings) == len(_load(COMMITTED, Path(folder).name)[1]["readings"])
        assert data.factor_names


def test_grid_demo_is_the_generated_long_readings(tmp_path):
    """The campaign delivered as plate grids imports to exactly the readings of its long form
    (the generator's readings written as readings.csv)."""
    from screenlab import ingest

    for c in demo.build_campaigns():
        if c.name not in demo.GRID_CAMPAIGNS:
            continue
        assert not (COMMITTED / c.name / "readings.csv").exists()
        assert sorted(p.stem for p in (COMMITTED / c.name / "readings").iterdir()) == sorted(c.plates["plate"])
        long = tmp_path / c.name
        long.mkdir()
        for f in ("campaign.toml", "catalysts.csv", "plates.csv", "layout.csv"):
            (long / f).write_bytes((COMMITTED / c.name / f).read_bytes())
        (long / "readings.csv").write_bytes(csv_bytes(c.readings))
        with pytest.warns(Warning) as notes:
            grids = ingest.read_campaign(COMMITTED / c.name)
        pd.testing.assert_frame_equal(grids.data.readings, ingest.read_campaign(long).data.readings)
        text = " ".join(str(n.message) for n in notes)
        assert "instrument header" in text and "marks empty" in text


def test_build_demo_store(tmp_path):
    path = tmp_path / "demo.duckdb"
    first = demo.build_demo_store(path)
    assert [r.campaign for r in first] == sorted(demo.CAMPAIGNS)
    assert all(r.status == "imported" for r in first)
    again = demo.build_demo_store(path)
    assert all(r.status == "unchanged" for r in again)


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::screenlab.errors.DataQualityWarning")  # the grid demo's notes
def test_analysis_recovers_the_main_truth():
    """The analysis of the main campaign comes back close to the generating values."""
    from screenlab import ingest
    from screenlab import kinetics as kin
    from screenlab.settings import AnalysisSettings

    data = ingest.read_campaign(COMMITTED / "th-screen-2026").data
    res = kin.analyse_kinetics(data, AnalysisSettings.from_mapping(data.manifest.analysis))
    arr = res.arrhenius.set_index("catalyst")
    truth = demo.read_truth("th-screen-2026").set_index("catalyst")
    good = truth[(truth["behaviour"] == "normal") & (truth["tof_ref_per_h"] >= 10)].index
    ratio = arr.loc[good, "tof_ref_per_h"] / truth.loc[good, "tof_ref_per_h"]
    assert ratio.between(0.7, 1.4).all(), ratio[~ratio.between(0.7, 1.4)]
    dea = (arr.loc[good, "ea_kj_mol"] - truth.loc[good, "ea_kj_mol"]).abs()
    assert dea.median() < 6 and dea.max() < 20
    assert "low_ea" in str(arr.loc["S-PT-AL", "flags"])
    # the background is barely above noise at 40 C and the edge plate inflates the 70 C blanks,
    # so only its order of magnitude is checked (true 105 kJ/mol)
    assert 90 < arr.loc[demo.UNCATALYSED, "ea_kj_mol"] < 135


@pytest.mark.slow
@pytest.mark.parametrize("name", ["ester-hydrolysis-uv", "henry-chiral-2026"])
@pytest.mark.filterwarnings("ignore::screenlab.errors.DataQualityWarning")  # the grid demo's notes
def test_analysis_recovers_the_small_campaigns(name):
    """Absorbance (Beer-Lambert) and several-analyte campaigns: TOF and Ea close to the truth."""
    from screenlab import ingest
    from screenlab import kinetics as kin
    from screenlab.settings import AnalysisSettings

    data = ingest.read_campaign(COMMITTED / name).data
    arr = kin.analyse_kinetics(data, AnalysisSettings.from_mapping(data.manifest.analysis)).arrhenius
    arr = arr.set_index("catalyst")
    truth = demo.read_truth(name).set_index("catalyst")
    act = truth[(truth["role"] != "blank") & (truth["tof_ref_per_h"] > 0)].index
    ratio = arr.loc[act, "tof_ref_per_h"] / truth.loc[act, "tof_ref_per_h"]
    assert ratio.between(0.75, 1.3).all(), ratio
    assert (arr.loc[act, "ea_kj_mol"] - truth.loc[act, "ea_kj_mol"]).abs().max() < 12
