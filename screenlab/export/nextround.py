"""The next-round plates: a campaign folder in the import format, ready for the robot and the reader.

Design (what a screening chemist would lay out for the confirmation round):

* every shortlisted candidate in replicate (``replicates`` wells) at its standard condition
  (its most-used loading, substrate concentration, volume and factor levels in the source
  campaign) on one plate per temperature of the series: an Arrhenius series on fresh plates;
* a loading series (``loading_factors`` x the standard loading, same replicates) at one
  temperature, by default the highest, where transport limits show first: a TOF that does not
  change with loading means no transport artefact (Madon-Boudart test, from memory);
* the benchmark (``n_reference`` wells) and blanks (``n_blanks`` wells) on every plate, so that
  each plate carries its own Z' and its own blank rate;
* positions drawn at random with a seed (``numpy.random.default_rng``) over the *interior* of
  the plate only. The outer ring is left as ``empty`` wells (listed explicitly), because ring
  wells evaporate and heat differently; nothing that is compared - candidate, benchmark or blank
  - sits there. A temperature whose wells do not fit in one plate's interior gets more plates.

The folder holds ``campaign.toml``, ``catalysts.csv``, ``plates.csv`` and ``layout.csv`` and no
readings (the plates are not run yet). Values are written in mM and uL, and the manifest says so.
"""
from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.export.safe import neutralise_frame
from screenlab.plates import FORMATS, all_wells, is_edge


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        if not math.isfinite(v):
            raise UsageError(f"cannot write {v!r} to campaign.toml")
        return repr(float(v))
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(str(v), ensure_ascii=False)  # a JSON string is a valid TOML basic string


def _toml(doc: dict) -> str:
    lines = []
    for table, body in doc.items():
        lines.append(f"[{table}]")
        for k, v in body.items():
            if v is None or isinstance(v, dict):
                continue
            lines.append(f"{k} = {_toml_value(v)}")
        lines.append("")
    return "\n".join(lines)


def _manifest(data, name: str, description: str, decision: int | None = None) -> str:
    m = data.manifest
    src = {}
    if m.source_toml:
        try:
            src = tomllib.loads(m.source_toml)
        except tomllib.TOMLDecodeError:
            src = {}
    readout = {"kind": m.readout_kind, "scale": m.readout_scale, "product_per_substrate": m.product_per_substrate,
               "epsilon_M_cm": m.epsilon_M_cm, "path_length_cm": m.path_length_cm,
               "linear_range_max": m.linear_range_max}
    # the round link (keys of our own): this round follows data's campaign, from decision N when recorded
    doc = {"campaign": {"name": name, "description": description, "reaction": m.reaction or None,
                        "parent": data.name, "decision": None if decision is None else int(decision)},
           "units": {"time": m.time_unit, "concentration": "mM", "volume": "uL"},
           "readout": readout}
    analysis = dict(m.analysis or src.get("analysis", {}))
    if analysis:
        doc["analysis"] = analysis
    if "analytes" in src:
        doc["analytes"] = src["analytes"]
    return _toml(doc)


def _standard_conditions(data, catalysts: list[str], factors: list[str]) -> pd.DataFrame:
    """Each catalyst's most-used (loading, unit, substrate conc, volume, factor levels)."""
    w = data.wells
    w = w[w["catalyst"].astype(str).isin(catalysts) & w["role"].isin(["sample", "reference"])]
    keys = ["loading", "loading_unit", "substrate_conc_mM", "volume_uL", *factors]
    counts = w.groupby(["catalyst", *keys], dropna=False).size().rename("n").reset_index()
    counts = counts.sort_values(["catalyst", "n"], ascending=[True, False], kind="stable")
    return counts.drop_duplicates("catalyst").drop(columns="n").assign(catalyst=lambda d: d["catalyst"].astype(str))


