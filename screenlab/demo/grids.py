"""Readings of a demo campaign written as plate grids, the way a plate reader exports a kinetic
read (``readings/<plate>.csv``: one block per time point, every position of the plate read)."""
from __future__ import annotations

import numpy as np

from screenlab.demo.common import Campaign, fixed
from screenlab.demo.ester_uv import UV_TIMES_S
from screenlab.plates import FORMATS, ROW_LETTERS, parse_wells

READINGS_DIR = "readings"

#: scatter of the blank-subtracted absorbance of an empty position (invented, AU)
_EMPTY_POSITION_SD = 0.0015


def grid_files(c: Campaign, seed: int, spawn_key: int) -> dict[str, bytes]:
    """One grid file per plate (docs/campaign-format.md, "Other forms of readings"): a few lines of
    the (invented) instrument header, then per time point the label row, the header row of column
    numbers and one row per plate row. The values are the text of the long readings.csv, so the
    grids import to exactly the same readings; the empty positions, which the reader measures
    too, hold small values around zero that the import leaves out (the layout marks them empty)."""
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(spawn_key,)))
    r = c.readings
    value_text = fixed(r["value"], 6).to_numpy(dtype=object)
    time_text = fixed(r["time"], 6).to_numpy(dtype=object)
    out: dict[str, bytes] = {}
    for plate in c.plates.itertuples():  # one file per plate
        fmt = int(plate.format)
        nr, nc = FORMATS[fmt]
        on = (r["plate"] == plate.plate).to_numpy()
        pos = parse_wells(r.loc[on, "well"].to_numpy())
        lay = c.layout[(c.layout["plate"] == plate.plate) & (c.layout["role"] == "empty")]
        epos = parse_wells(lay["well"].to_numpy())
        times = list(dict.fromkeys(time_text[on].tolist()))
        noise = np.round(rng.normal(0.0, _EMPTY_POSITION_SD, (len(times), len(lay))), 4)
        lines = ["Absorbance kinetic read (invented demo data)", f"Plate,{plate.plate}", "Wavelength,405 nm",
                 f"Read interval,{UV_TIMES_S[1] - UV_TIMES_S[0]} s", f"Block temperature,{plate.temperature_c:g} C",
                 "Values,absorbance after subtraction of the empty-plate reading", ""]
        for k, t in enumerate(times):  # one block per time point
            grid = np.full((nr, nc), "", dtype=object)
            at = time_text[on] == t
            grid[pos["row"].to_numpy()[at], pos["col"].to_numpy()[at]] = value_text[on][at]
            grid[epos["row"].to_numpy(), epos["col"].to_numpy()] = fixed(noise[k], 6).to_numpy(dtype=object)
            lines.append(f"time,{t}")
            lines.append("," + ",".join(str(j) for j in range(1, nc + 1)))
            lines.extend(ROW_LETTERS[i] + "," + ",".join(grid[i]) for i in range(nr))
            lines.append("")
        out[f"{READINGS_DIR}/{plate.plate}.csv"] = ("\n".join(lines) + "\n").encode("utf-8")
    return out
