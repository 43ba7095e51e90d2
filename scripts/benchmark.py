"""Speed of ScreenLab at campaign scale, against a per-well loop as a notebook would write it.

Usage: python scripts/benchmark.py [--sizes 4,100,400,1600] [--quick] [--json FILE]

For each size (plates of 96 wells, 8 readings per well; plus one 384-well case) a fresh
subprocess generates a seeded synthetic campaign (:mod:`screenlab.synthetic`, not timed), writes
it as a campaign folder and times, in this order:

import       screenlab.ingest.read_campaign(folder) + Store(tmp).import_campaign(result)
rates        kinetics amounts + well_rates + blank_rates + well_turnover + group_rates
arrhenius    kinetics.arrhenius.arrhenius_table
ranking      stats.ranking.rank_candidates (TOF at the reference temperature; the adaptive Monte Carlo:
             as many draws as a Monte Carlo SE below 0.005 on every probability and stable rank
             bounds need; the draws made are reported)
analyse+rank what the CLI and the app do: pipeline.analyse (kinetics, orders, plate quality, control
             chart) + rank_candidates with the plate quality, on the loaded campaign
shortlist    export.shortlist.write_shortlist + export.nextround.design_next_round (top 5)
app page     the compute behind the Ranking page: store.load_campaign + pipeline.analyse (kinetics,
             orders, plate quality, control chart) + rank_candidates with plate quality + pareto
             (2,000 draws) + the forest, rank-interval and Pareto figures
baseline     the per-well loop: scipy.stats.linregress on the initial window of each well
             (scipy.optimize.curve_fit first order when fewer than 3 window points), blank
             subtraction and TOF per catalyst and temperature, scipy.stats.linregress per
             catalyst for Arrhenius, all in Python loops. At large sizes it runs on a subsample
             of plates and is extrapolated linearly (the output says so).

Each stage reports wall time and readings per second; import, rates, Arrhenius and ranking are
run :data:`REPEATS` times (each import into a new store) and report the median, with the first
(cold) run printed below the table. Memory: ``peak_rss_mb`` is the process's
ru_maxrss after all stages (each size runs in its own process), ``rss_fresh_mb`` the peak RSS of a
fresh process that loads the stored campaign, analyses and ranks it (the 1 GB target at 1,600
plates applies to this one: it is what the app and the CLI do), ``py_peak_mb`` the tracemalloc
peak of Python allocations (numpy arrays included) of a second, untimed pass of rates + Arrhenius
+ ranking (tracemalloc slows allocation-heavy code, so it is never on while timing). Also times
``screenlab --help`` (process start-up), and the start-up ratio: the wall time of ``screenlab rank``
(the console script beside this interpreter) on a stored 4-plate campaign against that of
``python -c "import pandas, numpy"``, medians of :data:`STARTUP_RUNS` runs taken in turns after one
untimed run of each (bytecode written, files in the OS cache; ``PYTHONDONTWRITEBYTECODE`` is left
out of the runs' environment, as an installed package has its bytecode). Targets are printed next
to the figures; nothing here asserts anything.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc
import warnings
from pathlib import Path

TARGETS = {
    "import_rps_400": 500_000,          # readings/s, 400 plates, validation included
    "analysis_speedup": 30.0,           # rates + Arrhenius + ranking vs the per-well loop
    "analysis_s_400": 0.35,
    "analyse_rank_speedup": 20.0,       # pipeline.analyse + ranking (issue 14) vs the per-well loop
    "growth_per_4x": 4.5,
    "rss_mb_1600": 1024.0,
    "rank_startup_ratio": 2.0,          # screenlab rank, 4 plates / python -c "import pandas, numpy"
}
STARTUP_RUNS = 5                         # runs of each command for the start-up ratio (median)
BASELINE_MAX_WELLS = 6_000               # above this, the loop runs on a subsample of plates


# ------------------------------------------------------------------------------ the loop baseline

def loop_baseline(data, settings, max_wells: int | None = BASELINE_MAX_WELLS) -> dict:
    """The per-well notebook loop on ``data``; returns seconds (measured and, if subsampled, scaled).

    Plates are subsampled in whole plate sets (every temperature kept) so the Arrhenius step sees
    the same structure; the time is scaled by (all filled wells / wells run).
    """
    import numpy as np
    from scipy import optimize, stats

    wells = data.wells[data.wells["role"] != "empty"]
    n_all = len(wells)
    plates = data.plates["plate"].to_numpy()
    frac = 1.0
    if max_wells is not None and n_all > max_wells:
        keep_n = max(1, int(len(plates) * max_wells / n_all))
        n_t = data.plates["temperature_c"].nunique()
        keep_n = max(n_t, keep_n - keep_n % n_t)
        keep = set(plates[:keep_n])
        wells = wells[wells["plate"].isin(keep)]
        frac = len(wells) / n_all
    rd = data.readings[data.readings["plate"].isin(set(wells["plate"]))]
    t0 = time.perf_counter()
    # a notebook: merge, then loop over wells
    df = rd.merge(wells[["plate", "well", "role", "catalyst", "loading", "substrate_conc_mM", "volume_uL",
                         "temperature_c"]], on=["plate", "well"])
    df["product_mM"] = df["value"] / 100.0 * df["substrate_conc_mM"]

    def first_order(t, p_inf, k):
        return p_inf * (1.0 - np.exp(-k * t))

    out = []
    for (plate, well), g in df.groupby(["plate", "well"], sort=False):      # the per-well loop
        g = g.sort_values("time_h")
        t = g["time_h"].to_numpy()
        p = g["product_mM"].to_numpy()
        s0 = g["substrate_conc_mM"].iloc[0]
        win = p <= settings.conversion_window_pct / 100.0 * s0
        if win.sum() >= settings.min_window_points:
            rate = stats.linregress(t[win], p[win]).slope
        else:
            try:
                popt, _ = optimize.curve_fit(first_order, t, p, p0=(max(p.max(), 1e-6), 1.0 / max(t.max(), 1e-6)),
                                             maxfev=2000)
                rate = popt[0] * popt[1]
            except (RuntimeError, ValueError):
                rate = np.nan
        out.append((plate, well, g["role"].iloc[0], g["catalyst"].iloc[0], g["loading"].iloc[0],
                    g["volume_uL"].iloc[0], g["temperature_c"].iloc[0], rate))
    import pandas as pd
    w = pd.DataFrame(out, columns=["plate", "well", "role", "catalyst", "loading", "volume_uL", "temperature_c",
                                   "rate"])
    blank = w[w["role"] == "blank"].groupby("plate")["rate"].mean()
    w = w[w["role"] != "blank"].copy()
    w["net"] = w["rate"] - w["plate"].map(blank)
    w["tof"] = w["net"] / (w["loading"] / w["volume_uL"] * 1e3)   # mM/h over site mM
    g = w.groupby(["catalyst", "temperature_c"])["tof"].mean().reset_index()
    n_fit = 0
    for cat, c in g.groupby("catalyst"):                            # the per-catalyst loop
        c = c[c["tof"] > 0]
        if len(c) >= 2:
            stats.linregress(1.0 / (c["temperature_c"] + 273.15), np.log(c["tof"]))
            n_fit += 1
    secs = time.perf_counter() - t0
    return {"baseline_s_measured": secs, "baseline_fraction": frac, "baseline_s": secs / frac,
            "baseline_wells": len(wells), "baseline_fits": n_fit}


# ------------------------------------------------------------------------------ one size (worker)

#: timed repeats of the import and of each analysis stage: the figure is their median (a single
#: run on a shared 2-core machine varies by +-30 %); the first run is kept as ``<stage>_first``
REPEATS = 3


def _timed(results: dict, key: str, fn, repeats: int = 1):
    """Run ``fn`` ``repeats`` times (``fn(i)`` when repeated): ``results[key]`` = median wall time,
    ``results[key + "_first"]`` = the first; returns the last value."""
    times, value = [], None
    for i in range(repeats):
        t0 = time.perf_counter()
        value = fn(i) if repeats > 1 else fn()
        times.append(time.perf_counter() - t0)
    results[key] = sorted(times)[len(times) // 2]
    if repeats > 1:
        results[key + "_first"] = times[0]
    return value


def run_size(n_plates: int, fmt: int, seed: int, quick: bool) -> dict:
    warnings.simplefilter("ignore")                      # data-quality notes are not the point here
    import numpy as np  # noqa: F401  (imported before timing: start-up is measured separately)

    from screenlab.export.nextround import design_next_round
    from screenlab.export.shortlist import write_shortlist
    from screenlab.ingest import read_campaign
    from screenlab.kinetics import KineticsResult
    from screenlab.kinetics import amounts as k_amounts
    from screenlab.kinetics import rates as k_rates
    from screenlab.kinetics.arrhenius import arrhenius_table
    from screenlab.kinetics.orders import apparent_orders
    from screenlab.kinetics.turnover import blank_rates, group_rates, well_turnover
    from screenlab.pipeline import analyse, settings_for
    from screenlab.stats.pareto import pareto
    from screenlab.stats.ranking import rank_candidates
    from screenlab.store import Store
    from screenlab.synthetic import SyntheticSpec, write_campaign_folder
    from screenlab.viz import figures

    spec = SyntheticSpec(n_plates=n_plates, fmt=fmt, seed=seed)
    res: dict = {"plates": n_plates, "format": fmt, "wells": spec.n_filled_wells, "readings": spec.n_readings,
                 "candidates": spec.n_candidates}
    with tempfile.TemporaryDirectory(prefix="screenlab-bench-") as tmp:
        folder = write_campaign_folder(Path(tmp) / "campaign", spec)

        def do_import(i):
            # each repeat into a new store (a second import into the same one would find it unchanged);
            # the last one is the store the later stages read
            result = read_campaign(folder)
            store = Store(Path(tmp) / ("bench.duckdb" if i == REPEATS - 1 else f"repeat-{i}.duckdb"))
            try:
                store.import_campaign(result)
            finally:
                store.close()
            return result.data

        data = _timed(res, "import_s", do_import, repeats=REPEATS)
        settings = settings_for(data)
        res["rss_fresh_mb"] = fresh_analysis_rss(Path(tmp) / "bench.duckdb", data.name)

        def do_rates():
            am = k_amounts.product_amounts(data)
            per_well = k_rates.well_rates(data, settings, amounts=am)
            blanks = blank_rates(per_well, settings)
            wells = well_turnover(data, per_well, blanks, settings)
            groups = group_rates(wells, settings, factor_names=data.factor_names)
            return am, wells, blanks, groups

        am, wells, blanks, groups = _timed(res, "rates_s", lambda i: do_rates(), repeats=REPEATS)
        arr = _timed(res, "arrhenius_s", lambda i: arrhenius_table(groups, blanks, settings), repeats=REPEATS)
        orders = _timed(res, "orders_s", lambda: apparent_orders(wells, settings, factor_names=data.factor_names))
        kin = KineticsResult(amounts=am, wells=wells, blanks=blanks, rates=groups, arrhenius=arr, orders=orders,
                             settings=settings)
        ranking = _timed(res, "ranking_s", lambda i: rank_candidates(kin, None, metric="tof",
                                                                      catalysts=data.catalysts), repeats=REPEATS)
        mc = ranking.attrs["monte_carlo"]
        res["ranking_draws"], res["ranking_draws_ranked"], res["ranking_mc_se"] = (
            mc["draws"], mc["draws_ranked"], mc["mc_se"])

        def do_analyse_rank():
            a_ = analyse(data, settings)
            return rank_candidates(a_.kinetics, a_.quality, metric="tof", confidence=a_.settings.confidence,
                                   catalysts=data.catalysts)

        _timed(res, "analyse_rank_s", lambda i: do_analyse_rank(), repeats=REPEATS)

        def do_shortlist():
            out = Path(tmp) / "shortlist"
            write_shortlist(out, ranking, kin, campaign=data.name, top_k=5, catalysts=data.catalysts)
            top = ranking.loc[ranking["rank"].notna() & (ranking["role"] != "reference"), "catalyst"].head(5)
            design_next_round(Path(tmp) / "next-round", data, list(top))

        _timed(res, "shortlist_s", do_shortlist)

        res["rss_after_analysis_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

        def do_app_page():
            store = Store(Path(tmp) / "bench.duckdb", read_only=True)
            try:
                loaded = store.load_campaign(data.name)
            finally:
                store.close()
            a = analyse(loaded)
            r = rank_candidates(a.kinetics, a.quality, metric="tof", top_k=3, confidence=a.settings.confidence,
                                catalysts=a.data.catalysts)
            ranked = r[r["rank"].notna()]
            figures.forest_plot(ranked, label="TOF / h-1", log_x=True)
            figures.rank_intervals(ranked)
            return a, ranked

        a, ranked = _timed(res, "app_page_core_s", do_app_page)
        # the Ranking page's Pareto view: point dominance (pairwise, k^2) + P(front) from 2,000 joint draws
        # (sort + running maximum per draw for two metrics)
        kw = dict(confidence=a.settings.confidence, catalysts=a.data.catalysts)
        front = _timed(res, "pareto_compute_s", lambda: pareto(a.kinetics, a.quality, ("tof", "ea"), draws=2000, **kw))
        ok = front[front["reason"].astype(str) == ""]
        _timed(res, "pareto_figure_s", lambda: figures.pareto_plot(ok, x="tof_per_h", y="ea_kj_mol", x_label="TOF",
                                                                  y_label="Ea", log_x=True))
        res["pareto_s"] = res["pareto_compute_s"] + res["pareto_figure_s"]
        res["app_page_s"] = res["app_page_core_s"] + res["pareto_s"]
        del a, ranked, front, ok
        res["baseline"] = loop_baseline(data, settings, max_wells=BASELINE_MAX_WELLS if not quick else 1_500)
        res["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0   # Linux: KiB

        # untimed memory pass: Python-level peak of rates + Arrhenius + ranking
        del am, wells, blanks, groups, arr, orders, kin, ranking
        tracemalloc.start()
        a2, w2, b2, g2 = do_rates()
        arr2 = arrhenius_table(g2, b2, settings)
        kin2 = KineticsResult(amounts=a2, wells=w2, blanks=b2, rates=g2, arrhenius=arr2,
                              orders=apparent_orders(w2, settings, factor_names=data.factor_names), settings=settings)
        rank_candidates(kin2, None, metric="tof", catalysts=data.catalysts)
        res["py_peak_mb"] = tracemalloc.get_traced_memory()[1] / 2 ** 20
        tracemalloc.stop()
    res["analysis_s"] = res["rates_s"] + res["arrhenius_s"] + res["ranking_s"]
    return res


#: a fresh process: load the stored campaign, pipeline.analyse, rank with 10,000 draws; print peak RSS in MB
_FRESH = """
import resource, sys
from screenlab.pipeline import analyse
from screenlab.stats.ranking import rank_candidates
from screenlab.store import Store
store = Store(sys.argv[1], read_only=True)
data = store.load_campaign(sys.argv[2])
store.close()
a = analyse(data)
rank_candidates(a.kinetics, a.quality, metric="tof", catalysts=data.catalysts)
print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0)
"""


def fresh_analysis_rss(store_path: Path, campaign: str) -> float:
    """Peak RSS (MB) of a fresh process that loads ``campaign`` from the store and analyses it, as
    the app and the CLI do (the import's own memory is not part of it)."""
    out = subprocess.run([sys.executable, "-W", "ignore", "-c", _FRESH, str(store_path), campaign],
                         capture_output=True, text=True)
    if out.returncode != 0:
        raise RuntimeError(f"the fresh analysis process failed: {out.stderr.strip().splitlines()[-1:]}")
    return float(out.stdout.strip().splitlines()[-1])


# ------------------------------------------------------------------------------ driver

def startup_seconds(repeats: int = 3) -> float:
    """Best of ``repeats`` wall times of ``screenlab --help`` in a fresh process."""
    exe = _screenlab_command()
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run([*exe, "--help"], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        best = min(best, time.perf_counter() - t0)
    return best


def rank_startup(runs: int = STARTUP_RUNS, seed: int = 0) -> dict:
    """Median wall times of ``screenlab rank`` on a stored 4-plate synthetic campaign and of
    ``python -c "import pandas, numpy"`` (taken in turns, after one untimed run of each), and their
    ratio."""
    from screenlab.ingest import read_campaign
    from screenlab.store import Store
    from screenlab.synthetic import SyntheticSpec, write_campaign_folder

    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    with tempfile.TemporaryDirectory(prefix="screenlab-startup-") as tmp:
        spec = SyntheticSpec(n_plates=4, seed=seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            store = Path(tmp) / "startup.duckdb"
            Store(store).import_campaign(read_campaign(write_campaign_folder(Path(tmp) / "campaign", spec)))
        commands = {"rank": [*_screenlab_command(), "rank", "--store", str(store), "--campaign", spec.campaign_name],
                    "pandas": [sys.executable, "-c", "import pandas, numpy"]}
        times: dict[str, list[float]] = {k: [] for k in commands}
        for i in range(runs + 1):
            for key, cmd in commands.items():
                t0 = time.perf_counter()
                subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
                if i:  # the first run of each is the warm-up
                    times[key].append(time.perf_counter() - t0)
    rank_s = sorted(times["rank"])[runs // 2]
    base_s = sorted(times["pandas"])[runs // 2]
    return {"rank_s": rank_s, "import_pandas_numpy_s": base_s, "ratio": rank_s / base_s, "runs": runs,
            "plates": 4}


def _screenlab_command() -> list[str]:
    """The ``screenlab`` console script beside this interpreter (a venv's bin/, whether or not it is
    on PATH), else ``python -m screenlab``."""
    from pathlib import Path

    script = Path(sys.executable).with_name("screenlab")
    return [str(script)] if script.exists() else [sys.executable, "-m", "screenlab"]


def _worker(n_plates: int, fmt: int, seed: int, quick: bool) -> dict:
    cmd = [sys.executable, __file__, "--worker", str(n_plates), "--format", str(fmt), "--seed", str(seed)]
    if quick:
        cmd.append("--quick")
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode != 0:
        return {"plates": n_plates, "format": fmt, "error": proc.stderr.strip().splitlines()[-1:] or ["failed"]}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _fmt_s(x: float) -> str:
    return f"{x:8.3f}" if x < 100 else f"{x:8.1f}"


def report(rows: list[dict], startup: float, rank_start: dict | None = None) -> str:
    lines = []
    ok = [r for r in rows if "error" not in r]
    hdr = (f"{'plates':>6} {'fmt':>4} {'readings':>9} {'cands':>6} | {'import s':>8} {'rd/s':>9} | {'rates':>8} "
           f"{'arrhen.':>8} {'ranking':>8} {'= anal.':>8} | {'short.':>8} {'app pg':>8} | {'loop s':>8} "
           f"{'x faster':>8} | {'RSS an.':>7} {'RSS end':>7} {'fresh':>7} {'py MB':>7}")
    lines += [hdr, "-" * len(hdr)]
    for r in rows:
        if "error" in r:
            lines.append(f"{r['plates']:>6} {r['format']:>4}  FAILED: {' '.join(r['error'])}")
            continue
        b = r["baseline"]
        lines.append(
            f"{r['plates']:>6} {r['format']:>4} {r['readings']:>9,} {r['candidates']:>6} | {_fmt_s(r['import_s'])} "
            f"{r['readings'] / r['import_s']:>9,.0f} | {_fmt_s(r['rates_s'])} {_fmt_s(r['arrhenius_s'])} "
            f"{_fmt_s(r['ranking_s'])} {_fmt_s(r['analysis_s'])} | {_fmt_s(r['shortlist_s'])} "
            f"{_fmt_s(r['app_page_s'])} | {_fmt_s(b['baseline_s'])}{'*' if b['baseline_fraction'] < 1 else ' '}"
            f"{b['baseline_s'] / r['analysis_s']:>7.1f}x | {r['rss_after_analysis_mb']:>7.0f} {r['peak_rss_mb']:>7.0f} "
            f"{r['rss_fresh_mb']:>7.0f} {r['py_peak_mb']:>7.0f}")
    sub = [r for r in ok if r["baseline"]["baseline_fraction"] < 1]
    if sub:
        lines.append("* loop baseline extrapolated linearly from a subsample: "
                     + ", ".join(f"{r['plates']} plates from {r['baseline']['baseline_wells']:,} wells "
                                 f"({r['baseline']['baseline_fraction'] * 100:.1f} %)" for r in sub))
    lines.append("'= anal.' = rates + Arrhenius + ranking; 'x faster' = loop baseline (rates + Arrhenius) / anal.")
    lines.append("analyse + rank (pipeline.analyse with plate quality, then the ranking with it): " + ", ".join(
        f"{r['plates']}: {r['analyse_rank_s']:.3f} s = {r['baseline']['baseline_s'] / r['analyse_rank_s']:.1f}x "
        "faster than the loop" for r in ok))
    lines.append("ranking draws (adaptive): " + ", ".join(
        f"{r['plates']}: {r['ranking_draws']:,} draws, {r['ranking_draws_ranked']:,} ranking every candidate, "
        f"largest Monte Carlo SE {r['ranking_mc_se']:.4f}" for r in ok))
    lines.append("'RSS an.' = peak RSS (MB) of the benchmark process through import + analysis; 'RSS end' = after "
                 "shortlist and app page too; 'fresh' = peak RSS of a fresh process that loads the stored campaign, "
                 "analyses it and ranks it (as the app or CLI does); 'py MB' = tracemalloc peak of rates + Arrhenius "
                 "+ ranking")
    lines.append("app page = the Ranking page from a cold cache: load + pipeline.analyse + ranking + figures (" + ", ".join(
        f"{r['plates']}: {r['app_page_core_s']:.2f} s" for r in ok) + ") + its Pareto view, 2,000 draws (" + ", ".join(
        f"{r['plates']}: {r['pareto_s']:.2f} s" for r in ok) + ")")
    lines.append("orders (not in the sum): " + ", ".join(f"{r['plates']}: {r['orders_s']:.3f} s" for r in ok))
    lines.append(f"stage times are medians of {REPEATS} runs in the same process; the first run of each (cold: "
                 "first-touch memory, first DuckDB connection): " + "; ".join(
                     f"{r['plates']}: import {r.get('import_s_first', float('nan')):.3f} s, analysis "
                     f"{r.get('rates_s_first', float('nan')) + r.get('arrhenius_s_first', float('nan')) + r.get('ranking_s_first', float('nan')):.3f} s"
                     for r in ok))
    # growth factors between consecutive 96-well sizes
    r96 = sorted([r for r in ok if r["format"] == 96], key=lambda r: r["plates"])
    lines.append("")
    lines.append("growth from one size to the next (time ratio; data ratio in brackets):")
    for a, b in zip(r96, r96[1:]):
        ratio = b["readings"] / a["readings"]
        parts = [f"{k.replace('_s', '')} {b[k] / a[k]:.2f}x" for k in
                 ("import_s", "rates_s", "arrhenius_s", "ranking_s", "analysis_s", "analyse_rank_s", "app_page_s")
                 if a[k] > 0]
        lines.append(f"  {a['plates']} -> {b['plates']} plates ({ratio:.0f}x data): " + ", ".join(parts))
    lines.append("")
    lines.append(f"screenlab --help start-up: {startup:.3f} s (best of 3)")
    if rank_start:
        lines.append(f"screenlab rank on a {rank_start['plates']}-plate campaign: {rank_start['rank_s']:.3f} s; "
                     f"python -c \"import pandas, numpy\": {rank_start['import_pandas_numpy_s']:.3f} s (medians of "
                     f"{rank_start['runs']} runs in turns, after one warm-up each): ratio {rank_start['ratio']:.2f}x")
    lines.append("")
    lines.append("targets (2 cores):")
    by = {r["plates"]: r for r in r96}

    def verdict(okay: bool) -> str:
        return "met" if okay else "MISSED"

    if 400 in by:
        r = by[400]
        rps = r["readings"] / r["import_s"]
        lines.append(f"  import at 400 plates >= {TARGETS['import_rps_400']:,} readings/s: {rps:,.0f} "
                     f"-> {verdict(rps >= TARGETS['import_rps_400'])}")
        lines.append(f"  rates + Arrhenius + ranking at 400 plates <= {TARGETS['analysis_s_400']} s: "
                     f"{r['analysis_s']:.3f} s -> {verdict(r['analysis_s'] <= TARGETS['analysis_s_400'])}")
        # the speed-up target is set at 400 plates; the other sizes' ratios are in the table
        sp = r["baseline"]["baseline_s"] / r["analysis_s"]
        lines.append(f"  >= {TARGETS['analysis_speedup']:.0f}x faster than the loop at 400 plates "
                     f"(loop {r['baseline']['baseline_s']:.1f} s here): {sp:.1f}x "
                     f"-> {verdict(sp >= TARGETS['analysis_speedup'])}")
        sp2 = r["baseline"]["baseline_s"] / r["analyse_rank_s"]
        lines.append(f"  analyse + rank >= {TARGETS['analyse_rank_speedup']:.0f}x faster than the loop's rates + "
                     f"Arrhenius at 400 plates: {sp2:.1f}x -> {verdict(sp2 >= TARGETS['analyse_rank_speedup'])}")
    for a, b in zip(r96, r96[1:]):
        if abs(b["readings"] / a["readings"] - 4) < 0.5 and a["analysis_s"] > 0:
            g = b["analysis_s"] / a["analysis_s"]
            lines.append(f"  analysis growth {a['plates']} -> {b['plates']} <= {TARGETS['growth_per_4x']}x: {g:.2f}x "
                         f"-> {verdict(g <= TARGETS['growth_per_4x'])}")
            g2 = b["analyse_rank_s"] / a["analyse_rank_s"]
            lines.append(f"  analyse + rank growth {a['plates']} -> {b['plates']} <= {TARGETS['growth_per_4x']}x: "
                         f"{g2:.2f}x -> {verdict(g2 <= TARGETS['growth_per_4x'])}")
    if rank_start:
        lines.append(f"  screenlab rank on {rank_start['plates']} plates within {TARGETS['rank_startup_ratio']:g}x the "
                     f"start-up of python -c \"import pandas, numpy\": {rank_start['ratio']:.2f}x "
                     f"-> {verdict(rank_start['ratio'] <= TARGETS['rank_startup_ratio'])}")
    if 1600 in by:
        m = by[1600]["rss_fresh_mb"]
        lines.append(f"  1,600 plates load + analyse + rank in < 1 GB (fresh process): peak RSS {m:.0f} MB "
                     f"-> {verdict(m < TARGETS['rss_mb_1600'])}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="Time ScreenLab at campaign scale against a per-well loop.")
    p.add_argument("--sizes", default=None,
                   help="plate counts of 96-well campaigns, comma-separated (default 4,100,400,1600; --quick 4,100)")
    p.add_argument("--quick", action="store_true", help="sizes 4,100 only unless --sizes is given, no 384-well "
                                                         "case, smaller loop subsample")
    p.add_argument("--plates-384", type=int, default=100, help="plates of the 384-well case (0: skip)")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--json", type=Path, help="also write the raw figures to this JSON file")
    p.add_argument("--worker", type=int, help=argparse.SUPPRESS)
    p.add_argument("--format", type=int, default=96, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.worker is not None:
        print(json.dumps(run_size(args.worker, args.format, args.seed, args.quick)))
        return 0
    sizes_text = args.sizes if args.sizes is not None else ("4,100" if args.quick else "4,100,400,1600")
    try:
        sizes = [int(s) for s in sizes_text.split(",") if s.strip()]
    except ValueError:
        print(f"--sizes: expected comma-separated plate counts, got {sizes_text!r}", file=sys.stderr)
        return 2
    t_start = time.perf_counter()
    rows = []
    cases = [(n, 96) for n in sizes] + ([] if args.quick or args.plates_384 <= 0 else [(args.plates_384, 384)])
    for n, fmt in cases:
        t0 = time.perf_counter()
        rows.append(_worker(n, fmt, args.seed, args.quick))
        print(f"  ... {n} plates x {fmt} wells done in {time.perf_counter() - t0:.0f} s", file=sys.stderr, flush=True)
    startup = startup_seconds()
    rank_start = rank_startup(seed=args.seed)
    print(f"ScreenLab speed benchmark: python {sys.version.split()[0]}, {os.cpu_count()} CPUs, seed {args.seed}")
    print(report(rows, startup, rank_start))
    print(f"\ntotal benchmark wall time {time.perf_counter() - t_start:.0f} s")
    if args.json:
        args.json.write_text(json.dumps({"rows": rows, "startup_s": startup, "rank_startup": rank_start}, indent=2), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
