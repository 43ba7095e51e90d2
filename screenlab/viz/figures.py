"""Plotly figure builders: result frames in, ``go.Figure`` out (no Streamlit, no DuckDB).

Every builder takes frames with the documented core columns (DEVELOPERS.md) and only reshapes
them for display (log of a TOF, 1000/T for an Arrhenius axis). Nothing here estimates anything.

Conventions shared by every figure:

* axis titles carry their unit (``time / h``, ``ln(TOF / h⁻¹)``, ``1000/T / K⁻¹``);
* continuous colour is Viridis (perceptually uniform and readable without red/green
  distinction; van der Walt & Smith 2015, the matplotlib default since 2.0), and discrete series
  take evenly spaced Viridis colours *and* different marker symbols;
* well roles are told apart by marker shape as well as colour (:data:`ROLE_STYLE`);
* only SVG traces (``go.Scatter``, ``go.Heatmap``, ``go.Bar``), no WebGL, so a page with many
  charts renders in any browser, headless included.
"""
from __future__ import annotations

import functools
import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.colors import sample_colorscale

from screenlab.plates import ROW_LETTERS
from screenlab.units import c_to_k, shown_unit
from screenlab.viz.svg import log_ticks, nice_step

COLORSCALE = "Viridis"
DIVERGING = "Cividis"  # for signed quantities (B-score, residuals): still no red/green

#: role -> (marker symbol, colour, label). Okabe-Ito colours (Okabe & Ito 2008, "Color Universal
#: Design"), chosen so that no two roles differ only by red versus green.
ROLE_STYLE: dict[str, tuple[str, str, str]] = {
    "sample": ("circle-open", "#ffffff", "sample"),
    "blank": ("square", "#000000", "blank (no catalyst)"),
    "reference": ("star", "#e69f00", "reference (benchmark)"),
    "empty": ("x-thin-open", "#999999", "empty"),
}
SYMBOLS = ("circle", "square", "diamond", "triangle-up", "cross", "triangle-down", "pentagon",
           "star", "hexagon", "x", "triangle-left", "triangle-right")
DASHES = ("solid", "dash", "dot", "dashdot", "longdash", "longdashdot")

QUANTITY_LABELS: dict[str, str] = {
    "rate_mM_per_h": "rate / mM h⁻¹",
    "net_rate_mM_per_h": "net rate / mM h⁻¹",
    "tof_per_h": "TOF / h⁻¹",
    "ton": "TON",
    "enhancement": "rate enhancement over blank (ratio)",
    "last_conversion_pct": "final conversion / %",
    "bscore": "B-score (robust SD units)",
    "residual": "median-polish residual",
}


def _layout(fig: go.Figure, title: str | None = None, **kw) -> go.Figure:
    fig.update_layout(title=title, template="plotly_white", margin=dict(l=60, r=20, t=50 if title else 20, b=50),
                      legend=dict(orientation="h", yanchor="bottom", y=1.02, x=0), **kw)
    return fig


def series_colours(n: int) -> list[str]:
    """n evenly spaced Viridis colours (stopping short of the pale yellow end)."""
    return list(_series_colours(int(n)))


@functools.lru_cache(maxsize=64)
def _series_colours(n: int) -> tuple[str, ...]:
    # sampling a named colour scale is slow in plotly (it rebuilds its name table per call)
    if n <= 0:
        return ()
    if n == 1:
        return tuple(sample_colorscale(COLORSCALE, [0.25]))
    return tuple(sample_colorscale(COLORSCALE, list(np.linspace(0.0, 0.85, n))))


def _fmt(v, digits: int = 3) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)) or pd.isna(v):
        return "–"
    return f"{float(v):.{digits}g}"


