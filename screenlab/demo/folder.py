"""The demo folder: the three campaigns written as campaign folders with their truth tables and
README, found again (checkout, ``$SCREENLAB_DEMO_DIR`` or a generated copy) and imported into a
store."""
from __future__ import annotations

import os
import shutil
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from screenlab.demo import ester_uv, henry, th_screen
from screenlab.demo.common import Campaign, csv_bytes
from screenlab.demo.grids import READINGS_DIR, grid_files
from screenlab.demo.readme import readme
from screenlab.errors import DataQualityWarning

DEFAULT_SEED = 20260
#: campaign folder names, in the order they are generated
CAMPAIGNS = ("th-screen-2026", "ester-hydrolysis-uv", "henry-chiral-2026")
TRUTH_DIR = "_truth"
#: demo campaigns whose readings are delivered as plate grids (``readings/<plate>.csv``), the way a
#: plate reader exports a kinetic read: one block per time point, every position of the plate read
GRID_CAMPAIGNS = ("ester-hydrolysis-uv",)

TRUTH_COLUMNS = ("catalyst, name, family, role, behaviour, ea_kj_mol, tof_ref_per_h, enhancement_ref, "
                 "selectivity_pct, ee_pct, std_loading, loading_unit, sites_umol, formula, kd_ref_per_h, "
                 "induction_tau_ref_h, blank_rate_ref_mM_per_h").split(", ")


def build_campaigns(seed: int = DEFAULT_SEED) -> list[Campaign]:
    """The three demo campaigns as frames (each from its own child of ``SeedSequence(seed)``)."""
    children = np.random.SeedSequence(seed).spawn(len(CAMPAIGNS))
    makers = (th_screen.build, ester_uv.build, henry.build)
    return [make(np.random.default_rng(ss)) for make, ss in zip(makers, children)]


def _truth_frame(c: Campaign) -> pd.DataFrame:
    t = c.truth.reindex(columns=TRUTH_COLUMNS).copy()
    for col in ("enhancement_ref", "sites_umol", "blank_rate_ref_mM_per_h"):
        t[col] = t[col].astype(float).round(6)
    return t



def generate_demo(out_dir, seed: int = DEFAULT_SEED) -> list[Path]:
    """Write the demo campaigns, their truth tables and README.md into ``out_dir``.

    Writes ``out_dir/<campaign>/{campaign.toml, catalysts.csv, plates.csv, layout.csv,
    readings.csv}`` for each name in :data:`CAMPAIGNS` (for :data:`GRID_CAMPAIGNS` the readings as
    plate grids, ``readings/<plate>.csv``, in place of readings.csv), ``out_dir/_truth/<campaign>/truth.csv``
    and ``out_dir/README.md``. Those folders are replaced; nothing else in ``out_dir`` is touched.
    The same seed gives the same bytes. Returns the paths written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    campaigns = build_campaigns(seed)
    for c in campaigns:  # three campaigns
        folder = out / c.name
        if folder.exists():
            shutil.rmtree(folder)
        folder.mkdir()
        files = {"campaign.toml": c.toml.encode("utf-8"), "catalysts.csv": csv_bytes(c.catalysts),
                 "plates.csv": csv_bytes(c.plates), "layout.csv": csv_bytes(c.layout)}
        if c.name in GRID_CAMPAIGNS:
            files.update(grid_files(c, seed, spawn_key=len(CAMPAIGNS)))
            (folder / READINGS_DIR).mkdir()
        else:
            files["readings.csv"] = csv_bytes(c.readings)
        for fname, data in files.items():
            (folder / fname).write_bytes(data)
            written.append(folder / fname)
        tdir = out / TRUTH_DIR / c.name
        if tdir.exists():
            shutil.rmtree(tdir)
        tdir.mkdir(parents=True)
        (tdir / "truth.csv").write_bytes(csv_bytes(_truth_frame(c)))
        written.append(tdir / "truth.csv")
    (out / "README.md").write_bytes(readme(campaigns, seed).encode("utf-8"))
    written.append(out / "README.md")
    return written


def read_truth(campaign: str, folder=None) -> pd.DataFrame:
    """The truth table of one demo campaign (from ``folder``, default :func:`demo_folder`)."""
    base = Path(folder) if folder is not None else demo_folder()
    return pd.read_csv(base / TRUTH_DIR / campaign / "truth.csv")


def demo_folder() -> Path:
    """The folder holding the demo campaigns.

    In order: ``$SCREENLAB_DEMO_DIR`` when set; the ``demo_campaign/`` folder of the source
    checkout (next to the ``screenlab`` package, as with an editable install); otherwise the
    demo is generated (deterministically, default seed) into ``<temp dir>/screenlab-demo-<seed>``.
    """
    env = os.environ.get("SCREENLAB_DEMO_DIR")
    if env:
        return Path(env)
    here = Path(__file__).resolve().parents[2] / "demo_campaign"
    if (here / CAMPAIGNS[0] / "campaign.toml").is_file():
        return here
    cache = Path(tempfile.gettempdir()) / f"screenlab-demo-{DEFAULT_SEED}"
    if not (cache / CAMPAIGNS[-1] / "readings.csv").is_file():
        generate_demo(cache)
    return cache


def build_demo_store(path, folder=None) -> list:
    """Import every demo campaign into the store at ``path``; returns one ImportReport per campaign.

    ``folder`` defaults to :func:`demo_folder`. Importing into a store that already holds the
    unchanged campaigns adds nothing (the store's own rule).
    """
    from screenlab.ingest import find_campaigns, read_campaign
    from screenlab.store import Store

    base = Path(folder) if folder is not None else demo_folder()
    store = Store(path)
    with warnings.catch_warnings():  # the demo's notes (the grid campaign's skipped lines) are expected
        warnings.simplefilter("ignore", DataQualityWarning)
        return [store.import_campaign(read_campaign(f)) for f in find_campaigns(base)]

