"""Two linked rounds for the decision, history and report tests (invented data, tests only).

``add_second_round(store_path, tmp)`` records a decision on the demo campaign th-screen-2026
(the top 3 by TOF at 60 degC), lays out its next round with ``design_next_round`` (which names
the parent campaign and the decision in campaign.toml), renames RU-04 to RU-04-B2 with
``alias = RU-04`` (a second batch), writes invented readings and imports the folder.

The readings follow first-order kinetics with the rate constants of :data:`K_PER_H` at every
temperature, times the Arrhenius factor of :data:`EA_KJ_MOL` about 60 degC, so that the ratio of
two catalysts' initial TOFs at 60 degC is the ratio of their rate constants (same sites per well:
every catalyst here is dosed at 0.5 umol). The benchmark ratio of the history can be checked
against that plain arithmetic.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

ROUND1 = "th-screen-2026"
ROUND2 = "th-screen-2026-r2"
NOTE = "RU-01, RU-02 and RU-04 lead; confirm over 50-70 C with a loading series."
#: pseudo-first-order rate constants of the catalysed path at 60 degC (h-1); blanks: the background
K_PER_H = {"RU-01": 0.60, "RU-02": 0.40, "RU-04-B2": 0.30, "REF-RU": 0.25, None: 0.004}
EA_KJ_MOL = 55.0
TIMES_MIN = (0, 10, 20, 30, 45, 60, 90, 120)


def round2_readings(folder: Path, seed: int = 3) -> Path:
    """Write readings.csv for the next-round folder (yield percent, TIMES_MIN)."""
    from scipy.constants import R

    lay = pd.read_csv(folder / "layout.csv")
    plates = pd.read_csv(folder / "plates.csv").set_index("plate")
    lay = lay[lay["role"] != "empty"].reset_index(drop=True)
    t_c = plates.loc[lay["plate"], "temperature_c"].to_numpy(float)
    factor = np.exp(-EA_KJ_MOL * 1e3 / R * (1 / (t_c + 273.15) - 1 / 333.15))
    cat = lay["catalyst"].where(lay["catalyst"].notna(), None)
    k60 = np.array([K_PER_H.get(c, K_PER_H[None]) if isinstance(c, str) else K_PER_H[None] for c in cat])
    # loading series: the catalysed part scales with the loading (0.5 umol standard)
    load = lay["loading"].to_numpy(float)
    scale = np.where(np.isfinite(load), load / 0.5, 0.0)
    k = (np.where(np.isfinite(load), k60 * scale, 0.0) + K_PER_H[None]) * factor
    rng = np.random.default_rng(seed)
    k = k * rng.lognormal(0.0, 0.04, size=len(k))
    t_h = np.asarray(TIMES_MIN, float) / 60.0
    y = 100.0 * (1.0 - np.exp(-np.outer(k, t_h))) + rng.normal(0.0, 0.2, size=(len(k), len(t_h)))
    y[:, 0] = 0.0
    out = pd.DataFrame({"plate": np.repeat(lay["plate"].to_numpy(), len(t_h)),
                        "well": np.repeat(lay["well"].to_numpy(), len(t_h)),
                        "time": np.tile(TIMES_MIN, len(lay)), "value": np.round(np.clip(y, -1, 100), 3).ravel()})
    out.to_csv(folder / "readings.csv", index=False)
    return folder


def next_round_folder(store_path: Path, tmp: Path, *, note: str = NOTE, author: str = "T. Lead") -> tuple[Path, int]:
    """Record the decision on round 1 and write the next-round folder (with readings); returns
    (folder, decision number)."""
    from screenlab.export.decision import draft_decision
    from screenlab.export.nextround import design_next_round
    from screenlab.pipeline import analyse
    from screenlab.stats.ranking import rank_candidates
    from screenlab.store import Store
    from screenlab.store.decisions import campaign_version, record_decision

    store = Store(store_path)
    version = campaign_version(store, ROUND1)
    data = store.load_campaign(ROUND1)
    a = analyse(data)
    r = rank_candidates(a.kinetics, a.quality, metric="tof", top_k=3, draws=2000, seed=1,
                        confidence=a.settings.confidence, catalysts=data.catalysts)
    picks = r[r["rank"].notna() & (r["role"] != "reference")]["catalyst"].head(3).tolist()
    draft = draft_decision(r, picks, campaign=ROUND1, note=note, author=author, settings=a.settings, top_k=3,
                           draws=2000, seed=1, catalysts=data.catalysts, campaign_version=version)
    done = record_decision(store, draft)
    folder = design_next_round(tmp / "round2", data, picks, temperatures_c=[50, 60, 70], seed=2, name=ROUND2,
                               decision=done.decision)
    cats = pd.read_csv(folder / "catalysts.csv")
    cats["alias"] = np.where(cats["catalyst"] == "RU-04", "RU-04", "")
    cats.loc[cats["catalyst"] == "RU-04", "catalyst"] = "RU-04-B2"
    cats.to_csv(folder / "catalysts.csv", index=False)
    lay = pd.read_csv(folder / "layout.csv")
    lay.loc[lay["catalyst"] == "RU-04", "catalyst"] = "RU-04-B2"
    lay.to_csv(folder / "layout.csv", index=False)
    return round2_readings(folder), done.decision


def add_second_round(store_path: Path, tmp: Path) -> int:
    """Decision on round 1, next round laid out, run (invented readings) and imported; returns the decision."""
    from screenlab.ingest import read_campaign
    from screenlab.store import Store

    folder, number = next_round_folder(store_path, tmp)
    rep = Store(store_path).import_campaign(read_campaign(folder))
    assert rep.status == "imported", rep.message
    return number
