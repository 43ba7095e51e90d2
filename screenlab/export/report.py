"""The campaign report: one self-contained HTML file to send to someone who does not run ScreenLab.

:func:`campaign_report` returns the HTML text. Self-contained means: no script at all, no
stylesheet, font or image fetched from anywhere (the plots are inline SVG from
:mod:`screenlab.viz.svg`, the styles one inline ``<style>``), so the file opens offline in any
browser and prints to PDF from it (print styles keep tables and figures whole on a page).

Sections, in order: campaign summary (and the round it follows), the decision and its note,
ranking with intervals (forest plot and table), Arrhenius plot of the shortlisted candidates with
their activation parameters, plate quality, flags in plain words, provenance (import ids, file
hashes, analysis settings, campaign version, ScreenLab version) and the scale-up safety caution.

Every number comes from the core (the :class:`~screenlab.pipeline.Analysis`, the ranking, the
store's records); nothing is estimated here. Bounds (censored estimates) are written ">= x" /
"<= x" (:mod:`screenlab.stats.bounds`).
"""
from __future__ import annotations

import math
from datetime import datetime, timezone
from html import escape

import numpy as np
import pandas as pd

from screenlab.export.shortlist import SAFETY_NOTE
from screenlab.stats.bounds import censored_of, estimate_text, number_text

from screenlab.model import UNCATALYSED  # noqa: E402  (the one reserved name)
#: ranked candidates listed in the report's ranking table and forest plot (the chosen ones and the
#: benchmark always); the rest are counted
MAX_RANKED_ROWS = 40
MAX_UNRANKED_ROWS = 30
#: the flags column's header: a link to the sentences (the cells hold the codes)
_FLAGS_HEAD = "<a href='#flags'>flags</a>"
#: how the report names a recorded decision's constraints where the key itself reads poorly
_CONSTRAINT_LABELS = {"top_k": "top K", "monte_carlo_se": "largest Monte Carlo SE of a probability",
                      "next_round_temperatures_c": "next-round temperatures / °C",
                      "next_round_replicates": "next-round replicates",
                      "include_transport_limited": "transport-limited candidates included"}

_CSS = """
:root { color-scheme: light; }
body { font-family: Helvetica, Arial, sans-serif; color: #1a1a1a; max-width: 980px; margin: 24px auto;
       padding: 0 18px; font-size: 14px; line-height: 1.45; }
h1 { font-size: 24px; margin-bottom: 2px; }
h2 { font-size: 18px; border-bottom: 2px solid #0072B2; padding-bottom: 3px; margin-top: 30px; break-after: avoid; }
h3 { font-size: 15px; margin-bottom: 4px; break-after: avoid; }
.sub { color: #555; margin-top: 0; }
table { border-collapse: collapse; width: 100%; margin: 8px 0 14px; font-size: 12.5px; }
th, td { border: 1px solid #cfcfcf; padding: 3px 6px; text-align: left; vertical-align: top; }
th { background: #eef3f8; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr { break-inside: avoid; }
tr.chosen td { background: #fff6e0; font-weight: bold; }
tr.bench td { background: #f3f3f3; }
.grid { display: grid; grid-template-columns: repeat(4, 1fr); gap: 8px; margin: 10px 0; }
.grid div { border: 1px solid #d5dde6; border-radius: 4px; padding: 6px 8px; }
.grid b { display: block; font-size: 18px; }
.note { border-left: 4px solid #E69F00; background: #fffaf0; padding: 8px 12px; white-space: pre-wrap; margin: 8px 0; }
.warn { border: 1px solid #D55E00; background: #fff3ec; padding: 8px 12px; margin: 8px 0; }
.safety { border: 2px solid #D55E00; padding: 8px 14px; white-space: pre-wrap; break-inside: avoid; }
figure { margin: 10px 0; break-inside: avoid; }
figcaption { font-size: 12px; color: #444; }
code, .hash { font-family: "Courier New", monospace; font-size: 11.5px; word-break: break-all; }
td code { word-break: normal; white-space: nowrap; }
.muted { color: #666; }
@page { size: A4; margin: 14mm; }
@media print { body { margin: 0; max-width: none; font-size: 11.5px; } h2 { margin-top: 18px; }
               a { color: inherit; text-decoration: none; } }
"""


def _e(v) -> str:
    return escape("" if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA else str(v))