# --------------------------------------------------------------------------- plate map
def plate_heatmap(wells: pd.DataFrame, value_col: str, *, n_rows: int, n_cols: int,
                  label: str | None = None, title: str | None = None,
                  selected: str | None = None, signed: bool = False) -> go.Figure:
    """A plate as a grid: colour = ``value_col``, marker shape = well role.

    ``wells`` needs ``well, row, col, role`` (0-based row/col) and ``value_col``; ``catalyst``
    and ``flags`` are shown on hover when present. Row A is at the top, column 1 on the left
    (ANSI/SLAS 4-2004). Every well carries its name in ``customdata`` for click selection.
    """
    label = label or QUANTITY_LABELS.get(value_col, value_col)
    z = np.full((n_rows, n_cols), np.nan)
    text = np.full((n_rows, n_cols), "", dtype=object)
    r = wells["row"].to_numpy(dtype=int)
    c = wells["col"].to_numpy(dtype=int)
    ok = (r >= 0) & (r < n_rows) & (c >= 0) & (c < n_cols)
    vals = pd.to_numeric(wells[value_col], errors="coerce").to_numpy(dtype=float)
    z[r[ok], c[ok]] = vals[ok]
    cat = wells["catalyst"].astype("string").fillna("–") if "catalyst" in wells else pd.Series("–", index=wells.index)
    flags = wells["flags"].astype("string").fillna("") if "flags" in wells else pd.Series("", index=wells.index)
    hover = (wells["well"].astype(str) + " · " + wells["role"].astype(str) + " · " + cat.astype(str)
             + "<br>" + label + ": " + pd.Series(vals, index=wells.index).map(_fmt)
             + np.where(flags.str.len() > 0, "<br>flags: " + flags, ""))
    text[r[ok], c[ok]] = hover.to_numpy()[ok]
    x_labels = [str(i + 1) for i in range(n_cols)]
    y_labels = list(ROW_LETTERS[:n_rows])
    finite = vals[np.isfinite(vals)]
    zmid = 0.0 if signed and finite.size else None
    fig = go.Figure(go.Heatmap(
        z=z, x=x_labels, y=y_labels, text=text, hoverinfo="text", hovertemplate="%{text}<extra></extra>",
        colorscale=DIVERGING if signed else COLORSCALE, zmid=zmid, xgap=2, ygap=2,
        colorbar=dict(title=dict(text=label, side="right")),
    ))
    size = 14 if n_rows <= 8 else 7
    for role, (symbol, colour, role_label) in ROLE_STYLE.items():
        sub = wells[ok & (wells["role"].astype(str) == role).to_numpy()]
        if sub.empty:
            continue
        # an open marker is drawn in its colour; a white one, made to show on the dark cells, would
        # be invisible in the legend, which then gets a grey twin of it (same group: one click hides both)
        white_open = symbol.endswith("-open") and colour.lower() == "#ffffff"
        fig.add_trace(go.Scatter(
            x=[x_labels[i] for i in sub["col"].astype(int)], y=[y_labels[i] for i in sub["row"].astype(int)],
            mode="markers", name=role_label, customdata=sub["well"].astype(str).to_numpy(),
            marker=dict(symbol=symbol, size=size, color=colour, line=dict(width=1.5, color="#444444")),
            hovertemplate="%{customdata}<extra>" + role_label + "</extra>", legendgroup=role,
            showlegend=not white_open,
        ))
        if white_open:
            fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name=role_label, legendgroup=role,
                                     hoverinfo="skip", marker=dict(symbol=symbol, size=size, color="#444444")))
    if selected is not None:
        hit = wells[wells["well"].astype(str) == str(selected)]
        if not hit.empty and ok[wells.index.get_indexer(hit.index)].all():
            fig.add_trace(go.Scatter(
                x=[x_labels[int(hit["col"].iloc[0])]], y=[y_labels[int(hit["row"].iloc[0])]], mode="markers",
                name=f"selected: {selected}", hoverinfo="skip",
                marker=dict(symbol="square-open", size=size + 12, color="#000000", line=dict(width=3)),
            ))
    fig.update_yaxes(autorange="reversed", title="row", type="category", scaleanchor="x", constrain="domain")
    fig.update_xaxes(title="column", type="category", side="top", constrain="domain")
    fig = _layout(fig, title, height=max(320, 40 * n_rows + 140) if n_rows <= 8 else 640)
    # the column numbers sit on top, so the role legend goes below the plate
    fig.update_layout(legend=dict(orientation="h", yanchor="top", y=-0.04, x=0))
    return fig


# --------------------------------------------------------------------------- time courses
def time_course(points: pd.DataFrame, *, fit: pd.DataFrame | None = None, fit_label: str = "fitted initial rate",
                y_col: str = "product_mM", y_label: str = "product / mM",
                title: str | None = None) -> go.Figure:
    """Readings of one well (``time_h`` and ``y_col``) with an optional fitted line (same columns).

    When ``points`` has a boolean ``in_fit`` column, the readings used by the fit are filled and
    the others open, so the chemist sees which part of the curve the rate came from.
    """
    fig = go.Figure()
    if "in_fit" in points:
        used = points["in_fit"].fillna(False).astype(bool)
        groups = [(points[used], "reading (used in fit)", "circle"), (points[~used], "reading (not used)", "circle-open")]
    else:
        groups = [(points, "reading", "circle")]
    for frame, name, symbol in groups:
        if frame.empty:
            continue
        fig.add_trace(go.Scatter(x=frame["time_h"], y=frame[y_col], mode="markers", name=name,
                                 marker=dict(symbol=symbol, size=9, color=series_colours(1)[0],
                                             line=dict(width=1.5, color=series_colours(1)[0]))))
    if fit is not None and not fit.empty:
        fig.add_trace(go.Scatter(x=fit["time_h"], y=fit[y_col], mode="lines", name=fit_label,
                                 line=dict(color="#e69f00", width=3, dash="dash")))
    fig.update_xaxes(title="time / h", rangemode="tozero")
    fig.update_yaxes(title=y_label, rangemode="tozero")
    return _layout(fig, title, height=380)


