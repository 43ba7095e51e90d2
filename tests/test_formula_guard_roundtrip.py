"""Text that our exports guard against spreadsheet formulas reads back unchanged on import."""
from __future__ import annotations

import io
import warnings

import pandas as pd

from screenlab.export.safe import neutralise_frame
from screenlab.ingest import read_campaign
from campaign_texts import good_files


def test_guarded_ids_round_trip_through_export_and_import():
    files = good_files()
    cats = pd.read_csv(io.StringIO(files["catalysts.csv"]), dtype=str, keep_default_na=False)
    old = cats["catalyst"].iloc[0]
    hostile = '=HYPERLINK("http://x")'
    cats.loc[0, "catalyst"] = hostile
    layout = pd.read_csv(io.StringIO(files["layout.csv"]), dtype=str, keep_default_na=False)
    layout.loc[layout["catalyst"] == old, "catalyst"] = hostile
    # what an export writes (OWASP CSV-injection guard: a leading apostrophe)
    guarded_cats = neutralise_frame(cats)
    assert guarded_cats["catalyst"].iloc[0] == "'" + hostile
    files["catalysts.csv"] = guarded_cats.to_csv(index=False)
    files["layout.csv"] = neutralise_frame(layout).to_csv(index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = read_campaign({k: v.encode() for k, v in files.items()})
    assert hostile in set(res.data.catalysts["catalyst"])
    assert hostile in set(res.data.wells["catalyst"].dropna())
