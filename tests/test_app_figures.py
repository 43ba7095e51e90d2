"""The plotly figure builders (screenlab.viz.figures): axes, units, orientation, colour, markers."""
from __future__ import annotations

import numpy as np
import pandas as pd
from plotly.colors import sample_colorscale
from scipy import constants

from screenlab.plates import all_wells
from screenlab.viz import figures


def _plate():
    w = all_wells(96)
    w["role"] = np.where(w["col"] == 0, "blank", np.where(w["col"] == 11, "reference", "sample"))
    w.loc[w["well"] == "H6", "role"] = "empty"
    w["catalyst"] = "C1"
    w["rate_mM_per_h"] = w["row"] * 12.0 + w["col"]
    return w


def test_heatmap_puts_a1_top_left_and_values_in_place():
    w = _plate()
    fig = figures.plate_heatmap(w, "rate_mM_per_h", n_rows=8, n_cols=12, selected="B3")
    heat = fig.data[0]
    z = np.asarray(heat.z)
    assert z.shape == (8, 12)
    assert z[1, 2] == 1 * 12 + 2  # B3
    assert list(heat.y)[0] == "A" and list(heat.x)[0] == "1"
    assert fig.layout.yaxis.autorange == "reversed"  # row A at the top (ANSI/SLAS 4-2004 well positions)
    assert "mM h⁻¹" in heat.colorbar.title.text


def test_roles_differ_by_shape_and_not_only_by_colour():
    fig = figures.plate_heatmap(_plate(), "rate_mM_per_h", n_rows=8, n_cols=12)
    wells = [t for t in fig.data[1:] if t.customdata is not None]     # the traces that draw wells
    symbols = {t.name: t.marker.symbol for t in wells}
    assert len(set(symbols.values())) == len(symbols) == 4
    # every well name is there for click selection
    names = np.concatenate([np.asarray(t.customdata) for t in wells])
    assert len(names) == 96
    # each role has one legend entry, in its own shape and in a colour that shows on the white legend
    entries = [t for t in fig.data[1:] if t.showlegend is not False]
    assert sorted(t.name for t in entries) == sorted(symbols)
    for t in entries:
        assert t.marker.symbol == symbols[t.name]
        assert not (t.marker.symbol.endswith("-open") and str(t.marker.color).lower() == "#ffffff"), t.name


def test_viridis_is_the_perceptually_uniform_map():
    # matplotlib's viridis starts at (0.267004, 0.004874, 0.329415) and ends at
    # (0.993248, 0.906157, 0.143936) (van der Walt & Smith, matplotlib _cm_listed.py; from memory)
    first, last = sample_colorscale(figures.COLORSCALE, [0.0, 1.0])
    rgb = lambda s: np.array([float(v) for v in s[4:-1].split(",")]) / 255  # noqa: E731
    assert np.allclose(rgb(first), [0.267004, 0.004874, 0.329415], atol=0.01)
    assert np.allclose(rgb(last), [0.993248, 0.906157, 0.143936], atol=0.01)


def test_arrhenius_axis_is_1000_over_kelvin_and_ln_tof():
    pts = pd.DataFrame({"catalyst": ["A", "A"], "temperature_c": [25.0, 50.0], "tof_per_h": [10.0, 40.0],
                        "tof_ci_low": [8.0, 30.0], "tof_ci_high": [12.0, 50.0]})
    pred = pd.DataFrame({"catalyst": ["A"] * 3, "temperature_c": [20.0, 35.0, 55.0], "tof_per_h": [8.0, 18.0, 50.0],
                         "tof_ci_low": [6.0, 15.0, 40.0], "tof_ci_high": [10.0, 21.0, 60.0]})
    fig = figures.arrhenius_plot(pts, pred)
    marker = next(t for t in fig.data if t.mode == "markers")
    # 0 degC = 273.15 K (scipy.constants.zero_Celsius, CODATA)
    assert np.allclose(marker.x, 1000.0 / (np.array([25.0, 50.0]) + constants.zero_Celsius))
    assert np.allclose(marker.y, np.log([10.0, 40.0]))
    assert np.allclose(marker.error_y.array, np.log([12.0, 50.0]) - np.log([10.0, 40.0]))
    band = next(t for t in fig.data if t.fill == "toself")
    assert len(band.x) == 6
    assert fig.layout.xaxis.title.text == "1000/T / K⁻¹" and fig.layout.yaxis.title.text == "ln(TOF / h⁻¹)"