def replicate_courses(points: pd.DataFrame, *, group_col: str = "label", y_col: str = "product_mM",
                      y_label: str = "product / mM", title: str | None = None) -> go.Figure:
    """Several wells' time courses overlaid; one colour, symbol and dash per ``group_col`` value."""
    fig = go.Figure()
    labels = list(dict.fromkeys(points[group_col].astype(str)))
    colours = series_colours(len(labels))
    for i, lab in enumerate(labels):
        sub = points[points[group_col].astype(str) == lab].sort_values("time_h")
        fig.add_trace(go.Scatter(
            x=sub["time_h"], y=sub[y_col], mode="lines+markers", name=lab,
            marker=dict(symbol=SYMBOLS[i % len(SYMBOLS)], size=7, color=colours[i]),
            line=dict(color=colours[i], dash=DASHES[i % len(DASHES)], width=1.5),
        ))
    fig.update_xaxes(title="time / h", rangemode="tozero")
    fig.update_yaxes(title=y_label, rangemode="tozero")
    return _layout(fig, title, height=420)


# --------------------------------------------------------------------------- Arrhenius
def _inv_t(temperature_c) -> np.ndarray:
    return 1000.0 / np.asarray(c_to_k(np.asarray(temperature_c, dtype=float)), dtype=float)


def _ln(x) -> np.ndarray:
    x = np.asarray(pd.to_numeric(pd.Series(x), errors="coerce"), dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), np.nan)


