"""Plate quality: Z' per plate, the benchmark's control chart, edge maps (B-scores)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.stats.quality import blank_trend_gaps
from screenlab.viz import figures

ctx = widgets.context()
st.title("Plate quality")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
q, data = a.quality, a.data
thr = ctx.settings.zprime_min

st.subheader("Z' per plate")
st.caption(f"Bars: Z' = 1 - 3(SD benchmark + SD blank) / |mean benchmark - mean blank| on initial rates "
           f"(Zhang, Chung & Oldenburg 1999); plates below {thr:g} are flagged, below 0 failed. Diamonds: the robust "
           "Z' of the plate's upper-quartile sample wells against its blanks (medians and 1.4826 x MAD; the upper "
           "quartile's spread taken from its replicates), which plates without a benchmark are judged on, with the "
           "robust SSMD (Zhang 2007) in the table.")
unchecked = q[q["status"].astype(str) == "unchecked"]
if len(unchecked):
    st.info(f"{len(unchecked)} plate(s) without a benchmark are **unchecked**: no Z' is possible, so they are judged "
            "on their blanks (scatter, detection limit), replicate CVs, edge test and the separation of their "
            "upper-quartile wells from the blanks. Their candidates are ranked, flagged on_unchecked_plate.",
            icon=":material/rule:")
if q["zprime"].notna().any() or q["robust_zprime"].notna().any():
    widgets.chart(figures.zprime_bars(q.rename(columns={"zprime": "z_prime"}), threshold=thr), key="quality_zprime",
                  filename="zprime")
else:
    st.info("No plate has two or more usable benchmark and blank wells, and none has enough active sample wells and "
            "blanks for the robust Z', so there is nothing to chart.")
widgets.table(q, key="quality_table", columns=[
    "plate", "format", "temperature_c", "status", "zprime", "robust_zprime", "ssmd", "separation_basis",
    "signal_window", "n_sample", "n_reference", "n_blank", "reference_mean_mM_per_h", "blank_mean_mM_per_h",
    "blank_lod_mM_per_h", "sample_active_pct", "upper_median_mM_per_h", "upper_cv_pct", "replicate_cv_median_pct",
    "reference_cv_pct", "blank_ratio", "blank_z", "edge_basis", "edge_p", "edge_shift_pct", "bscore_max_abs",
    "reference_loo_t", "flags"])
gaps = blank_trend_gaps(a.kinetics, q)
for why, plates in gaps.groupby("reason", sort=False)["plate"]:
    st.caption(f"Blank trend (blank z, blank ratio) not checked on {', '.join(plates)}: {why}.")
widgets.flag_glossary(q["flags"])

st.subheader("Benchmark control chart")
cc = a.control
if cc is None or cc.empty:
    st.info("This campaign has no benchmark (reference) wells.")
else:
    for cat, g in cc.groupby("catalyst", sort=True):  # one chart per benchmark catalyst
        g = g.reset_index(drop=True)
        out = g["flags"].astype(str).str.contains("reference_out_of_limits")
        basis = "its Arrhenius line" if (g["basis"] == "arrhenius").all() else "the mean at the same temperature"
        st.markdown(f"**{cat}**: ln(value on the plate / expected from {basis}); "
                    "centre and ±3 SD limits over all plates, flags from leave-one-out limits.")
        fig = figures.control_chart(g.assign(out=out), x="plate", y="log_ratio", out_col="out",
                                    y_label=f"ln(observed / expected) ({g['value_unit'].iloc[0]} basis)",
                                    centre=float(g["centre"].iloc[0]), lower=float(g["lower"].iloc[0]),
                                    upper=float(g["upper"].iloc[0]))
        widgets.chart(fig, key=f"quality_cc_{cat}", filename=f"control-chart-{cat}")
    widgets.table(cc, key="quality_cc_table", columns=["plate", "run_date", "catalyst", "temperature_c", "n_wells",
                                                        "value", "value_unit", "expected", "log_ratio", "loo_t", "loo_limit",
                                                        "flags"])

st.subheader("Edge map")
plates = data.plates["plate"].astype(str).tolist()
c1, c2 = st.columns(2)
plate = c1.selectbox("Plate", plates, key="quality_plate")
value = c2.radio("B-score of", ["rate", "conversion"], horizontal=True, key="quality_bvalue",
                 format_func=lambda v: {"rate": "initial rate", "conversion": "final conversion"}[v])
bw = cache.well_bscores(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, value)
bp = bw[bw["plate"].astype(str) == plate]
info = data.plates[data.plates["plate"].astype(str) == plate].iloc[0]
if np.isfinite(pd.to_numeric(bp["bscore"], errors="coerce")).any():
    widgets.chart(figures.plate_heatmap(bp, "bscore", n_rows=int(info["n_rows"]), n_cols=int(info["n_cols"]),
                                        signed=True, title=f"{plate}: B-score of sample wells"),
                  key="quality_edge", filename=f"bscore-{plate}")
    row = q[q["plate"].astype(str) == plate].iloc[0]
    basis = str(row.get("edge_basis", "") or "")
    test = (f"Edge against interior ({basis} basis, Mann-Whitney U): p = {widgets.fmt(row.get('edge_p'), 2)}, "
            f"ring wells {widgets.fmt(row.get('edge_shift_pct'), 2)} % higher." if basis else
            "Too few wells on the ring or inside for an edge test.")
    st.caption("B-score = median-polish residual / (1.4826 x MAD) (Brideau et al. 2003). " + test
               + " Blank, benchmark and empty wells have no B-score.")
else:
    st.info("No B-scores on this plate (too few sample wells with a value, or the residual MAD is zero).")