def _isna(v) -> bool:
    try:
        return v is None or v is pd.NA or bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def _num(v, digits: int = 3) -> str:
    return "–" if _isna(v) else number_text(v, digits)


def _p(v) -> str:
    if _isna(v):
        return "–"
    return f"{float(v):.2f}"


def _int(v) -> str:
    return "–" if _isna(v) else str(int(v))


def _table(header: list[str], rows: list[list[str]], *, classes: list[str] | None = None,
           numeric: set[int] | None = None) -> str:
    """An HTML table; cells are already-escaped HTML."""
    numeric = numeric or set()
    head = "".join(f"<th>{h}</th>" for h in header)
    body = []
    for i, r in enumerate(rows):  # display rows
        cls = f" class='{classes[i]}'" if classes and classes[i] else ""
        cells = "".join(f"<td class='num'>{c}</td>" if j in numeric else f"<td>{c}</td>" for j, c in enumerate(r))
        body.append(f"<tr{cls}>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _codes(flags) -> list[str]:
    if _isna(flags):
        return []
    return [c for c in str(flags).split(";") if c]


def _flag_cell(flags, help_: dict[str, str]) -> str:
    """A table cell's flags: the codes, each with its sentence as a tooltip; the sentences
    themselves are written once, under "Flags in plain words" (:func:`_flag_section`)."""
    return " ".join(f"<code title='{_e(help_.get(c, 'no description'))}'>{_e(c)}</code>" for c in _codes(flags))


def _metric_info(metric: str):
    from screenlab.stats.candidates import METRICS

    m = METRICS.get(metric)
    unit = {"h-1": "h⁻¹", "kJ/mol": "kJ mol⁻¹"}.get(m.unit, m.unit) if m else ""
    return m, unit


def decision_from_draft(draft) -> tuple[dict, pd.DataFrame]:
    """A not-yet-recorded :class:`~screenlab.export.decision.DecisionDraft` in the shape of a stored
    decision (``decision`` None), for :func:`campaign_report`."""
    rec = {"decision": None, "campaign": draft.campaign, "created_at": None, "author": draft.author,
           "metric": draft.metric, "temperature_c": draft.temperature_c, "top_k": draft.top_k, "note": draft.note,
           "supersedes": draft.supersedes, "status": "draft (not recorded)", "on_current_data": True,
           "campaign_version": draft.campaign_version, "constraints": draft.constraints, "settings": draft.settings,
           "draws": draft.draws, "seed": draft.seed, "catalysts": ", ".join(draft.chosen)}
    return rec, draft.catalysts.copy()


# --------------------------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------------------------

def _summary(analysis, campaign: str, parent: dict | None, children: list[str]) -> str:
    data = analysis.data
    m = data.manifest
    roles = data.wells["role"].astype(str).value_counts()
    temps = sorted(pd.to_numeric(data.plates["temperature_c"], errors="coerce").dropna().round(2).unique())
    cats = data.catalysts["catalyst"].astype(str)
    refs = set(data.wells.loc[data.wells["role"].astype(str) == "reference", "catalyst"].dropna().astype(str))
    tiles = [("Plates", len(data.plates)), ("Candidates", int((~cats.isin(refs)).sum())),
             ("Sample wells", int(roles.get("sample", 0))), ("Blank wells", int(roles.get("blank", 0))),
             ("Benchmark wells", int(roles.get("reference", 0))), ("Readings", f"{len(data.readings):,}"),
             ("Temperatures / °C", ", ".join(f"{t:g}" for t in temps) or "–"),
             ("Reference T / °C", f"{analysis.settings.reference_temperature_c:g}")]
    out = ["<h2>Campaign summary</h2>"]
    if m.reaction or m.description:
        out.append(f"<p>{_e(m.reaction)}{'<br>' if m.reaction and m.description else ''}{_e(m.description)}</p>")
    out.append("<div class='grid'>" + "".join(f"<div>{_e(k)}<b>{_e(v)}</b></div>" for k, v in tiles) + "</div>")
    readout = m.readout_kind + (f" ({m.readout_scale})" if m.readout_scale else "")
    bench = ", ".join(sorted(refs)) or "none"
    planned = "" if len(data.readings) else " · planned: no readings yet"
    out.append(f"<p>Readout: {_e(readout)} · benchmark: {_e(bench)} · intervals at "
               f"{analysis.settings.confidence * 100:g} %{planned}</p>")
    if parent:
        txt = f"This round follows campaign <b>{_e(parent.get('campaign'))}</b>"
        if parent.get("decision") is not None:
            txt += f", decision {_e(parent['decision'])}"
            rec = parent.get("record")
            if rec:
                txt += (f" of {_e(_when(rec.get('created_at')))} by {_e(rec.get('author'))}: chose "
                        f"{_e(rec.get('catalysts'))}")
            else:
                txt += " (not in this store)"
        out.append(f"<p>{txt}.</p>")
        if parent.get("record") and parent["record"].get("note"):
            out.append(f"<div class='note'>{_e(parent['record']['note'])}</div>")
    if children:
        out.append(f"<p>Rounds after this one: {_e(', '.join(children))}.</p>")
    return "\n".join(out)


def _when(v) -> str:
    if _isna(v):
        return "–"
    try:
        return pd.Timestamp(v).strftime("%Y-%m-%d %H:%M UTC")
    except (TypeError, ValueError):
        return str(v)


def _decision(rec: dict | None, rows: pd.DataFrame | None, help_: dict, current_version: str | None) -> str:
    out = ["<h2>Decision</h2>"]
    if rec is None:
        out.append("<p class='muted'>No decision has been recorded for this campaign yet "
                   "(record one with <code>screenlab shortlist ... --note TEXT</code> or on the app's Shortlist "
                   "page). The ranking below is the current one.</p>")
        return "\n".join(out)
    m, unit = _metric_info(str(rec.get("metric")))
    label = m.label if m else str(rec.get("metric"))
    number = rec.get("decision")
    head = f"Decision {int(number)}" if not _isna(number) else "Draft decision (not recorded in the store)"
    t = rec.get("temperature_c")
    at = f" at {float(t):g} °C" if not _isna(t) else ""
    out.append(f"<h3>{_e(head)}: {_e(rec.get('catalysts'))}</h3>")
    bits = [f"by <b>{_e(rec.get('author'))}</b>"]
    if not _isna(number):
        bits.append(f"on {_e(_when(rec.get('created_at')))}")
    bits.append(f"ranked by {_e(label)}{_e(at)}, top K = {_e(rec.get('top_k'))}")
    if not _isna(rec.get("supersedes")):
        bits.append(f"supersedes decision {_e(int(rec['supersedes']))}")
    if rec.get("status"):
        bits.append(f"status: {_e(rec['status'])}")
    out.append("<p>" + " · ".join(bits) + "</p>")
    if rec.get("note"):
        out.append(f"<div class='note'>{_e(rec['note'])}</div>")
    dv = rec.get("campaign_version")
    if current_version and dv and dv != current_version:
        out.append("<div class='warn'>The campaign's data changed after this decision (its version then: "
                   f"<span class='hash'>{_e(str(dv)[:16])}</span>, now: <span class='hash'>"
                   f"{_e(current_version[:16])}</span>). The table below keeps the numbers the decision was made "
                   "on; the ranking further down is of the current data.</div>")
    if rows is not None and len(rows):
        hdr = ["#", "catalyst", "name", f"{_e(label)}{(' / ' + _e(unit)) if unit else ''} (interval)",
               "rank (interval)", f"P(top {_e(rec.get('top_k'))})", "P(beats benchmark)", "basis", _FLAGS_HEAD]
        body, cls = [], []
        cens = censored_of(rows).tolist()
        for (_, r), c in zip(rows.iterrows(), cens):  # the chosen few and the benchmark
            pos = r.get("position")
            bench = _isna(pos)
            body.append([("benchmark" if bench else _int(pos)), _e(r.get("catalyst")), _e(r.get("name")),
                         _e(estimate_text(r.get("estimate"), r.get("ci_low"), r.get("ci_high"), c)),
                         _e(f"{_int(r.get('rank'))} ({_int(r.get('rank_low'))}–{_int(r.get('rank_high'))})"),
                         _p(r.get("p_top")), _p(r.get("p_beats_reference")), _e(r.get("basis")),
                         _flag_cell(r.get("flags"), help_)])
            cls.append("bench" if bench else "chosen")
        out.append(_table(hdr, body, classes=cls, numeric={3, 4, 5, 6}))
    cons = rec.get("constraints") or {}
    if cons:
        parts = []
        for k, v in cons.items():
            if v is None or v == "":                              # an option that was not given
                continue
            if isinstance(v, bool):
                v = "yes" if v else "no"
            elif isinstance(v, float):
                v = number_text(v, 2)                             # e.g. a Monte Carlo SE, not 16 digits
            elif isinstance(v, (list, tuple)):
                v = ", ".join(f"{x:g}" if isinstance(x, float) else str(x) for x in v) or "none"
            parts.append(f"{_e(_CONSTRAINT_LABELS.get(k, k.replace('_', ' ')))}: {_e(v)}")
        out.append("<p class='muted'>Constraints: " + "; ".join(parts) + "</p>")
    return "\n".join(out)


def _ranking(ranking: pd.DataFrame, metric: str, temperature_c, top_k: int, chosen: list[str],
             help_: dict) -> str:
    from screenlab.viz.svg import forest_svg

    m, unit = _metric_info(metric)
    label = (m.label if m else metric) + (f" / {unit}" if unit else "")
    at = f" at {float(temperature_c):g} °C" if not _isna(temperature_c) else ""
    r = ranking.assign(catalyst=ranking["catalyst"].astype(str))
    ranked = r[r["rank"].notna()].sort_values("rank", kind="stable")
    unranked = r[r["rank"].isna()]
    role = ranked["role"].astype(str)
    keep = ((np.arange(len(ranked)) < MAX_RANKED_ROWS) | ranked["catalyst"].isin(chosen).to_numpy()
            | (role == "reference").to_numpy())
    shown = ranked[keep]
    out = [f"<h2>Ranking: {_e(m.label if m else metric)}{_e(at)}</h2>"]
    if ranked.empty:
        out.append("<p>No candidate can be ranked on this metric.</p>")
    else:
        cens = censored_of(shown).to_numpy(dtype=object)
        est = pd.to_numeric(shown["estimate"], errors="coerce").to_numpy(float)
        lo = np.where(cens == "", pd.to_numeric(shown["ci_low"], errors="coerce").to_numpy(float), np.nan)
        hi = np.where(cens == "", pd.to_numeric(shown["ci_high"], errors="coerce").to_numpy(float), np.nan)
        svg = forest_svg(shown["catalyst"].tolist(), est, lo, hi, x_label=label, log_x=bool(m and m.lognormal),
                         highlight=chosen, benchmark=shown.loc[role[keep] == "reference", "catalyst"].tolist())
        out.append(f"<figure>{svg}<figcaption>Estimate (diamond) and {_e('interval')} per candidate, best at the "
                   f"top; chosen candidates filled and in bold, the benchmark as an orange star. Rank interval "
                   f"and P(top {int(top_k)}) come from draws of every estimate's sampling distribution.</figcaption>"
                   f"</figure>")
        hdr = ["rank", "catalyst", "family", f"estimate{(' / ' + _e(unit)) if unit else ''} (interval)",
               "rank interval", f"P(top {int(top_k)})", "P(best)", "basis", _FLAGS_HEAD]
        body, cls = [], []
        for (_, x), c in zip(shown.iterrows(), censored_of(shown).tolist()):  # display rows
            body.append([_int(x["rank"]), _e(x["catalyst"]), _e(x.get("family")),
                         _e(estimate_text(x["estimate"], x["ci_low"], x["ci_high"], c)),
                         _e(f"{_int(x['rank_low'])}–{_int(x['rank_high'])}"), _p(x["p_top"]), _p(x["p_best"]),
                         _e(x.get("basis")), _flag_cell(x.get("flags"), help_)])
            cls.append("chosen" if x["catalyst"] in chosen else ("bench" if str(x["role"]) == "reference" else ""))
        out.append(_table(hdr, body, classes=cls, numeric={0, 3, 4, 5, 6}))
        if len(ranked) > len(shown):
            out.append(f"<p class='muted'>{len(ranked) - len(shown)} more ranked candidates are not listed.</p>")
    if len(unranked):
        rows = [[_e(x["catalyst"]), _e(x.get("reason"))] for _, x in unranked.head(MAX_UNRANKED_ROWS).iterrows()]
        out.append(f"<h3>Not ranked ({len(unranked)})</h3>")
        out.append(_table(["catalyst", "reason"], rows))
        if len(unranked) > MAX_UNRANKED_ROWS:
            out.append(f"<p class='muted'>and {len(unranked) - MAX_UNRANKED_ROWS} more.</p>")
    return "\n".join(out)


def _arrhenius(analysis, chosen: list[str], benchmark: list[str], help_: dict) -> str:
    from screenlab.kinetics.arrhenius import predict_tof
    from screenlab.viz.svg import arrhenius_svg

    kin = analysis.kinetics
    conf = analysis.settings.confidence
    names = list(dict.fromkeys([*chosen, *benchmark]))
    out = ["<h2>Arrhenius plot of the shortlisted candidates</h2>"]
    if not names:
        out.append("<p>No candidate shortlisted.</p>")
        return "\n".join(out)
    rates = kin.rates.assign(catalyst=kin.rates["catalyst"].astype(str))
    if "is_standard" in rates:
        rates = rates[rates["is_standard"].fillna(False).astype(bool)]
    arr = kin.arrhenius.assign(catalyst=kin.arrhenius["catalyst"].astype(str)) if len(kin.arrhenius) else kin.arrhenius
    temps = pd.to_numeric(kin.rates["temperature_c"], errors="coerce").dropna()
    series = []
    if len(temps):
        t0, t1 = float(temps.min()), float(temps.max())
        pad = max(2.0, 0.05 * (t1 - t0))
        grid = np.linspace(t0 - pad, t1 + pad, 30)
        for name in names:  # the chosen few and the benchmark
            pts = rates[rates["catalyst"] == name].sort_values("temperature_c")
            fit = arr[arr["catalyst"] == name] if len(arr) else arr
            line = {}
            if len(fit) and np.isfinite(pd.to_numeric(fit["fit_slope_k"], errors="coerce")).any():
                p = predict_tof(fit, grid, conf)
                line = {c: p[c].to_numpy(float) for c in ("temperature_c", "tof_per_h", "tof_ci_low", "tof_ci_high")}
            cens = censored_of(pts).to_numpy(dtype=object)
            points = {"temperature_c": pd.to_numeric(pts["temperature_c"], errors="coerce").to_numpy(float),
                      "tof_per_h": pd.to_numeric(pts["tof_per_h"], errors="coerce").to_numpy(float),
                      "tof_ci_low": np.where(cens == "", pd.to_numeric(pts["tof_ci_low"], errors="coerce"), np.nan),
                      "tof_ci_high": np.where(cens == "", pd.to_numeric(pts["tof_ci_high"], errors="coerce"), np.nan)}
            series.append({"name": name, "benchmark": name in benchmark, "points": points, "line": line})
    out.append(f"<figure>{arrhenius_svg(series, confidence=conf)}<figcaption>Points: mean initial TOF per "
               f"temperature at each catalyst's standard condition with its {conf * 100:g} % interval; lines: "
               f"weighted Arrhenius fit with its {conf * 100:g} % band (1000/T with T in K).</figcaption></figure>")
    fits = arr[arr["catalyst"].isin(names)] if len(arr) else arr
    if len(fits):
        hdr = ["catalyst", "temperatures", "Ea / kJ mol⁻¹ (interval)",
               f"TOF at {analysis.settings.reference_temperature_c:g} °C / h⁻¹ (interval)", "ΔH‡ / kJ mol⁻¹",
               "ΔS‡ / J mol⁻¹ K⁻¹", _FLAGS_HEAD]
        rows = []
        for name in names:  # the chosen few
            f = fits[fits["catalyst"] == name]
            if f.empty:
                continue
            x = f.iloc[0]
            rows.append([_e(name), _e(f"{_int(x['n_temperatures'])} ({_num(x['t_min_c'])}–{_num(x['t_max_c'])} °C)"),
                         _e(estimate_text(x["ea_kj_mol"], x["ea_ci_low"], x["ea_ci_high"])),
                         _e(estimate_text(x["tof_ref_per_h"], x["tof_ref_ci_low"], x["tof_ref_ci_high"])),
                         _num(x["dh_kj_mol"]), _num(x["ds_j_mol_k"]), _flag_cell(x["flags"], help_)])
        out.append(_table(hdr, rows, numeric={2, 3, 4, 5}))
    return "\n".join(out)


def _quality(analysis, help_: dict) -> str:
    q = analysis.quality
    out = ["<h2>Plate quality</h2>"]
    if q is None or q.empty:
        out.append("<p>No plate.</p>")
        return "\n".join(out)
    st = q["status"].astype(str).value_counts()
    out.append(f"<p>{int(st.get('ok', 0))} ok, {int(st.get('flagged', 0))} flagged, {int(st.get('failed', 0))} failed "
               f"(Z' between benchmark and blank wells; plates below Z' = {analysis.settings.zprime_min:g} are "
               f"flagged).</p>")
    rows = [[_e(x["plate"]), _num(x.get("temperature_c"), 4), _num(x.get("zprime")),
             _num(x.get("replicate_cv_median_pct")), _num(x.get("edge_p")), _e(x.get("status")),
             _flag_cell(x.get("flags"), help_)] for _, x in q.iterrows()]  # one per plate
    out.append(_table(["plate", "T / °C", "Z'", "replicate CV (median) / %", "edge p", "status", _FLAGS_HEAD], rows,
                      numeric={1, 2, 3, 4}))
    return "\n".join(out)


def _flag_section(analysis, ranking: pd.DataFrame, chosen: list[str], help_: dict,
                  decision_rows: pd.DataFrame | None = None) -> str:
    """Every flag code the report's tables show, with its sentence: per shortlisted candidate, then
    counted at each level of the campaign (wells, groups, plates, Arrhenius fits, ranked candidates,
    and the decision's rows as recorded)."""
    kin = analysis.kinetics
    out = ["<h2 id='flags'>Flags in plain words</h2>"]
    if chosen:
        items = []
        rates = kin.rates.assign(catalyst=kin.rates["catalyst"].astype(str))
        arr = kin.arrhenius.assign(catalyst=kin.arrhenius["catalyst"].astype(str)) if len(kin.arrhenius) else None
        r = ranking.assign(catalyst=ranking["catalyst"].astype(str))
        for name in chosen:  # the chosen few
            codes = []
            for part in (rates.loc[rates["catalyst"] == name, "flags"], r.loc[r["catalyst"] == name, "flags"],
                         arr.loc[arr["catalyst"] == name, "flags"] if arr is not None else []):
                for v in part:
                    codes.extend(_codes(v))
            codes = list(dict.fromkeys(codes))
            words = "".join(f"<li><code>{_e(c)}</code>: {_e(help_.get(c, 'no description'))}</li>" for c in codes)
            items.append(f"<li><b>{_e(name)}</b>: " + (f"<ul>{words}</ul>" if codes else "no flag") + "</li>")
        out.append("<h3>Shortlisted candidates</h3><ul>" + "".join(items) + "</ul>")
    counts = []
    levels = [("wells", kin.wells["flags"]), ("catalyst x temperature groups", kin.rates["flags"]),
              ("plates", analysis.quality["flags"]), ("Arrhenius fits", kin.arrhenius["flags"]),
              ("ranked candidates", ranking["flags"] if "flags" in ranking else [])]
    if decision_rows is not None and "flags" in decision_rows:
        levels.append(("the decision's rows (as recorded)", decision_rows["flags"]))
    for level, flags in levels:
        s = pd.Series(list(flags), dtype=object).dropna().astype(str)
        codes = s[s.str.len() > 0].str.split(";").explode()
        codes = codes[codes.str.len() > 0]
        for code, n in codes.value_counts().items():
            counts.append([_e(level), f"<code>{_e(code)}</code>", str(int(n)), _e(help_.get(code, "no description"))])
    out.append("<h3>Whole campaign</h3>")
    out.append(_table(["level", "flag", "rows", "meaning"], counts, numeric={2}) if counts
               else "<p>No flag raised.</p>")
    return "\n".join(out)


def _provenance(analysis, imports, files, campaign_version, rec, created: str) -> str:
    from screenlab import __version__

    out = ["<h2>Provenance</h2>"]
    items = [("ScreenLab version", __version__), ("report written", created),
             ("campaign version (sha256 of its current data)", campaign_version or "–")]
    if rec is not None and rec.get("campaign_version"):
        items.append(("campaign version when decided", rec["campaign_version"]))
    if rec is not None and rec.get("draws") is not None and not _isna(rec.get("draws")):
        items.append(("ranking draws / seed", f"{rec.get('draws')} / {rec.get('seed')}"))
    out.append(_table(["item", "value"], [[_e(k), f"<span class='hash'>{_e(v)}</span>"] for k, v in items]))
    out.append("<h3>Analysis settings</h3>")
    out.append(_table(["setting", "value"], [[_e(k), _e(v)] for k, v in analysis.settings.to_dict().items()]))
    if imports is not None and len(imports):
        rows = [[_e(x["import_id"]), _e(_when(x.get("imported_at"))), _e(x.get("status")), _e(x.get("source")),
                 _e(f"{int(x.get('n_wells', 0)):,}"), _e(f"{int(x.get('n_readings', 0)):,}")]
                for _, x in imports.iterrows()]  # a few imports
        out.append("<h3>Imports</h3>")
        out.append(_table(["import", "when", "status", "source", "wells", "readings"], rows, numeric={0, 4, 5}))
    if files is not None and len(files):
        rows = [[_e(x["import_id"]), _e(x["name"]), f"<span class='hash'>{_e(x.get('sha256'))}</span>",
                 _e("" if _isna(x.get("n_rows")) else int(x["n_rows"]))] for _, x in files.iterrows()]
        out.append("<h3>Files imported (sha256)</h3>")
        out.append(_table(["import", "file", "sha256", "rows"], rows, numeric={0, 3}))
    return "\n".join(out)


def campaign_report(analysis, ranking: pd.DataFrame, *, campaign: str, metric: str, temperature_c=None,
                    top_k: int = 3, decision: dict | None = None, decision_rows: pd.DataFrame | None = None,
                    imports: pd.DataFrame | None = None, files: pd.DataFrame | None = None,
                    campaign_version: str | None = None, parent: dict | None = None,
                    children: list[str] | None = None, created_at: datetime | None = None) -> str:
    """The report of one campaign as a self-contained HTML document (see the module docstring).

    ``analysis`` (:class:`~screenlab.pipeline.Analysis`) and ``ranking``
    (:func:`~screenlab.stats.ranking.rank_candidates` by ``metric`` at ``temperature_c``) are of the
    current data; ``decision`` is a stored decision (a :func:`screenlab.store.decisions.decisions`
    row as a dict) or a draft (:func:`decision_from_draft`) with its ``decision_rows``; ``imports`` /
    ``files`` the store's import history and file hashes; ``parent`` ``{"campaign", "decision",
    "record"}`` the round this one follows (``record`` the parent's decision, when stored);
    ``children`` the rounds laid out from this one.
    """
    from screenlab.flags import flag_help

    help_ = flag_help()
    created = (created_at or datetime.now(timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    chosen: list[str] = []
    if decision_rows is not None and len(decision_rows):
        pos = pd.to_numeric(decision_rows["position"], errors="coerce")
        chosen = decision_rows.loc[pos.notna()].sort_values("position")["catalyst"].astype(str).tolist()
    else:
        r = ranking[ranking["rank"].notna() & (ranking["role"].astype(str) != "reference")]
        chosen = r.sort_values("rank")["catalyst"].astype(str).head(int(top_k)).tolist()
    bench = sorted(set(analysis.data.wells.loc[analysis.data.wells["role"].astype(str) == "reference", "catalyst"]
                       .dropna().astype(str)))
    title = f"ScreenLab report: {campaign}"
    state = ("decision " + str(int(decision["decision"]))) if decision and not _isna(decision.get("decision")) else (
        "draft decision" if decision else "no decision recorded")
    parts = [
        "<!DOCTYPE html>", "<html lang='en'>", "<head>", "<meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        f"<title>{_e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
        f"<h1>{_e(title)}</h1>",
        f"<p class='sub'>{_e(state)} · written {_e(created)} · every number with its interval; flags "
        f"<a href='#flags'>explained below</a></p>",
        _summary(analysis, campaign, parent, list(children or [])),
        _decision(decision, decision_rows, help_, campaign_version),
        _ranking(ranking, metric, temperature_c, top_k, chosen, help_),
        _arrhenius(analysis, chosen, bench, help_),
        _quality(analysis, help_),
        _flag_section(analysis, ranking, chosen, help_, decision_rows),
        _provenance(analysis, imports, files, campaign_version, decision, created),
        "<h2>Safety</h2>", f"<div class='safety'>{_e(SAFETY_NOTE.strip())}</div>",
        "</body>", "</html>",
    ]
    return "\n".join(parts) + "\n"


__all__ = ["campaign_report", "decision_from_draft"]
