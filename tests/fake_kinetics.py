"""A minimal kinetics-like result for the ranking tests (``fake_kin``); a plain module the tests
import by name (not a test module).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.kinetics import KineticsResult
from screenlab.settings import AnalysisSettings


def fake_kin(tof, se, *, df=1e7, n=4, ea=None, ea_se=None, ea_df=1e7, roles=None, t=60.0, flags=None,
             ton=None, ton_se=None):
    """Minimal kinetics-like result: one standard-condition row per catalyst at temperature t."""
    names = [f"K{i}" for i in range(len(tof))]
    roles = roles or ["sample"] * len(tof)
    rates = pd.DataFrame({"catalyst": names, "role": roles, "temperature_c": t, "n_wells": n,
                          "tof_per_h": tof, "tof_se_per_h": se, "tof_df": df, "is_standard": True,
                          "ton": tof if ton is None else ton, "ton_se": se if ton_se is None else ton_se,
                          "enhancement": np.asarray(tof, float) * 10,
                          "enhancement_ci_low": np.asarray(tof, float) * 10 / 1.1,
                          "enhancement_ci_high": np.asarray(tof, float) * 11,
                          "flags": flags or [""] * len(tof)})
    wells = pd.DataFrame({"catalyst": np.repeat(names, 2), "role": np.repeat(roles, 2),
                          "plate": ["P1", "P2"] * len(tof)})
    arr = pd.DataFrame()
    if ea is not None:
        arr = pd.DataFrame({"catalyst": names, "role": roles, "n_temperatures": 4, "t_min_c": 40.0, "t_max_c": 70.0,
                            "ea_kj_mol": ea, "ea_se": ea_se, "fit_df": ea_df, "flags": ""})
    return KineticsResult(pd.DataFrame(), wells, pd.DataFrame(), rates, arr, pd.DataFrame(), AnalysisSettings())
