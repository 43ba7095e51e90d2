"""The README's benchmark command runs end to end on the smallest size (no timings asserted)."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

from screenlab.synthetic import SyntheticSpec

ROOT = Path(__file__).resolve().parents[1]


def test_benchmark_runs_and_reports_every_stage(tmp_path):
    out = tmp_path / "bench.json"
    proc = subprocess.run([sys.executable, str(ROOT / "scripts" / "benchmark.py"), "--sizes", "4", "--plates-384", "0",
                           "--quick", "--json", str(out)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "targets (2 cores)" in proc.stdout and "medians of 3 runs" in proc.stdout
    rows = json.loads(out.read_text())["rows"]
    (row,) = rows
    assert row["plates"] == 4 and row["readings"] == SyntheticSpec(n_plates=4).n_readings
    for key in ("import_s", "import_s_first", "rates_s", "arrhenius_s", "ranking_s", "analysis_s", "analyse_rank_s",
                "ranking_draws", "app_page_s",
                "pareto_s", "rss_fresh_mb"):
        assert row[key] > 0, key
    assert row["baseline"]["baseline_s"] > 0
    # the start-up ratio: screenlab rank on 4 plates against python -c "import pandas, numpy"
    start = json.loads(out.read_text())["rank_startup"]
    assert start["plates"] == 4 and start["rank_s"] > 0 and start["import_pandas_numpy_s"] > 0
    assert start["ratio"] == start["rank_s"] / start["import_pandas_numpy_s"]
    assert "screenlab rank on a 4-plate campaign" in proc.stdout
    assert "screenlab rank on 4 plates within 2x" in proc.stdout
