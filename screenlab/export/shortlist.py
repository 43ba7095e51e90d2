"""The shortlist export: CSV, XLSX (with kinetics, provenance and a safety sheet), Parquet, safety note.

Every text cell written to CSV or XLSX goes through :func:`screenlab.export.safe.neutralise_frame`
so that a catalyst called ``=HYPERLINK(...)`` stays text. Parquet keeps the values as they are
(it is not opened by spreadsheets).
"""
from __future__ import annotations

from screenlab.model import UNCATALYSED

from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.export.display import show_bounds
from screenlab.export.safe import neutralise_frame

SAFETY_NOTE = """\
Safety before scale-up

A screening hit is a small-scale result. Scaling it up changes heat removal, pressure and
exposure: a reaction that is harmless in a 0.5 mL well can run away in a flask or reactor.
Before any larger run, assess the reaction with your site's safety procedures and people
qualified for it, including at least:

- the heat of reaction and the risk of an exotherm or thermal runaway (calorimetry where needed);
- gas evolution and pressure build-up in closed vessels, and hydrogen or other flammable gases;
- toxic, pyrophoric, air- or water-sensitive catalysts, reagents and solvents, and their waste;
- the limits of the equipment (temperature, pressure, materials) at the new scale.

Scale-up follows local safety rules and licensed practice. Nothing in this shortlist replaces
that assessment.
"""


def _shortlist_frame(ranking: pd.DataFrame, top_k: int, catalysts: pd.DataFrame | None) -> pd.DataFrame:
    from screenlab.stats.candidates import METRICS

    if ranking.empty:
        raise UsageError("the ranking is empty: nothing to shortlist")
    metric = METRICS[str(ranking["metric"].iloc[0])]
    ranked = ranking[ranking["rank"].notna()]
    picks = ranked[ranked["role"] != "reference"].head(top_k)
    refs = ranked[ranked["role"] == "reference"]
    out = pd.concat([picks, refs], ignore_index=True)
    out.insert(0, "shortlist", np.r_[np.arange(1, len(picks) + 1), np.zeros(len(refs), int)])
    out["shortlist"] = out["shortlist"].astype("Int64").where(out["shortlist"] > 0)
    unit = str(ranking["unit"].iloc[0]) if "unit" in ranking else metric.unit
    out = show_bounds(out, "estimate", "ci_low", "ci_high", unit=unit, text="shown")
    out = out.rename(columns={"estimate": metric.column, "ci_low": metric.ci_column("low"),
                              "ci_high": metric.ci_column("high")}).drop(columns=["unit", "reason"])
    if "favours" in out and not (out["favours"].astype(str) != "").any():
        out = out.drop(columns="favours")
    if catalysts is not None and "name" in catalysts:
        names = catalysts.drop_duplicates("catalyst").set_index("catalyst")["name"]
        out.insert(out.columns.get_loc("catalyst") + 1, "name", out["catalyst"].map(names))
    return out


def _rates_for_reading(rates: pd.DataFrame) -> pd.DataFrame:
    """The rates rows with censored values as bounds: intervals emptied, ``tof_shown`` and
    ``enhancement_shown`` text columns, and the plain-words reason of each bound."""
    from screenlab.stats.candidates import NOT_SHOWN_ACTIVE, TOO_FAST

    out = show_bounds(rates, "tof_per_h", "tof_ci_low", "tof_ci_high", unit="h-1", text="tof_shown")
    out = show_bounds(out, "enhancement", "enhancement_ci_low", "enhancement_ci_high", text="enhancement_shown")
    if "censored" in out:
        c = out["censored"].astype(object).where(out["censored"].notna(), "").astype(str).str.lower()
        out["censored_reason"] = c.map({"lower": TOO_FAST, "upper": NOT_SHOWN_ACTIVE}).fillna("")
    return out


def _provenance(campaign: str, ranking: pd.DataFrame, settings, options: dict, import_files) -> pd.DataFrame:
    from screenlab import __version__

    rows = [("campaign", campaign), ("screenlab_version", __version__),
            ("created_utc", datetime.now(timezone.utc).isoformat(timespec="seconds")),
            ("metric", str(ranking["metric"].iloc[0]))]
    rows += [(k, "" if v is None else str(v)) for k, v in options.items()]
    if settings is not None:
        rows += [(f"setting.{k}", str(v)) for k, v in settings.to_dict().items()]
    if import_files is not None and len(import_files):
        f = import_files
        iid = f["import_id"].astype(str) if "import_id" in f else pd.Series([""] * len(f), index=f.index)
        rows += list(zip("import_file." + iid + "." + f["name"].astype(str), f["sha256"].astype(str)))
    return pd.DataFrame(rows, columns=["item", "value"])