def test_forest_plot_orders_by_rank_and_draws_the_interval():
    r = pd.DataFrame({"rank": [2, 1, 3], "catalyst": ["B", "A", "C"], "estimate": [5.0, 9.0, 1.0],
                      "ci_low": [4.0, 7.0, 0.5], "ci_high": [7.0, 10.0, 2.0]})
    fig = figures.forest_plot(r, label="TOF / h⁻¹", log_x=True, highlight=["B"])
    tr = fig.data[0]
    assert list(tr.y) == ["A", "B", "C"]
    assert np.allclose(tr.error_x.array, [1.0, 2.0, 1.0]) and np.allclose(tr.error_x.arrayminus, [2.0, 1.0, 0.5])
    assert fig.layout.xaxis.type == "log"
    assert tr.marker.color[1] != tr.marker.color[0]


def test_fitted_course_follows_the_core_parameters():
    # first order, plateau at the theoretical maximum: P = S0 (1 - exp(-k t)); at t = 10 h with
    # k = 0.2 h-1: 100 (1 - e^-2) = 86.466 mM (the integrated first-order law)
    curve, label = figures.fitted_course(pd.Series({"method": "first_order", "rate_mM_per_h": 20.0, "law_p1": 0.2,
                                                    "law_p2": np.nan, "law_capped": True,
                                                    "substrate_conc_mM": 100.0}), t_end_h=10.0)
    assert np.isclose(curve["product_mM"].iloc[-1], 100.0 * (1 - np.exp(-2.0)))
    assert label == "first order: rate at t = 0 is 20 mM h⁻¹"
    # zero order runs out at t = 1/r: 0.25 h-1 -> flat at 100 mM from 4 h
    curve, _ = figures.fitted_course(pd.Series({"method": "zero_order", "rate_mM_per_h": 25.0, "law_p1": 0.25,
                                                "law_capped": True, "substrate_conc_mM": 100.0}), t_end_h=10.0)
    assert np.isclose(curve["product_mM"].max(), 100.0) and np.isclose(curve["product_mM"].iloc[-1], 100.0)
    # the early quadratic stops at the end of its window
    curve, _ = figures.fitted_course(pd.Series({"method": "early_polynomial", "rate_mM_per_h": 2.0, "law_p1": 2.0,
                                                "law_p2": -0.1, "law_capped": False, "window_end_h": 3.0}),
                                     t_end_h=10.0)
    assert np.isclose(curve["time_h"].max(), 3.0) and np.isclose(curve["product_mM"].iloc[-1], 2.0 * 3 - 0.1 * 9)
    # a bound: the chord to the first reading, labelled as a bound
    line, label = figures.fitted_course(pd.Series({"method": "first_reading", "rate_mM_per_h": 180.0,
                                                   "first_time_h": 0.5}), t_end_h=10.0)
    assert np.allclose(line["product_mM"], [0.0, 90.0]) and "≥" in label


def test_arrhenius_axes_share_their_span_so_slopes_compare():
    import pandas as pd

    from screenlab.viz.figures import arrhenius_plot

    pts = pd.DataFrame({"catalyst": ["A"] * 3, "temperature_c": [40, 50, 60], "tof_per_h": [10, 20, 40.0]})
    bp = pd.DataFrame({"temperature_c": [40, 50, 60], "blank_rate_mM_per_h": [0.01, 0.05, 0.3]})
    f = arrhenius_plot(pts, blank_points=bp)
    r1, r2 = f.layout.yaxis.range, f.layout.yaxis2.range
    assert abs((r1[1] - r1[0]) - (r2[1] - r2[0])) < 1e-12
    assert r2[0] <= np.log(0.01) and np.log(0.3) <= r2[1] and r1[0] <= np.log(10) and np.log(40) <= r1[1]
    # both axes tick at round values from 0 with one step, so the right axis reads 0, -1, -2, ...
    # rather than offsets of the left axis' grid
    for ax in (f.layout.yaxis, f.layout.yaxis2):
        assert ax.tickmode == "linear" and ax.tick0 == 0 and ax.dtick == f.layout.yaxis.dtick


