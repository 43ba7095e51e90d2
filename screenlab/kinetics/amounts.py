"""From readings to amounts: product concentration (mM) and conversion (%) per reading.

This is the only module that knows readout kinds (see DEVELOPERS.md "How to add a readout kind").

conversion / yield
    ``product_mM = value (as a fraction) x substrate_conc_mM x product_per_substrate``: the
    fraction of substrate converted (or of the theoretical product formed) times the initial
    substrate times the stoichiometry. ``scale`` says whether value is percent or fraction.
product_conc
    ``product_mM = value x conc_factor_to_mM(manifest concentration unit)``.
absorbance
    Beer-Lambert, ``A = epsilon l c``: ``c = (A - A_baseline) / (epsilon_M_cm x path_length_cm)``
    in mol/L, times 1000 for mM. The baseline is the well's own reading at t = 0, else its first
    reading (column ``baseline``: ``t0`` or ``first_reading``); with ``first_reading`` the product
    formed before that reading is not seen.

``conversion_pct = product_mM / (substrate_conc_mM x product_per_substrate) x 100`` (the
fraction of the theoretical product); NaN where the well has no substrate concentration.

Several analytes: every analyte keeps its own rows. With ``[analytes].enantiomers`` the main
analyte (``manifest.analyte_main``) has no readings of its own; its rows are added here as the
sum of the two enantiomers at each time where both were read.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.model import CampaignData
from screenlab.units import conc_factor_to_mM

#: columns of :func:`product_amounts`, in order
AMOUNT_COLUMNS = ("plate", "well", "analyte", "time_h", "product_mM", "conversion_pct", "baseline", "range_code")
#: ``range_code`` values: the reading is within its instrument's range, above full scale (a percent
#: or fractional readout past 100 %: kept, the well flagged ``above_full_scale``) or above the
#: detector's linear range (absorbance past ``[readout].linear_range_max``: flagged
#: ``above_linear_range`` and left out of the rate fit)
IN_RANGE, ABOVE_FULL_SCALE, ABOVE_LINEAR_RANGE = 0, 1, 2

#: time (h) at or below which a reading counts as taken at t = 0 (about 4 ms)
T0_TOLERANCE_H = 1.0e-6


def _fraction_scale(manifest) -> float:
    scale = (manifest.readout_scale or "percent").strip().lower()
    if scale in ("percent", "pct", "%"):
        return 0.01
    if scale == "fraction":
        return 1.0
    raise UsageError(f"campaign.toml: [readout].scale must be 'percent' or 'fraction', not {manifest.readout_scale!r}")


def _change_points(values: pd.Series) -> np.ndarray:
    """Boolean array of length n - 1: row i + 1 differs from row i (missing values count as different)."""
    arr = values.array
    pa_arr = getattr(arr, "_pa_array", None)
    if pa_arr is not None and len(values) > 1:
        import pyarrow as pa
        import pyarrow.compute as pc
        if isinstance(pa_arr, pa.ChunkedArray) and pa_arr.num_chunks == 1:
            pa_arr = pa_arr.chunk(0)
        ne = pc.fill_null(pc.not_equal(pa_arr.slice(1), pa_arr.slice(0, len(pa_arr) - 1)), True)
        return ne.to_numpy(zero_copy_only=False).astype(bool, copy=False)
    obj = values.to_numpy(dtype=object)
    ne = obj[1:] != obj[:-1]
    miss = pd.isna(obj)
    return np.asarray(ne | miss[1:] | miss[:-1], dtype=bool)


def well_index(plate: pd.Series, well: pd.Series, key_plate: pd.Series, key_well: pd.Series) -> np.ndarray:
    """For every row of (plate, well): the position of the same (plate, well) among the keys, -1 if absent.

    Keys must be unique (the first match is used otherwise). Consecutive rows with the same
    (plate, well) are looked up once, so sorted readings (the CampaignData contract) cost one string
    comparison per row and one key lookup per well; any other order gives the same answer, just slower.
    """
    return np.repeat(*well_runs(plate, well, key_plate, key_well))


def well_runs(plate: pd.Series, well: pd.Series, key_plate: pd.Series,
              key_well: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """:func:`well_index` as runs of consecutive equal (plate, well): the key position of each run
    and its length (``np.repeat`` of the two is the per-row answer)."""
    n = len(plate)
    if n == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    start = np.ones(n, dtype=bool)
    if n > 1:
        start[1:] = _change_points(plate) | _change_points(well)
    first = np.flatnonzero(start)
    k = len(key_plate)
    arrow = [_arrow_strings(v) for v in (key_plate, plate, key_well, well)]
    if all(a is not None for a in arrow):
        # Arrow strings throughout: one dictionary encoding of keys + run starts per column
        import pyarrow as pa
        at = pa.array(first)
        cp = _dictionary_codes(arrow[0], arrow[1].take(at))
        cw = _dictionary_codes(arrow[2], arrow[3].take(at))
        n_w = int(cw.max()) + 1 if cw.size else 0
        return _match_runs(cp * (n_w + 1) + cw, k, start)

    def text(v, take=None):
        v = pd.Series(v, copy=False).reset_index(drop=True)
        if take is not None:
            v = v.iloc[take].reset_index(drop=True)
        return v if pd.api.types.is_string_dtype(v.dtype) and v.dtype != object else v.astype(str)

    # one integer per (plate, well): factorise keys and run starts together (Arrow-fast), then match ints
    cp, _ = pd.factorize(pd.concat([text(key_plate), text(plate, first)], ignore_index=True), use_na_sentinel=False)
    cw, uw = pd.factorize(pd.concat([text(key_well), text(well, first)], ignore_index=True), use_na_sentinel=False)
    combined = cp.astype(np.int64) * (len(uw) + 1) + cw
    return _match_runs(combined, k, start)


def _arrow_strings(values):
    """The pyarrow string array behind a pandas string column (or None)."""
    pa_arr = getattr(getattr(values, "array", None), "_pa_array", None)
    if pa_arr is None:
        return None
    import pyarrow as pa
    if not (pa.types.is_string(pa_arr.type) or pa.types.is_large_string(pa_arr.type)):
        return None
    return pa_arr


def _dictionary_codes(keys, runs) -> np.ndarray:
    """Integer codes of ``keys`` followed by ``runs`` (pyarrow string arrays) from one dictionary
    encoding; equal strings share a code, and so do missing values (as factorize with
    ``use_na_sentinel=False``)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    chunks = []
    for a in (keys, runs):
        a = a.cast(pa.large_string()) if not pa.types.is_large_string(a.type) else a
        chunks.extend(a.chunks if isinstance(a, pa.ChunkedArray) else [a])
    joined = pa.chunked_array(chunks, type=pa.large_string()).combine_chunks()
    enc = pc.dictionary_encode(joined, null_encoding="encode")
    return enc.indices.to_numpy(zero_copy_only=False).astype(np.int64, copy=False)


