"""Building blocks of a demo campaign: the campaign as frames, wells placed at random on a plate,
time courses, truth per well, and CSV text in a fixed layout (so the same seed writes the same
bytes)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from screenlab.demo.generator import site_umol
from screenlab.plates import all_wells


@dataclass(frozen=True)
class Campaign:
    """One demo campaign as frames (file units), with the truth it was generated from."""

    name: str
    toml: str
    catalysts: pd.DataFrame
    plates: pd.DataFrame
    layout: pd.DataFrame
    readings: pd.DataFrame
    truth: pd.DataFrame


def place(rng, fmt: int, groups: list[dict], fill_empty: bool = True) -> pd.DataFrame:
    """Expand the well groups (see :func:`well_group`) and put them on random positions of one plate."""
    spec = pd.DataFrame(groups)
    rows = spec.loc[np.repeat(spec.index.to_numpy(), spec["_n"].to_numpy())].drop(columns="_n")
    rows = rows.reset_index(drop=True)
    pos = all_wells(fmt)
    if len(rows) > len(pos):
        raise ValueError(f"{len(rows)} wells do not fit a {fmt}-well plate")
    pick = rng.permutation(len(pos))
    placed = rows.assign(well=pos["well"].to_numpy()[pick[: len(rows)]],
                         _row=pos["row"].to_numpy()[pick[: len(rows)]],
                         _col=pos["col"].to_numpy()[pick[: len(rows)]])
    if fill_empty:
        rest = pos.iloc[pick[len(rows):]]
        empty = pd.DataFrame({"well": rest["well"].to_numpy(), "_row": rest["row"].to_numpy(),
                              "_col": rest["col"].to_numpy(), "role": "empty"})
        placed = pd.concat([placed, empty], ignore_index=True)
    return placed.sort_values(["_row", "_col"], kind="stable").reset_index(drop=True)


def plates_by_temperature(rng, temps, fmt: int, groups_of, plate_of) -> tuple[list[dict], pd.DataFrame]:
    """One plate per temperature, its well groups (``groups_of(temp)``) placed at random
    (:func:`place`, in temperature order); returns the plates.csv rows (``plate_of(i, temp)``) and
    the layouts joined, with the plate id and its temperature (``_temp``) on every well."""
    plates, layouts = [], []
    for i, temp in enumerate(temps):  # a few plates
        row = plate_of(i, temp)
        layouts.append(place(rng, fmt, groups_of(temp)).assign(plate=row["plate"], _temp=temp))
        plates.append(row)
    return plates, pd.concat(layouts, ignore_index=True)


def screen_groups(catalysts, reference: str, *, n_sample: int, n_reference: int, n_blank: int, loading: float,
                  loading_unit: str, std: dict) -> list[dict]:
    """The well groups of a screening plate: every catalyst but the benchmark ``reference`` x
    ``n_sample`` wells, the benchmark x ``n_reference``, blanks x ``n_blank``; all at ``std``."""
    groups = [well_group("sample", n_sample, catalyst=c, loading=loading, loading_unit=loading_unit, **std)
              for c in catalysts if c != reference]
    return groups + [well_group("reference", n_reference, catalyst=reference, loading=loading,
                                loading_unit=loading_unit, **std), well_group("blank", n_blank, **std)]


def well_group(role: str, n: int, **cols) -> dict:
    """A group of ``n`` identical wells (expanded by :func:`place`)."""
    return {"role": role, "_n": n, **cols}


def time_courses(layout: pd.DataFrame, times) -> pd.DataFrame:
    """Cross join of the non-empty wells with the reading times (well-major order)."""
    filled = layout[layout["role"] != "empty"].reset_index(drop=True)
    times = np.asarray(times, dtype=float)
    idx = np.repeat(np.arange(len(filled)), len(times))
    out = filled.iloc[idx].reset_index(drop=True)
    out["t"] = np.tile(times, len(filled))
    return out


def fixed(values, decimals: int) -> pd.Series:
    """Floats as plain fixed-point text without trailing zeros ('' for NaN); vectorised."""
    arr = np.asarray(values, dtype=float)
    ok = np.isfinite(arr)
    text = pd.Series(np.char.mod(f"%.{decimals}f", np.where(ok, arr, 0.0)), dtype=object)
    text = text.str.rstrip("0").str.rstrip(".").replace({"-0": "0", "": "0"})
    return text.where(ok, "")


def csv_bytes(frame: pd.DataFrame, decimals: dict[str, int] | None = None) -> bytes:
    """CSV bytes with a fixed layout: LF line ends, floats in plain fixed-point text."""
    out = frame.copy()
    for col in out.columns:
        if pd.api.types.is_float_dtype(out[col]):
            out[col] = fixed(out[col], (decimals or {}).get(col, 6))
    return out.to_csv(index=False, lineterminator="\n").encode("utf-8")



def layout_file(layout: pd.DataFrame, factor: str) -> pd.DataFrame:
    """The layout.csv columns of a demo layout, with its one named factor last."""
    return layout[["plate", "well", "role", "catalyst", "loading", "loading_unit", "substrate_conc", "volume", factor]]


def catalyst_columns(cat: pd.DataFrame) -> pd.DataFrame:
    cols = ["catalyst", "name", "family", "molar_mass_g_mol", "sites_per_unit", "metal_wt_pct",
            "metal_molar_mass_g_mol", "dispersion"]
    out = cat.reindex(columns=cols).copy()
    out["molar_mass_g_mol"] = out["molar_mass_g_mol"].round(3)
    return out


def per_well_truth(layout: pd.DataFrame, truth: pd.DataFrame, cols: list[str]) -> pd.DataFrame:
    """Map catalyst truth columns onto wells (blanks get NaN / 0)."""
    t = truth.set_index("catalyst")[cols]
    return t.reindex(layout["catalyst"].to_numpy()).reset_index(drop=True)


def well_site_conc_mM(layout: pd.DataFrame, cats: pd.DataFrame) -> np.ndarray:
    c = cats.set_index("catalyst").reindex(layout["catalyst"].to_numpy()).reset_index(drop=True)
    subst_umol = layout["substrate_conc"].to_numpy(float) * layout["_vol_uL"].to_numpy(float) * 1e-3
    sites = site_umol(c, layout["loading"].to_numpy(float), layout["loading_unit"].to_numpy(object), subst_umol)
    return np.nan_to_num(sites / (layout["_vol_uL"].to_numpy(float) * 1e-3), nan=0.0)