def arrhenius_plot(points: pd.DataFrame, prediction: pd.DataFrame | None = None, *,
                   blank_points: pd.DataFrame | None = None, blank_prediction: pd.DataFrame | None = None,
                   confidence: float = 0.95, title: str | None = None) -> go.Figure:
    """ln TOF against 1000/T, one series per catalyst, with fit lines and confidence bands.

    points: ``catalyst, temperature_c, tof_per_h`` (+ ``tof_ci_low, tof_ci_high`` for error bars;
    ``in_arrhenius_fit``, missing = True: points the fit left out are drawn open, in their own legend
    entry "left out of the fit"; ``censored``: a bound (lower: the rate only known to exceed it,
    upper: not distinguishable from the blank) is drawn as a barred arrow pointing the way the
    value can lie (up for >=, down for <=; no series symbol looks like it), without error bars).
    prediction: the output of ``kinetics.arrhenius.predict_tof`` over a temperature grid
    (``catalyst, temperature_c, tof_per_h, tof_ci_low, tof_ci_high``): the fitted line and band.
    blank_points (``temperature_c, blank_rate_mM_per_h``, optional ``in_fit``: open squares where
    false) and blank_prediction (predict_tof rows of the uncatalysed fit, in mM h⁻¹) go on a second
    y axis, because the uncatalysed reaction has no sites and so no TOF; both axes span the same
    number of ln units with the same tick step, so its slope (hence Ea) is comparable by eye, its
    level is not.
    """
    fig = go.Figure()
    cats = list(dict.fromkeys(points["catalyst"].astype(str)))
    if prediction is not None and not prediction.empty:
        cats += [c for c in dict.fromkeys(prediction["catalyst"].astype(str)) if c not in cats]
    colours = series_colours(len(cats))
    pct = f"{confidence * 100:.0f} %"
    for i, cat in enumerate(cats):
        col = colours[i]
        if prediction is not None and not prediction.empty:
            pr = prediction[prediction["catalyst"].astype(str) == cat].sort_values("temperature_c")
            if not pr.empty:
                x = _inv_t(pr["temperature_c"])
                lo, hi = _ln(pr["tof_ci_low"]), _ln(pr["tof_ci_high"])
                fig.add_trace(go.Scatter(x=np.concatenate([x, x[::-1]]), y=np.concatenate([hi, lo[::-1]]),
                                         fill="toself", fillcolor=col, opacity=0.18, line=dict(width=0),
                                         hoverinfo="skip", showlegend=False, legendgroup=cat,
                                         name=f"{cat} {pct} band"))
                fig.add_trace(go.Scatter(x=x, y=_ln(pr["tof_per_h"]), mode="lines", legendgroup=cat,
                                         name=f"{cat} fit", showlegend=False,
                                         line=dict(color=col, dash=DASHES[i % len(DASHES)], width=2)))
        pt = points[points["catalyst"].astype(str) == cat]
        if pt.empty:
            continue
        fitted = (pt["in_arrhenius_fit"].astype(object).where(pt["in_arrhenius_fit"].notna(), True).astype(bool)
                  if "in_arrhenius_fit" in pt else pd.Series(True, index=pt.index))
        cens = (pt["censored"].astype(object).where(pt["censored"].notna(), "").astype(str).str.lower()
                if "censored" in pt else pd.Series("", index=pt.index))
        symbol = SYMBOLS[i % len(SYMBOLS)]
        for kind, mask in (("fit", fitted & (cens == "")), ("out", ~fitted & (cens == "")),
                           ("lower", cens == "lower"), ("upper", cens == "upper")):
            sub = pt[mask.to_numpy()]
            if sub.empty:
                continue
            y = _ln(sub["tof_per_h"])
            err = None
            if kind in ("fit", "out") and {"tof_ci_low", "tof_ci_high"} <= set(sub.columns):
                up = _ln(sub["tof_ci_high"]) - y
                down = y - _ln(sub["tof_ci_low"])
                err = dict(type="data", array=np.nan_to_num(up), arrayminus=np.nan_to_num(down), thickness=1)
            name, sym, fill, what = {
                "fit": (cat, symbol, col, "ln(TOF / h⁻¹) = %{y:.3f}"),
                "out": (f"{cat} (left out of the fit)", f"{symbol}-open", col, "ln(TOF / h⁻¹) = %{y:.3f}, not fitted"),
                "lower": (f"{cat} (bound: faster than the first reading)", "arrow-bar-up", col,
                          "ln(TOF / h⁻¹) >= %{y:.3f} (a lower bound)"),
                "upper": (f"{cat} (bound: not above the blank)", "arrow-bar-down", col,
                          "ln(TOF / h⁻¹) <= %{y:.3f} (an upper bound)"),
            }[kind]
            fig.add_trace(go.Scatter(
                x=_inv_t(sub["temperature_c"]), y=y, mode="markers", name=name, legendgroup=cat, error_y=err,
                showlegend=True if kind != "fit" else None,
                marker=dict(symbol=sym, size=10 if kind == "fit" else 11, color=fill,
                            line=dict(width=1.5, color=col if kind != "fit" else "#333")),
                customdata=np.asarray(sub["temperature_c"], dtype=float),
                hovertemplate=cat + "<br>T = %{customdata:.1f} °C<br>" + what + "<extra></extra>",
            ))
    has_blank = blank_points is not None and not blank_points.empty
    if has_blank:
        fitted = (blank_points["in_fit"].fillna(False).astype(bool).to_numpy() if "in_fit" in blank_points
                  else np.ones(len(blank_points), dtype=bool))
        for use, name, symbol in ((fitted, "uncatalysed (blank rate, right axis)", "square"),
                                  (~fitted, "uncatalysed, below detection limit (not fitted)", "square-open")):
            bp_sub = blank_points[use]
            if bp_sub.empty:
                continue
            fig.add_trace(go.Scatter(
                x=_inv_t(bp_sub["temperature_c"]), y=_ln(bp_sub["blank_rate_mM_per_h"]), mode="markers",
                name=name, yaxis="y2", legendgroup="(uncatalysed)",
                marker=dict(symbol=symbol, size=9, color="#000000", line=dict(width=1.5, color="#000000")),
            ))
    if blank_prediction is not None and not blank_prediction.empty:
        bp = blank_prediction.sort_values("temperature_c")
        fig.add_trace(go.Scatter(x=_inv_t(bp["temperature_c"]), y=_ln(bp["tof_per_h"]), mode="lines",
                                 name="uncatalysed fit", yaxis="y2", legendgroup="(uncatalysed)",
                                 line=dict(color="#000000", dash="dot", width=2)))
        has_blank = True
    fig.update_xaxes(title="1000/T / K⁻¹")
    fig.update_yaxes(title="ln(TOF / h⁻¹)")
    extra = {}
    if has_blank:
        # both axes get the same span in ln units, so a slope (hence Ea) reads the same on either
        def _span(on_y2: bool):
            vals = [np.asarray(t.y, dtype=float) for t in fig.data
                    if t.y is not None and ((getattr(t, "yaxis", None) == "y2") == on_y2)]
            v = np.concatenate(vals) if vals else np.array([])
            v = v[np.isfinite(v)]
            return (float(v.min()), float(v.max())) if v.size else (0.0, 1.0)
        (l0, l1), (r0, r1) = _span(False), _span(True)
        half = 0.55 * max(l1 - l0, r1 - r0, 0.5)
        lm, rm = (l0 + l1) / 2, (r0 + r1) / 2
        # and the same round tick step from 0 (left alone, the right axis took ticks offset to the
        # left one's grid lines, labelled 2.068, 1.568, ...)
        step = nice_step(2 * half)
        fig.update_yaxes(range=[lm - half, lm + half], tickmode="linear", tick0=0.0, dtick=step)
        extra["yaxis2"] = dict(title="ln(blank rate / mM h⁻¹)", overlaying="y", side="right", showgrid=False,
                               range=[rm - half, rm + half], tickmode="linear", tick0=0.0, dtick=step)
    fig = _layout(fig, title, height=480, **extra)
    # the top axis in °C helps reading; plotly cannot map it non-linearly, so ticks are placed by hand
    return fig


