"""End to end on the demo campaign (invented data with known truth): CLI commands and recovery of truth."""
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screenlab.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_campaign" / "th-screen-2026"
TRUTH = ROOT / "demo_campaign" / "_truth" / "th-screen-2026" / "truth.csv"

pytestmark = pytest.mark.skipif(not DEMO.exists(), reason="demo campaign missing")


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    path = tmp_path_factory.mktemp("kin") / "s.duckdb"
    assert main(["ingest", str(DEMO), "--store", str(path)]) == 0
    return path


@pytest.mark.slow
def test_cli_rates_arrhenius_orders(store, capsys):
    capsys.readouterr()
    assert main(["rates", "--campaign", "th-screen-2026", "--store", str(store), "--format", "json"]) == 0
    rows = json.loads(capsys.readouterr().out)
    need = {"catalyst", "temperature_c", "n_wells", "rate_mM_per_h", "tof_per_h", "tof_ci_low", "tof_ci_high", "ton",
            "enhancement", "enhancement_ci_low", "enhancement_ci_high", "flags"}
    assert need <= set(rows[0])
    assert main(["arrhenius", "--campaign", "th-screen-2026", "--store", str(store), "--format", "csv",
                 "--reference-temperature", "60"]) == 0
    import io
    arr = pd.read_csv(io.StringIO(capsys.readouterr().out))
    assert "(uncatalysed)" in set(arr.catalyst)
    assert {"ea_kj_mol", "ea_ci_low", "dh_kj_mol", "ds_j_mol_k", "dg_ref_kj_mol", "tof_ref_per_h",
            "delta_ea_kj_mol", "flags"} <= set(arr.columns)
    # recovery of the generating values (invented truth): most 95 % Ea intervals cover, TOF(60) within 25 %
    truth = pd.read_csv(TRUTH)
    m = arr.merge(truth[["catalyst", "ea_kj_mol", "tof_ref_per_h"]], on="catalyst", suffixes=("", "_true"))
    m = m[np.isfinite(m.ea_kj_mol) & (m.catalyst != "(uncatalysed)")]
    cover = ((m.ea_ci_low <= m.ea_kj_mol_true) & (m.ea_kj_mol_true <= m.ea_ci_high)).mean()
    assert cover >= 0.6
    rel = np.abs(np.log(m.tof_ref_per_h / m.tof_ref_per_h_true))
    assert np.median(rel) < 0.15
    assert main(["orders", "--campaign", "th-screen-2026", "--store", str(store)]) == 0
    assert "substrate_conc" in capsys.readouterr().out


def test_cli_errors_without_traceback(store, tmp_path, capsys):
    assert main(["rates", "--campaign", "nope", "--store", str(store)]) == 1
    assert "not in" in capsys.readouterr().err
    assert main(["arrhenius", "--campaign", "x", "--store", str(tmp_path / "none.duckdb")]) == 2
    assert main(["rates", "--campaign", "th-screen-2026", "--store", str(store), "--confidence", "1.5"]) == 2
    assert "--confidence" in capsys.readouterr().err
