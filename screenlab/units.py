"""The one place where ScreenLab converts units.

Inside the core every quantity is a float in a canonical unit, and the unit is part of the
column name:

==============  ===============  =============================================
quantity        canonical unit   column suffix / example
==============  ===============  =============================================
time            hour             ``time_h``
concentration   mmol/L (mM)      ``substrate_conc_mM``, ``product_mM``
volume          microlitre       ``volume_uL``
amount          micromole        ``sites_umol``, ``product_umol``
rate            mM per hour      ``rate_mM_per_h``
TOF             per hour         ``tof_per_h`` (``tof_per_s`` on request)
temperature     degree Celsius   ``temperature_c`` (kelvin via :func:`c_to_k`)
energy          kJ/mol           ``ea_kj_mol``; entropy ``ds_j_mol_k``
==============  ===============  =============================================

Conversions happen once, at the import boundary (manifest units -> canonical) and at the export
boundary. Unit words are matched case-insensitively; ``µ`` and ``u`` are the same prefix.
"""
from __future__ import annotations

import numpy as np

# The defining constants of the 2019 SI are exact (BIPM, The International System of Units,
# 9th ed., 2019, Table 1); CODATA lists them as exact. Written here rather than read from
# scipy.constants at import (which parses the whole CODATA table, a few ms of every command's
# start-up); tests/test_units_plates.py checks each against scipy.constants, bit for bit.
#: Boltzmann constant, J K-1 (exact).
KB_J_K: float = 1.380649e-23
#: Planck constant, J s (exact).
H_J_S: float = 6.62607015e-34
#: Avogadro constant, mol-1 (exact).
NA_PER_MOL: float = 6.02214076e23
#: Molar gas constant, J mol-1 K-1: N_A k, exact since the 2019 SI.
R_J_MOL_K: float = NA_PER_MOL * KB_J_K
#: 0 degC in kelvin (exact by definition).
ZERO_C_IN_K: float = 273.15

TIME_TO_H = {"s": 1.0 / 3600.0, "sec": 1.0 / 3600.0, "min": 1.0 / 60.0, "h": 1.0, "hr": 1.0}
CONC_TO_MM = {"m": 1000.0, "mm": 1.0, "um": 1.0e-3, "nm": 1.0e-6}
VOLUME_TO_UL = {"l": 1.0e6, "ml": 1.0e3, "ul": 1.0}


def normalise_unit_word(word: str) -> str:
    """Lower-case a unit word, strip spaces and map micro signs (µ, μ) to ``u``."""
    return str(word).strip().lower().replace("µ", "u").replace("μ", "u").replace(" ", "")


def _factor(table: dict[str, float], word: str, kind: str) -> float:
    key = normalise_unit_word(word)
    if key not in table:
        raise KeyError(f"unknown {kind} unit {word!r}; expected one of {', '.join(sorted(set(table)))}")
    return table[key]


def time_factor_to_h(unit: str) -> float:
    """Multiply a time in ``unit`` (s, min, h) by this to get hours."""
    return _factor(TIME_TO_H, unit, "time")


def conc_factor_to_mM(unit: str) -> float:
    """Multiply a concentration in ``unit`` (M, mM, uM) by this to get mM."""
    return _factor(CONC_TO_MM, unit, "concentration")


def volume_factor_to_uL(unit: str) -> float:
    """Multiply a volume in ``unit`` (L, mL, uL) by this to get microlitres."""
    return _factor(VOLUME_TO_UL, unit, "volume")


def normalise_loading_unit(word: str) -> str | None:
    """Map a loading-unit word to ``umol``, ``mg`` or ``mol%`` (None if unknown)."""
    key = normalise_unit_word(word).replace("mol-%", "mol%").replace("mole%", "mol%")
    aliases = {"umol": "umol", "mg": "mg", "mol%": "mol%", "mol_pct": "mol%", "molpct": "mol%"}
    return aliases.get(key)


#: how a canonical unit word is written for reading (axis titles, prose); tables keep the word
UNIT_SHOWN = {"umol": "µmol", "uL": "µL", "uM": "µM"}


def shown_unit(word: str) -> str:
    """``word`` as written for reading (``umol`` -> ``µmol``); other words unchanged."""
    return UNIT_SHOWN.get(str(word), str(word))


def amount_umol(conc_mM, volume_uL):
    """Amount in umol of a solute at ``conc_mM`` in ``volume_uL`` (mM x uL = nmol)."""
    return np.asarray(conc_mM, dtype=float) * np.asarray(volume_uL, dtype=float) * 1.0e-3


def c_to_k(t_c):
    """Degrees Celsius to kelvin (adds 273.15 exactly)."""
    return np.asarray(t_c, dtype=float) + ZERO_C_IN_K


def k_to_c(t_k):
    return np.asarray(t_k, dtype=float) - ZERO_C_IN_K


def per_h_to_per_s(x):
    return np.asarray(x, dtype=float) / 3600.0