def order_plot(points: pd.DataFrame, order: float, *, variable: str, unit: str, title: str | None = None) -> go.Figure:
    """Net rate against the varied level on log-log axes for one series of apparent orders.

    points: the series' rows of ``kinetics.orders.order_points`` (``level``, ``net_rate_mM_per_h``,
    ``in_fit``, ``plate``, ``well``); only ``in_fit`` points can be drawn (a rate <= 0 has no log).
    ``order`` is the fitted slope: its line is drawn through the centroid of the logs (where a
    least-squares line passes) over the levels measured, with dotted lines of order 0 and 1
    through the same point to read the slope against. Axis ticks are written out in full.
    """
    fig = go.Figure()
    x = pd.to_numeric(points["level"], errors="coerce").to_numpy(float)
    y = pd.to_numeric(points["net_rate_mM_per_h"], errors="coerce").to_numpy(float)
    drawable = points["in_fit"].astype(bool).to_numpy() & (x > 0) & (y > 0)     # a log takes only x, y > 0
    pts, x, y = points[drawable], x[drawable], y[drawable]
    what = "substrate" if variable == "substrate_conc" else "loading"
    if x.size:
        lx, ly = np.log(x), np.log(y)
        cx, cy = float(lx.mean()), float(ly.mean())
        xs = np.exp(np.linspace(float(lx.min()), float(lx.max()), 2))
        for slope, name, style in ((0.0, "order 0", dict(color="#999999", dash="dot", width=1)),
                                   (1.0, "order 1", dict(color="#555555", dash="dot", width=1))):
            fig.add_trace(go.Scatter(x=xs, y=np.exp(cy + slope * (np.log(xs) - cx)), mode="lines", name=name,
                                     line=style, hoverinfo="skip"))
        if math.isfinite(order):
            fig.add_trace(go.Scatter(x=xs, y=np.exp(cy + order * (np.log(xs) - cx)), mode="lines",
                                     name=f"fit: order {order:.2f}", line=dict(color=series_colours(1)[0], width=2),
                                     hoverinfo="skip"))
        label = pts["plate"].astype(str) + " " + pts["well"].astype(str)
        fig.add_trace(go.Scatter(x=x, y=y, mode="markers", name="wells",
                                 marker=dict(symbol="circle", size=9, color=series_colours(1)[0],
                                             line=dict(width=1, color="#333")),
                                 text=label, hovertemplate="%{text}<br>" + what + " = %{x:.4g} " + shown_unit(unit)
                                 + "<br>net rate = %{y:.4g} mM h⁻¹<extra></extra>"))
    fig.update_xaxes(type="log", title=f"{what} / {shown_unit(unit)}")
    fig.update_yaxes(type="log", title="net rate / mM h⁻¹")
    if x.size:
        # ticks written out (a log axis left to itself labels 200 as "2"): the levels themselves when
        # they are few, else the report's log-axis rule over what is drawn (guides and fit included)
        text = dict.fromkeys(f"{v:g}" for v in np.unique(x))
        xt = [float(v) for v in text] if len(text) <= 8 else log_ticks(float(x.min()), float(x.max()))
        drawn = np.concatenate([np.asarray(t.y, dtype=float) for t in fig.data])
        drawn = drawn[np.isfinite(drawn) & (drawn > 0)]
        yt = log_ticks(float(drawn.min()), float(drawn.max()))
        fig.update_xaxes(tickvals=xt, ticktext=[f"{v:g}" for v in xt])
        fig.update_yaxes(tickvals=yt, ticktext=[f"{v:g}" for v in yt])
    return _layout(fig, title, height=420)


# --------------------------------------------------------------------------- ranking
def forest_plot(ranking: pd.DataFrame, *, label: str, log_x: bool = False, title: str | None = None,
                highlight: list[str] | None = None) -> go.Figure:
    """Estimate and interval per candidate, best at the top (``rank, catalyst, estimate, ci_low, ci_high``).

    Rows with a ``censored`` bound are drawn as a barred arrow pointing the way the value can lie
    (right for >=, left for <=), without an interval, after the ranked ones, in their own legend entry."""
    r = ranking[np.isfinite(pd.to_numeric(ranking["estimate"], errors="coerce").to_numpy(dtype=float))]
    r = r.sort_values("rank", na_position="last")
    cens = (r["censored"].astype(object).where(r["censored"].notna(), "").astype(str).str.lower()
            if "censored" in r else pd.Series("", index=r.index))
    bounds = r[(cens != "").to_numpy()]
    r = r[(cens == "").to_numpy()]
    est = r["estimate"].to_numpy(dtype=float)
    lo = pd.to_numeric(r["ci_low"], errors="coerce").to_numpy(dtype=float)
    hi = pd.to_numeric(r["ci_high"], errors="coerce").to_numpy(dtype=float)
    cats = r["catalyst"].astype(str).tolist()
    hl = set(highlight or [])
    base = series_colours(1)[0]
    colour = np.where(np.isin(np.asarray(cats, dtype=object), list(hl)), "#e69f00", base).tolist() if cats else []
    fig = go.Figure(go.Scatter(
        x=est, y=cats, mode="markers", name="estimate",
        error_x=dict(type="data", array=np.nan_to_num(hi - est), arrayminus=np.nan_to_num(est - lo), thickness=1.5),
        marker=dict(symbol="diamond", size=10, color=colour),
        customdata=np.stack([lo, hi], axis=1) if len(cats) else None,
        hovertemplate="%{y}<br>" + label + ": %{x:.3g}<br>interval %{customdata[0]:.3g} – %{customdata[1]:.3g}<extra></extra>",
    ))
    if not bounds.empty:
        bc = bounds["censored"].astype(str).str.lower()
        fig.add_trace(go.Scatter(
            x=bounds["estimate"].to_numpy(dtype=float), y=bounds["catalyst"].astype(str).tolist(), mode="markers",
            name="bound (not ranked)", marker=dict(symbol=np.where(bc == "lower", "arrow-bar-right", "arrow-bar-left"
                                                                    ).tolist(), size=13, color="#555555"),
            customdata=np.where(bc == "lower", ">=", "<=").tolist(),
            hovertemplate="%{y}<br>" + label + " %{customdata} %{x:.3g} (a bound, not ranked)<extra></extra>"))
    fig.update_yaxes(autorange="reversed", title="candidate (best at top)", type="category",
                     categoryorder="array", categoryarray=cats + bounds["catalyst"].astype(str).tolist())
    fig.update_xaxes(title=label, type="log" if log_x else "linear")
    fig = _layout(fig, title, height=max(300, 26 * (len(cats) + len(bounds)) + 120))
    if not bounds.empty:                             # two legend entries: keep them clear of the title
        fig.update_layout(margin=dict(t=90), title=dict(y=0.99, yanchor="top"),
                          legend=dict(orientation="h", yanchor="bottom", y=1.0, x=0))
    return fig