def design_next_round(out_dir, data, candidates, *, reference: str | None = None, temperatures_c=None,
                      replicates: int = 3, n_reference: int = 4, n_blanks: int = 4,
                      loading_factors=(0.5, 2.0), loading_temperature_c: float | None = None,
                      fmt: int = 96, seed: int = 0, name: str | None = None, decision: int | None = None) -> Path:
    """Write the next-round campaign folder for ``candidates`` (catalyst ids) into ``out_dir``.

    ``data`` is the source :class:`~screenlab.model.CampaignData` (standard conditions, catalyst
    rows, manifest). ``reference`` defaults to the source campaign's most-used benchmark;
    ``temperatures_c`` to its plate temperatures. ``loading_factors=()`` drops the loading
    series. ``[campaign] parent`` of the new manifest names ``data``'s campaign, and ``decision``
    (the recorded decision the candidates come from, when given) goes in ``[campaign] decision``.
    Returns the folder path. See the module docstring for the design.
    """
    cands = [str(c) for c in dict.fromkeys(candidates)]
    if not cands:
        raise UsageError("no candidates to lay out")
    if replicates < 1 or n_reference < 0 or n_blanks < 0:
        raise UsageError("replicates must be at least 1, controls at least 0")
    if fmt not in FORMATS:
        raise UsageError(f"plate format {fmt} is not one of {', '.join(map(str, FORMATS))}")
    known = set(data.catalysts["catalyst"].astype(str))
    unknown = [c for c in cands if c not in known]
    if unknown:
        raise UsageError(f"not catalysts of campaign {data.name!r}: {', '.join(unknown)}")
    w = data.wells
    if reference is None:
        refs = w.loc[w["role"] == "reference", "catalyst"].astype(str)
        reference = refs.value_counts().index[0] if len(refs) else None
    cands = [c for c in cands if c != reference]
    temps = sorted({float(t) for t in (temperatures_c if temperatures_c is not None else data.plates["temperature_c"])})
    if not temps:
        raise UsageError("no temperatures for the next round")
    t_load = float(loading_temperature_c) if loading_temperature_c is not None else max(temps)
    if t_load not in temps:
        temps = sorted([*temps, t_load])
    factors = list(data.factor_names)
    std = _standard_conditions(data, cands + ([reference] if reference else []), factors)
    missing = sorted(set(cands) - set(std["catalyst"]))
    if missing:
        raise UsageError(f"no wells of {', '.join(missing)} in campaign {data.name!r}: no standard condition to reuse")
    blanks = w[w["role"] == "blank"]
    bkeys = ["substrate_conc_mM", "volume_uL", *factors]
    if len(blanks):
        blank_row = blanks.groupby(bkeys, dropna=False).size().sort_values(ascending=False, kind="stable").index[0]
        blank_row = dict(zip(bkeys, blank_row if isinstance(blank_row, tuple) else (blank_row,)))
    else:  # no blank in the source: use the first candidate's medium
        blank_row = std.iloc[0][bkeys].to_dict()

    cand_std = std[std["catalyst"].isin(cands)].set_index("catalyst").loc[cands].reset_index()
    base = cand_std.loc[cand_std.index.repeat(replicates)].reset_index(drop=True).assign(role="sample")
    series = [base.assign(loading=base["loading"] * f) for f in loading_factors if f != 1]
    ref_rows = std[std["catalyst"] == reference]
    ref_rows = ref_rows.loc[ref_rows.index.repeat(n_reference)].assign(role="reference") if reference else std.iloc[:0]
    blank_rows = pd.DataFrame([blank_row] * n_blanks).assign(role="blank", catalyst=pd.NA, loading=np.nan,
                                                             loading_unit=pd.NA)
    grid = all_wells(fmt)
    interior = grid[~is_edge(grid["row"], grid["col"], fmt)].reset_index(drop=True)
    capacity = len(interior) - n_reference - n_blanks
    if capacity < 1:
        raise UsageError(f"a {fmt}-well plate has {len(interior)} interior wells: too few for "
                         f"{n_reference} benchmark and {n_blanks} blank wells plus candidates")
    rng = np.random.default_rng(seed)
    plates, layouts = [], []
    for t in temps:  # a loop over a few temperatures
        samples = pd.concat([base, *series] if t == t_load else [base], ignore_index=True)
        samples = samples.iloc[rng.permutation(len(samples))].reset_index(drop=True)
        n_pl = max(1, math.ceil(len(samples) / capacity))
        for k, idx in enumerate(np.array_split(np.arange(len(samples)), n_pl)):
            plate = f"NR-{t:g}C-{k + 1}"
            content = pd.concat([samples.iloc[idx], ref_rows, blank_rows], ignore_index=True)
            pos = interior.iloc[rng.permutation(len(interior))[: len(content)]].reset_index(drop=True)
            content = content.assign(plate=plate, well=pos["well"].to_numpy(), _row=pos["row"].to_numpy(),
                                     _col=pos["col"].to_numpy())
            used = set(content["well"])
            empty = grid[~grid["well"].isin(used)].rename(columns={"row": "_row", "col": "_col"})
            empty = empty.assign(plate=plate, role="empty")
            layouts.append(pd.concat([content, empty], ignore_index=True).sort_values(["_row", "_col"]))
            plates.append({"plate": plate, "format": fmt, "temperature_c": t, "run_date": "",
                           "notes": f"next round of {data.name}: {len(idx)} candidate wells, "
                                    f"{len(ref_rows)} benchmark, {len(blank_rows)} blank; outer ring empty"
                                    + ("; loading series" if t == t_load and series else "")})
    layout = pd.concat(layouts, ignore_index=True)
    layout = layout.rename(columns={"substrate_conc_mM": "substrate_conc", "volume_uL": "volume"})
    empty = layout["role"] == "empty"
    layout.loc[empty, ["substrate_conc", "volume", "loading"]] = np.nan
    layout = layout[["plate", "well", "role", "catalyst", "loading", "loading_unit", "substrate_conc", "volume",
                     *factors]]
    layout["loading"] = layout["loading"].round(10)

    cats = data.catalysts[data.catalysts["catalyst"].astype(str).isin(cands + ([reference] if reference else []))]
    name = name or f"{data.name}-next"
    if name == data.name:
        raise UsageError(f"the next round needs a name of its own (not {data.name!r}, the campaign it follows)")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    desc = (f"Next round of {data.name}: {len(cands)} shortlisted candidates x {replicates} wells at "
            f"{', '.join(f'{t:g}' for t in temps)} degC" + (f", loading x{', x'.join(f'{f:g}' for f in loading_factors)}"
                                                          f" at {t_load:g} degC" if series else "")
            + f"; benchmark {reference} and blanks on every plate; outer ring empty; positions seed {seed}")
    (out / "campaign.toml").write_text(_manifest(data, name, desc, decision), encoding="utf-8")
    neutralise_frame(cats).to_csv(out / "catalysts.csv", index=False)
    neutralise_frame(pd.DataFrame(plates)).to_csv(out / "plates.csv", index=False)
    neutralise_frame(layout).to_csv(out / "layout.csv", index=False)
    return out


__all__ = ["design_next_round"]