def test_arrhenius_blanks_not_fitted_are_drawn_open():
    import pandas as pd

    from screenlab.viz.figures import arrhenius_plot

    pts = pd.DataFrame({"catalyst": ["A"] * 3, "temperature_c": [40, 50, 60], "tof_per_h": [10, 20, 40.0]})
    bp = pd.DataFrame({"temperature_c": [40, 50, 60], "blank_rate_mM_per_h": [0.01, 0.05, 0.3],
                       "in_fit": [False, True, True]})
    marks = {t.marker.symbol: len(t.x) for t in arrhenius_plot(pts, blank_points=bp).data if t.yaxis == "y2"}
    assert marks == {"square": 2, "square-open": 1}
    # without in_fit every blank point is drawn as fitted
    bp_all = bp.drop(columns="in_fit")
    assert {t.marker.symbol: len(t.x) for t in arrhenius_plot(pts, blank_points=bp_all).data
            if t.yaxis == "y2"} == {"square": 3}


def test_nice_step_is_one_two_or_five_times_a_power_of_ten():
    from screenlab.viz.figures import nice_step

    # the rule in plain lines (common practice, no source): the smallest 1/2/5 x 10^k at least span/7
    for span, want in [(7.0, 1.0), (3.5, 0.5), (4.4, 1.0), (1.0, 0.2), (70.0, 10.0), (0.07, 0.01), (15.0, 5.0)]:
        assert np.isclose(nice_step(span), want), (span, nice_step(span))
    rng = np.random.default_rng(0)
    for span in 10 ** rng.uniform(-3, 3, 200):
        step = nice_step(span)
        mant = step / 10 ** np.floor(np.log10(step) + 1e-9)
        assert np.isclose(mant, [1, 2, 5, 10]).any() and span / step <= 7 * (1 + 1e-9) and span / step > 7 / 2.5 - 1e-9


def test_order_plot_is_log_log_with_the_fitted_slope_and_ticks_written_out():
    # a substrate series of order 0.5 (rate = 3 c^0.5): the fit line drawn has slope 0.5 in logs,
    # the dotted guides 0 and 1, and the axes are labelled with whole numbers (200, not "2")
    conc = np.repeat([25.0, 50.0, 100.0, 200.0], 2)
    rate = 3.0 * conc ** 0.5 * np.tile([1.02, 0.98], 4)
    pts = pd.DataFrame({"level": [*conc, 400.0], "net_rate_mM_per_h": [*rate, -1.0], "in_fit": [True] * 8 + [False],
                        "plate": "P1", "well": [f"A{i + 1}" for i in range(9)]})
    fig = figures.order_plot(pts, 0.5, variable="substrate_conc", unit="mM")
    assert fig.layout.xaxis.type == "log" and fig.layout.yaxis.type == "log"
    assert fig.layout.xaxis.title.text == "substrate / mM"
    slopes = {}
    for t in fig.data:
        if t.mode == "lines":
            x, y = np.log(np.asarray(t.x, float)), np.log(np.asarray(t.y, float))
            slopes[t.name] = (y[1] - y[0]) / (x[1] - x[0])
    assert abs(slopes["fit: order 0.50"] - 0.5) < 1e-12
    assert abs(slopes["order 0"]) < 1e-12 and abs(slopes["order 1"] - 1) < 1e-12
    wells = next(t for t in fig.data if t.name == "wells")
    assert len(wells.x) == 8                         # the well with a negative rate has no log
    assert list(fig.layout.xaxis.ticktext) == ["25", "50", "100", "200"]   # the levels themselves
    # y: the report's log-axis rule over everything drawn (the order 1 guide reaches 25/200 of the
    # centre and 200/25 times it)
    from screenlab.viz.svg import log_ticks

    drawn = np.concatenate([np.asarray(t.y, float) for t in fig.data])
    assert list(fig.layout.yaxis.tickvals) == log_ticks(drawn.min(), drawn.max())
    assert list(fig.layout.yaxis.ticktext) == [f"{v:g}" for v in fig.layout.yaxis.tickvals]
    # a zero-order series over a narrow range still gets ticks inside it
    flat = figures.order_plot(pts.assign(net_rate_mM_per_h=1.32), 0.0, variable="substrate_conc", unit="mM")
    inside = [v for v in flat.layout.yaxis.tickvals if 1.32 / 8 <= v <= 1.32 * 8]
    assert len(inside) >= 3
    # the line passes through the centre of the logs, where a least-squares line passes
    fit = next(t for t in fig.data if t.name == "fit: order 0.50")
    lx, ly = np.log(conc), np.log(rate)
    x0 = np.log(fit.x[0])
    assert abs(np.log(fit.y[0]) - (ly.mean() + 0.5 * (x0 - lx.mean()))) < 1e-12