def rank_intervals(ranking: pd.DataFrame, *, title: str | None = None) -> go.Figure:
    """Rank and its interval per candidate (``rank, rank_low, rank_high, catalyst``); 1 = best."""
    r = ranking[pd.to_numeric(ranking["rank"], errors="coerce").notna()].sort_values("rank")
    rank = r["rank"].to_numpy(dtype=float)
    lo = pd.to_numeric(r["rank_low"], errors="coerce").to_numpy(dtype=float)
    hi = pd.to_numeric(r["rank_high"], errors="coerce").to_numpy(dtype=float)
    fig = go.Figure(go.Scatter(
        x=rank, y=r["catalyst"].astype(str), mode="markers", name="rank",
        error_x=dict(type="data", array=np.nan_to_num(hi - rank), arrayminus=np.nan_to_num(rank - lo), thickness=1.5),
        marker=dict(symbol="circle", size=9, color=series_colours(1)[0]),
    ))
    fig.update_yaxes(autorange="reversed", title="candidate", type="category")
    fig.update_xaxes(title="rank (1 = best)", rangemode="tozero", dtick=1 if len(r) <= 25 else None)
    return _layout(fig, title, height=max(300, 26 * len(r) + 120))


def p_top_bars(ranking: pd.DataFrame, *, k: int, title: str | None = None) -> go.Figure:
    """P(candidate is among the top K) as horizontal bars, best rank at the top."""
    r = ranking[pd.to_numeric(ranking["rank"], errors="coerce").notna()].sort_values("rank")
    fig = go.Figure(go.Bar(x=r["p_top"].astype(float), y=r["catalyst"].astype(str), orientation="h",
                           marker=dict(color=r["p_top"].astype(float), colorscale=COLORSCALE, cmin=0, cmax=1),
                           hovertemplate="%{y}: P(top " + str(k) + ") = %{x:.2f}<extra></extra>", name=f"P(top {k})"))
    fig.update_yaxes(autorange="reversed", title="candidate", type="category")
    fig.update_xaxes(title=f"P(in top {k}) (probability)", range=[0, 1])
    return _layout(fig, title, height=max(300, 26 * len(r) + 120))


#: above this many points a scatter is drawn with WebGL (SVG slows the browser down)
WEBGL_POINTS = 5000
#: at most this many front members carry a text label (the rest show their name on hover)
PARETO_LABELS = 30


def pareto_plot(frame: pd.DataFrame, *, x: str, y: str, x_label: str, y_label: str, front_col: str = "on_front",
                log_x: bool = False, log_y: bool = False, title: str | None = None) -> go.Figure:
    """Two objectives per candidate; the non-dominated ones (``front_col`` true) joined by a line.

    Front members are labelled (the first :data:`PARETO_LABELS` along the x axis); dominated
    candidates are unlabelled markers with their name on hover, drawn with WebGL when there are
    more than :data:`WEBGL_POINTS` of them.
    """
    fig = go.Figure()
    front = frame[front_col].fillna(False).astype(bool) if front_col in frame else pd.Series(False, index=frame.index)
    hover = "%{text}<br>" + x_label + ": %{x:.3g}<br>" + y_label + ": %{y:.3g}<extra></extra>"
    sub = frame[~front]
    if not sub.empty:
        trace = go.Scattergl if len(sub) > WEBGL_POINTS else go.Scatter
        fig.add_trace(trace(x=sub[x], y=sub[y], mode="markers", name="dominated", text=sub["catalyst"].astype(str),
                            hovertemplate=hover, marker=dict(symbol="circle-open", size=9, color="#777777",
                                                             line=dict(width=1.2, color="#777777"))))
    fr = frame[front].sort_values(x)
    if not fr.empty:
        names = fr["catalyst"].astype(str)
        labels = np.where(np.arange(len(fr)) < PARETO_LABELS, names, "")
        fig.add_trace(go.Scatter(x=fr[x], y=fr[y], mode="markers+text", name="Pareto front", text=labels,
                                 customdata=names, textposition="top center",
                                 hovertemplate=hover.replace("%{text}", "%{customdata}"),
                                 marker=dict(symbol="diamond", size=11, color=series_colours(1)[0],
                                             line=dict(width=1.5, color=series_colours(1)[0]))))
    if len(fr) > 1:
        fig.add_trace(go.Scatter(x=fr[x], y=fr[y], mode="lines", name="front", showlegend=False, hoverinfo="skip",
                                 line=dict(color=series_colours(1)[0], dash="dot")))
    fig.update_xaxes(title=x_label, type="log" if log_x else "linear")
    fig.update_yaxes(title=y_label, type="log" if log_y else "linear")
    return _layout(fig, title, height=460)