def write_shortlist(out_dir, ranking: pd.DataFrame, kin, *, campaign: str, top_k: int = 5,
                    catalysts: pd.DataFrame | None = None, quality: pd.DataFrame | None = None,
                    pareto: pd.DataFrame | None = None, imports: pd.DataFrame | None = None,
                    import_files: pd.DataFrame | None = None, options: dict | None = None) -> dict[str, Path]:
    """Write the shortlist of the ``top_k`` best ranked candidates (plus the benchmark for comparison).

    ``ranking`` is :func:`screenlab.stats.ranking.rank_candidates` output; ``kin`` the kinetics
    result; ``imports`` / ``import_files`` the store's import history and file hashes
    (``Store.imports(campaign)``, ``Store.import_files(campaign)``); ``options`` extra provenance
    items (temperature, draws, seed...). Files written in ``out_dir``:

    * ``shortlist.csv`` and ``shortlist.parquet``: one row per shortlisted candidate
      (``shortlist`` 1..k, NA for the benchmark rows) with the ranking columns, the estimate and
      interval renamed with their unit (e.g. ``tof_per_h, tof_ci_low_per_h, tof_ci_high_per_h``),
      ``shown`` (the value as text: ``13.65 (11.49 to 16.22) h-1``, or a bound ``>= 1,500 h-1``
      whose interval columns are then empty) and ``censored``;
    * ``shortlist.xlsx``: sheets ``shortlist``, ``kinetics`` (every rates row of the shortlisted
      catalysts and the benchmark: each temperature and condition; censored rates as bounds in
      ``tof_shown`` / ``enhancement_shown`` with ``censored_reason``, their intervals empty),
      ``arrhenius``, ``ranking``
      (all candidates, unrankable ones with their reason), ``plate quality`` and ``pareto`` when
      given, ``provenance`` (campaign, import file hashes, analysis settings, ScreenLab version,
      date), ``imports`` when given, and ``safety``;
    * ``SAFETY.txt``: the scale-up caution.

    Returns ``{kind: path}``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    short = _shortlist_frame(ranking, top_k, catalysts)
    keep = set(short["catalyst"].astype(str))
    rates = kin.rates[kin.rates["catalyst"].astype(str).isin(keep)]
    sort_cols = [c for c in ("catalyst", "temperature_c", "loading", "substrate_conc_mM") if c in rates]
    rates = rates.sort_values(sort_cols).reset_index(drop=True)
    rates = _rates_for_reading(rates)
    arr = kin.arrhenius
    arr = arr[arr["catalyst"].astype(str).isin(keep | {UNCATALYSED})].reset_index(drop=True) if len(arr) else arr
    prov = _provenance(campaign, ranking, getattr(kin, "settings", None), {"top_k": top_k, **(options or {})},
                       import_files)

    paths = {"csv": out / "shortlist.csv", "xlsx": out / "shortlist.xlsx", "parquet": out / "shortlist.parquet",
             "safety": out / "SAFETY.txt"}
    neutralise_frame(short).to_csv(paths["csv"], index=False)
    short.to_parquet(paths["parquet"], index=False)
    paths["safety"].write_text(SAFETY_NOTE, encoding="utf-8")
    unit = str(ranking["unit"].iloc[0]) if len(ranking) and "unit" in ranking else ""
    ranking_read = show_bounds(ranking, "estimate", "ci_low", "ci_high", unit=unit, text="shown")
    sheets = [("shortlist", short), ("kinetics", rates), ("arrhenius", arr), ("ranking", ranking_read)]
    if quality is not None:
        sheets.append(("plate quality", quality))
    if pareto is not None:
        sheets.append(("pareto", pareto))
    sheets.append(("provenance", prov))
    if imports is not None:
        sheets.append(("imports", imports))
    sheets.append(("safety", pd.DataFrame({"safety": SAFETY_NOTE.splitlines()})))
    with pd.ExcelWriter(paths["xlsx"], engine="openpyxl") as xw:
        for name, frame in sheets:
            f = frame.copy()
            for c in f.columns:  # Excel has no timezone-aware datetimes or nullable-NA cells
                if isinstance(f[c].dtype, pd.DatetimeTZDtype):
                    f[c] = f[c].dt.tz_convert("UTC").dt.tz_localize(None)
            neutralise_frame(f).to_excel(xw, sheet_name=name, index=False)
    return paths


__all__ = ["SAFETY_NOTE", "write_shortlist"]