def _match_runs(combined: np.ndarray, k: int, start: np.ndarray) -> np.ndarray:
    """``combined`` holds k key codes then one code per run (``start`` marks run starts): each run's
    key position (-1 if absent) and each run's length."""
    runs = combined[k:]
    lengths = np.diff(np.append(np.flatnonzero(start), len(start)))
    size = int(combined.max()) + 1 if combined.size else 0
    if k and size <= 4 * combined.size + 1024:
        # small code range: a lookup table instead of a hash index
        seen = np.bincount(combined[:k], minlength=size)
        if seen.max() <= 1:
            table = np.full(size, -1, dtype=np.int64)
            table[combined[:k]] = np.arange(k)
            return table[runs], lengths
    keys = pd.Index(combined[:k])
    if not keys.is_unique:
        keep = ~keys.duplicated()
        pos = np.flatnonzero(keep)
        found = keys[keep].get_indexer(runs)
        run_code = np.where(found >= 0, pos[np.maximum(found, 0)], -1)
    else:
        run_code = keys.get_indexer(runs)
    return np.asarray(run_code, dtype=np.int64), lengths


def _absorbance_baseline(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Per reading: the baseline absorbance of its (plate, well, analyte) and whether it was t = 0."""
    order = frame.sort_values(["plate", "well", "analyte", "time_h"], kind="stable")
    keys = ["plate", "well", "analyte"]
    grouped = order.groupby(keys, sort=False, dropna=False)
    first_value = grouped["value"].transform("first")
    first_time = grouped["time_h"].transform("first")
    base = first_value.reindex(frame.index).to_numpy(dtype=float)
    is_t0 = (first_time.reindex(frame.index).to_numpy(dtype=float) <= T0_TOLERANCE_H)
    return base, is_t0


def _missing_strings(n: int):
    """A string-dtype array of n missing values (what ``pd.Series(pd.NA, dtype="string")`` holds)."""
    template = pd.array([pd.NA], dtype="string")
    pa_arr = getattr(template, "_pa_array", None)
    if pa_arr is not None:
        import pyarrow as pa
        return type(template)(pa.chunked_array([pa.nulls(n, pa_arr.type)]), dtype=template.dtype)
    return template.take(np.zeros(n, dtype=np.intp))


def product_amounts(data: CampaignData) -> pd.DataFrame:
    """One row per reading: ``plate, well, analyte, time_h, product_mM, conversion_pct, baseline,
    range_code`` (int8, see :data:`IN_RANGE`).

    ``baseline`` is ``t0`` or ``first_reading`` for absorbance readouts (which reading was taken
    as zero product) and NA for the other kinds. Rows keep the order of ``data.readings`` (sorted
    by plate, well, analyte, time per the CampaignData contract); added enantiomer-sum rows are
    sorted in.
    """
    m = data.manifest
    kind = (m.readout_kind or "").strip().lower()
    src = data.readings
    n = len(src)
    time_h = src["time_h"].astype(float).to_numpy()
    value = pd.to_numeric(src["value"], errors="coerce").astype(float).to_numpy()
    wells = data.wells
    # integer well code per reading, once (no string merge); -1 for a well not in wells.csv. A
    # (plate, well) listed twice takes its first row (as drop_duplicates would keep it).
    run_code, run_len = well_runs(src["plate"], src["well"], wells["plate"], wells["well"])
    w_s0 = pd.to_numeric(wells["substrate_conc_mM"], errors="coerce").astype(float).to_numpy()
    s0 = np.where(run_code >= 0, w_s0[np.maximum(run_code, 0)] if len(w_s0) else np.nan, np.nan)
    # theoretical maximum product (mM), per run of a well's readings, then per reading
    theo = np.repeat(s0 * float(m.product_per_substrate), run_len)
    # the baseline column (string dtype) by one take from its few words, not one conversion per row
    baseline = _missing_strings(n)

    range_code = np.zeros(n, dtype=np.int8)
    if kind in ("conversion", "yield"):
        frac = value * _fraction_scale(m)
        product = frac * theo
        with np.errstate(invalid="ignore"):
            range_code[frac > 1.0 + 1e-12] = ABOVE_FULL_SCALE
    elif kind == "product_conc":
        product = value * conc_factor_to_mM(m.concentration_unit)
    elif kind == "absorbance":
        eps, path = m.epsilon_M_cm, m.path_length_cm
        if not (eps and path and np.isfinite(eps) and np.isfinite(path) and eps > 0 and path > 0):
            raise UsageError("campaign.toml: [readout] kind 'absorbance' needs positive "
                             "epsilon_M_cm and path_length_cm")
        rd = pd.DataFrame({c: src[c].array for c in ("plate", "well", "analyte")})
        rd["time_h"] = time_h
        rd["value"] = value
        base, is_t0 = _absorbance_baseline(rd)
        product = (value - base) / (float(eps) * float(path)) * 1000.0   # mol/L -> mM
        with np.errstate(invalid="ignore"):
            range_code[value > m.absorbance_linear_max] = ABOVE_LINEAR_RANGE
        baseline = pd.array(["first_reading", "t0"], dtype="string").take(is_t0.astype(np.intp))
    else:
        raise UsageError(f"campaign.toml: unknown [readout].kind {m.readout_kind!r}")

    with np.errstate(divide="ignore", invalid="ignore"):
        conv = np.where(theo > 0, product / theo * 100.0, np.nan)
        if kind == "product_conc":         # more product than the substrate allows: over full scale
            range_code[conv > 100.0 + 1e-9] = ABOVE_FULL_SCALE
    # string columns are passed on as they are (converting Arrow strings to numpy is slow)
    out = pd.DataFrame({"plate": src["plate"].array, "well": src["well"].array, "analyte": src["analyte"].array,
                        "time_h": time_h, "product_mM": product, "conversion_pct": conv, "baseline": baseline,
                        "range_code": range_code})

    if m.enantiomers:
        w = wells[["plate", "well", "substrate_conc_mM"]].drop_duplicates(["plate", "well"])
        out = _add_enantiomer_sum(out, m.enantiomers, m.analyte_main, w, float(m.product_per_substrate))
        out = out.sort_values(["plate", "well", "analyte", "time_h"], kind="stable").reset_index(drop=True)
    return out


def _add_enantiomer_sum(out: pd.DataFrame, pair, main: str, wells: pd.DataFrame, pps: float) -> pd.DataFrame:
    """Rows for the main analyte: sum of the two enantiomers where both were read at that time."""
    both = out[out["analyte"].isin(list(pair))]
    if both.empty:
        return out
    by = both.groupby(["plate", "well", "time_h"], sort=False, dropna=False)["product_mM"]
    summed = pd.DataFrame({"product_mM": by.sum(), "n": by.count()}).reset_index()
    # a sum is only meaningful where both enantiomers have a value at that time
    summed.loc[summed["n"] < 2, "product_mM"] = np.nan
    summed = summed.merge(wells, on=["plate", "well"], how="left")
    theo = summed["substrate_conc_mM"].to_numpy(dtype=float) * pps
    with np.errstate(divide="ignore", invalid="ignore"):
        conv = np.where(theo > 0, summed["product_mM"].to_numpy() / theo * 100.0, np.nan)
    main_rows = pd.DataFrame({
        "plate": summed["plate"].to_numpy(), "well": summed["well"].to_numpy(),
        "analyte": main, "time_h": summed["time_h"].to_numpy(),
        "product_mM": summed["product_mM"].to_numpy(dtype=float), "conversion_pct": conv,
        "baseline": pd.array([pd.NA] * len(summed), dtype="string"),
        "range_code": np.zeros(len(summed), dtype=np.int8),
    })
    rest = out[out["analyte"] != main]
    return pd.concat([rest, main_rows], ignore_index=True)