# --------------------------------------------------------------------------- plate quality
def zprime_bars(quality: pd.DataFrame, *, threshold: float, title: str | None = None) -> go.Figure:
    """Z' per plate (``plate, z_prime``) with the acceptance line; a ``robust_zprime`` column (the
    upper-quartile sample wells against the blanks, plates without a benchmark included) is drawn
    as diamond markers beside the bars."""
    z = pd.to_numeric(quality["z_prime"], errors="coerce")
    plates = quality["plate"].astype(str)
    low = (z < threshold).to_numpy()
    has = z.notna().to_numpy()                       # plates without a benchmark have no bar
    fig = go.Figure()
    # two traces (not a pattern per bar): one hatch pattern for the whole low set keeps the SVG small
    for mask, name, colour, hatch in ((has & ~low, f"Z' >= {threshold:g}", series_colours(1)[0], ""),
                                      (low, f"Z' < {threshold:g}", "#e69f00", "/")):
        if mask.any():
            fig.add_trace(go.Bar(x=plates[mask], y=z[mask], name=name,
                                 marker=dict(color=colour, pattern=dict(shape=hatch)),
                                 hovertemplate="%{x}: Z' = %{y:.2f}<extra></extra>"))
    if "robust_zprime" in quality:
        rz = pd.to_numeric(quality["robust_zprime"], errors="coerce")
        has = rz.notna().to_numpy()
        if has.any():
            fig.add_trace(go.Scatter(x=plates[has], y=rz[has], mode="markers", name="robust Z' (samples vs blanks)",
                                     showlegend=True,
                                     marker=dict(symbol="diamond", size=11, color="#000000",
                                                 line=dict(width=1, color="#ffffff")),
                                     hovertemplate="%{x}: robust Z' = %{y:.2f}<extra></extra>"))
    fig.update_layout(barmode="overlay")
    fig.add_hline(y=threshold, line=dict(color="#000000", dash="dash"),
                  annotation_text=f"Z' = {threshold:g}", annotation_position="top left")
    fig.update_xaxes(title="plate", type="category", categoryorder="array", categoryarray=plates.tolist())
    fig.update_yaxes(title="Z' (dimensionless)")
    return _layout(fig, title, height=360)


def control_chart(points: pd.DataFrame, *, x: str, y: str, y_label: str, centre: float | None,
                  lower: float | None, upper: float | None, out_col: str | None = None,
                  x_label: str = "plate (run order)", title: str | None = None) -> go.Figure:
    """A Shewhart-style chart: one point per plate, centre line and control limits."""
    fig = go.Figure()
    out = points[out_col].fillna(False).astype(bool) if out_col and out_col in points else pd.Series(False, index=points.index)
    fig.add_trace(go.Scatter(x=points[x].astype(str), y=points[y], mode="lines+markers", name="benchmark",
                             line=dict(color=series_colours(1)[0]),
                             marker=dict(symbol="circle", size=9, color=series_colours(1)[0])))
    if out.any():
        fig.add_trace(go.Scatter(x=points.loc[out, x].astype(str), y=points.loc[out, y], mode="markers",
                                 name="outside limits", marker=dict(symbol="x", size=14, color="#e69f00",
                                                                    line=dict(width=2))))
    for val, name, dash in ((centre, "centre", "solid"), (lower, "lower limit", "dash"), (upper, "upper limit", "dash")):
        if val is not None and np.isfinite(val):
            fig.add_hline(y=float(val), line=dict(color="#555555", dash=dash), annotation_text=name,
                          annotation_position="right")
    fig.update_xaxes(title=x_label, type="category")
    fig.update_yaxes(title=y_label)
    return _layout(fig, title, height=380)


