"""Temperature series: Arrhenius plot, the Ea / Eyring table, activation-energy lowering."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.kinetics.arrhenius import uncatalysed_points
from screenlab.viz import figures

from screenlab.model import UNCATALYSED as UNCAT  # noqa: E402

ctx = widgets.context()
st.title("Temperature series")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
kin = a.kinetics
arr = kin.arrhenius
conf = ctx.settings.confidence
fitted = arr[(arr["catalyst"].astype(str) != UNCAT) & pd.to_numeric(arr["ea_kj_mol"], errors="coerce").notna()]
if fitted.empty:
    st.info("No catalyst was measured at two or more temperatures at its standard condition, so there is "
            "no Arrhenius fit. Run plates at several block temperatures to get Ea.")
    st.stop()

order = fitted.sort_values("tof_ref_per_h", ascending=False, na_position="last")["catalyst"].astype(str).tolist()
refs = set(arr.loc[arr["role"].astype(str) == "reference", "catalyst"].astype(str))
default = [c for c in order if c in refs][:1]
default += [c for c in order[:8] if c not in default][: max(0, 4 - len(default))]
c1, c2 = st.columns([4, 1])
chosen = c1.multiselect("Catalysts", order, default=default, key="arrh_catalysts",
                        help="Sorted by fitted TOF at the reference temperature, highest first.")
show_blank = c2.toggle("Uncatalysed line", value=True, key="arrh_blank")

rates = kin.rates
pts = rates[rates["is_standard"].fillna(False).astype(bool) & rates["catalyst"].astype(str).isin(chosen)]
t_all = pd.to_numeric(kin.rates["temperature_c"], errors="coerce").dropna()
t_lo, t_hi = float(t_all.min()), float(t_all.max())
pad = max(2.0, 0.05 * (t_hi - t_lo))
pred = cache.arrhenius_prediction(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key,
                                  t_lo - pad, t_hi + pad)
cat_pred = pred[pred["catalyst"].astype(str).isin(chosen)]
blank_pts = blank_pred = None
if show_blank:
    # the points the uncatalysed line is fitted to (one substrate level, no scaled blanks), those
    # below their detection limit drawn open
    up = uncatalysed_points(kin.blanks)
    blank_pts = pd.DataFrame({"temperature_c": up["temperature_c"], "blank_rate_mM_per_h": up["rate"],
                              "in_fit": up["active"]})
    blank_pred = pred[pred["catalyst"].astype(str) == UNCAT]
point_cols = [c for c in ("catalyst", "temperature_c", "tof_per_h", "tof_ci_low", "tof_ci_high", "in_arrhenius_fit",
                          "censored") if c in pts]
fig = figures.arrhenius_plot(pts[point_cols], cat_pred, blank_points=blank_pts, blank_prediction=blank_pred,
                             confidence=conf)
widgets.chart(fig, key="arrh_plot", filename="arrhenius")
st.caption(f"Points: mean initial TOF per temperature at each catalyst's standard condition with its "
           f"{conf * 100:g} % interval; lines: weighted Arrhenius fit with its {conf * 100:g} % confidence band. "
           "Open symbols: points left out of the fit; barred arrows: bounds, not measured values (pointing up: "
           "faster than the first reading allows; down: not distinguishable from the blank), without intervals. "
           "The uncatalysed reaction (blank wells) has no sites, so it is drawn as ln(rate / mM h⁻¹) on the right "
           "axis: compare its slope, not its height; its points are the blanks at the campaign's main substrate "
           "level, open where a blank is below its detection limit (not fitted).")
from screenlab.export.display import censored_values, show_bounds  # noqa: E402

excluded = ~pts["in_arrhenius_fit"].astype(object).where(pts["in_arrhenius_fit"].notna(), True).astype(bool) \
    if "in_arrhenius_fit" in pts else pd.Series(False, index=pts.index)
cens = censored_values(pts)
if excluded.any() or (cens != "").any():
    odd = show_bounds(pts.assign(censored=cens, in_fit=~excluded.to_numpy()), "tof_per_h", "tof_ci_low",
                      "tof_ci_high", unit="h⁻¹", text="TOF")
    odd = odd[(excluded.to_numpy()) | (cens != "")]
    st.markdown("**Points not fitted as measured values**")
    widgets.table(odd, key="arrh_points_out", columns=["catalyst", "temperature_c", "TOF", "censored", "in_fit",
                                                       "flags"])

st.subheader("Activation parameters")
cols = ["catalyst", "role", "n_temperatures", "t_min_c", "t_max_c", "ea_kj_mol", "ea_ci_low", "ea_ci_high",
        "ln_a", "dh_kj_mol", "dh_se", "ds_j_mol_k", "ds_se", "dg_ref_kj_mol", "tof_ref_per_h", "tof_ref_ci_low",
        "tof_ref_ci_high", "curvature_p", "flags"]
tab = arr[arr["catalyst"].astype(str).isin([*chosen, UNCAT])]
widgets.table(tab, key="arrh_table", columns=cols)
_common.history_links(chosen, key="arrh_history")
st.caption(f"Ea from ln TOF = ln A - Ea/RT; ΔH‡, ΔS‡ from the Eyring equation ln(TOF/T) = ln(k_B/h) + ΔS‡/R - "
           f"ΔH‡/RT; ΔG‡ and TOF at the reference temperature {ctx.settings.reference_temperature_c:g} °C. "
           "curvature p: test of a quadratic term in 1/T (small p: the plot bends; a change of mechanism or "
           "transport control). The uncatalysed row is fitted on blank rates (mM h⁻¹).")

st.subheader("Activation-energy lowering")
low = arr[(arr["catalyst"].astype(str) != UNCAT) & pd.to_numeric(arr["delta_ea_kj_mol"], errors="coerce").notna()]
if low.empty:
    st.info("No uncatalysed Arrhenius fit (blank wells at two or more temperatures are needed), so the lowering "
            "of Ea over the background reaction cannot be given.")
else:
    low = low.sort_values("delta_ea_kj_mol", ascending=False)
    uncat = arr[arr["catalyst"].astype(str) == UNCAT]
    if len(uncat):
        st.markdown(f"Uncatalysed Ea = **{widgets.fmt(uncat['ea_kj_mol'].iloc[0])} kJ mol⁻¹** "
                    f"({widgets.fmt(uncat['ea_ci_low'].iloc[0])} – {widgets.fmt(uncat['ea_ci_high'].iloc[0])}).")
    widgets.table(low, key="arrh_lowering", columns=["catalyst", "ea_kj_mol", "delta_ea_kj_mol", "delta_ea_ci_low",
                                                     "delta_ea_ci_high", "flags"])
    st.caption("ΔEa = Ea(uncatalysed) - Ea(catalyst); positive means the catalyst lowers the barrier. "
               f"An apparent Ea below {ctx.settings.low_ea_kj_mol:g} kJ mol⁻¹ suggests transport (diffusion) control.")
widgets.flag_glossary(arr["flags"])