def fitted_course(well: pd.Series, *, t_end_h: float, n: int = 60) -> tuple[pd.DataFrame, str]:
    """The fitted curve of one well from its ``well_rates`` row, and a label for it.

    An integrated rate law (``method`` one of :data:`screenlab.kinetics.ratelaws.INTEGRATED`):
    the law with the well's parameters (``law_p1``, ``law_p2``; in conversion units times the
    theoretical maximum when ``law_capped``) over the whole course; ``early_polynomial``: its
    quadratic over the early window (``window_end_h`` when given); ``end_point`` and
    ``first_reading`` (a bound): the chord from the origin to the reading. Only evaluates the core's fit.
    """
    from screenlab.kinetics import ratelaws

    method = str(well.get("method", ""))
    rate = float(well.get("rate_mM_per_h", np.nan))
    p1, p2 = float(well.get("law_p1", np.nan)), float(well.get("law_p2", np.nan))
    scale = float(well.get("substrate_conc_mM", np.nan)) if bool(well.get("law_capped", False)) else 1.0
    if method == "first_reading":
        t = np.array([0.0, float(well.get("first_time_h", np.nan))])
        return pd.DataFrame({"time_h": t, "product_mM": rate * t}), f"done by the first reading: rate ≥ {_fmt(rate)} mM h⁻¹"
    if method == "end_point":
        t = np.array([0.0, float(well.get("last_time_h", t_end_h))])
        return pd.DataFrame({"time_h": t, "product_mM": rate * t}), f"end-point average rate: {_fmt(rate)} mM h⁻¹"
    if method in ratelaws.N_PARAMS and np.isfinite(p1):
        t_stop = float(well.get("window_end_h", np.nan)) if method == ratelaws.GENERIC else t_end_h
        t_stop = t_stop if np.isfinite(t_stop) and t_stop > 0 else t_end_h
        t = np.linspace(0.0, t_stop, n)
        if method == "zero_order" and scale == 1.0:
            y = p1 * t                                        # no maximum known: no run-out
        else:
            y = np.asarray(ratelaws.predict(method, p1, p2, t), dtype=float) * scale
        return (pd.DataFrame({"time_h": t, "product_mM": y}),
                f"{method.replace('_', ' ')}: rate at t = 0 is {_fmt(rate)} mM h⁻¹")
    return pd.DataFrame(columns=["time_h", "product_mM"]), "no rate"


# --------------------------------------------------------------------------- readings that arrived
#: status of a position (screenlab.ingest.forms.ARRIVAL_STATUSES) -> (marker symbol, colour, label);
#: Okabe-Ito colours and distinct shapes, so the statuses differ without colour too
ARRIVAL_STYLE: dict[str, tuple[str, str, str]] = {
    "read": ("circle", "#0072b2", "readings arrived"),
    "missing": ("circle-open", "#e69f00", "expected, nothing arrived"),
    "extra": ("diamond", "#d55e00", "values where the layout has no well"),
    "empty": ("x-thin-open", "#bbbbbb", "empty"),
}


def arrival_map(positions: pd.DataFrame, *, n_rows: int, n_cols: int, title: str | None = None) -> go.Figure:
    """One plate: what arrived for each position (``screenlab.ingest.forms.arrival_map`` rows of
    one plate: ``well, row, col, role, catalyst, n_readings, status``). Row A on top, column 1 on
    the left; one trace per status, marker shape and colour both telling them apart."""
    x_labels = [str(i + 1) for i in range(n_cols)]
    y_labels = list(ROW_LETTERS[:n_rows])
    fig = go.Figure()
    size = 16 if n_rows <= 8 else 8
    for status, (symbol, colour, label) in ARRIVAL_STYLE.items():
        sub = positions[positions["status"].astype(str) == status]
        n = len(sub)
        name = f"{label} ({n})"
        cat = sub["catalyst"].astype("string").fillna("").astype(str)
        role = sub["role"].astype("string").fillna("not in the layout").astype(str)
        hover = (sub["well"].astype(str) + " · " + role + np.where(cat != "", " · " + cat, "")
                 + "<br>" + sub["n_readings"].astype(int).astype(str) + " readings")
        fig.add_trace(go.Scatter(
            x=[x_labels[i] for i in sub["col"].astype(int)], y=[y_labels[i] for i in sub["row"].astype(int)],
            mode="markers", name=name, customdata=sub["well"].astype(str).to_numpy(), text=hover.to_numpy(),
            hovertemplate="%{text}<extra>" + label + "</extra>", visible=True if n else "legendonly",
            marker=dict(symbol=symbol, size=size, color=colour, line=dict(width=1.5, color=colour if status != "read" else "#333333")),
        ))
    fig.update_yaxes(autorange="reversed", title="row", type="category", categoryorder="array",
                     categoryarray=y_labels, scaleanchor="x", constrain="domain")
    fig.update_xaxes(title="column", type="category", categoryorder="array", categoryarray=x_labels, side="top",
                     constrain="domain")
    fig = _layout(fig, title, height=max(320, 40 * n_rows + 140) if n_rows <= 8 else 640)
    fig.update_layout(legend=dict(orientation="h", yanchor="top", y=-0.04, x=0))
    return fig
