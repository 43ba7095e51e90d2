"""The generators' chemistry, shared by the demo campaigns and :mod:`screenlab.synthetic`: molar
masses from standard atomic weights, the Arrhenius factor, the first-order course with induction
and deactivation, Beer-Lambert, and active sites by the campaign format's rules.

Kinetic model: first order in substrate with pseudo-first-order rate constant
``k = k_cat x a(t) + k_blank``, giving ``X(t) = 1 - exp(-(k_cat x I(t) + k_blank x t))`` with
``I(t)`` the integral of the activity ``a(t) = (1 - exp(-t/tau)) x exp(-kd t)`` (induction time
``tau``, deactivation constant ``kd``; ``a = 1`` when both are zero). Everything is vectorised
over arrays of wells x times.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd

from screenlab.units import R_J_MOL_K, ZERO_C_IN_K

#: Standard atomic weights, g/mol (CIAAW/IUPAC; conventional values where the table gives an
#: interval). H, C, N, O, P, Cl, Fe, Co, Ni, Cu, Ru, Rh, Pd, Ir, Pt from the project's check-values
#: notes, section 10 (CONFIRMED there); Br 79.904, Mn 54.938043, K 39.0983, Zn 65.38 are from memory.
ATOMIC_WEIGHTS: dict[str, float] = {
    "H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999, "P": 30.973761998, "Cl": 35.45,
    "Br": 79.904, "K": 39.0983, "Mn": 54.938043, "Fe": 55.845, "Co": 58.933194, "Ni": 58.6934,
    "Cu": 63.546, "Zn": 65.38, "Ru": 101.07, "Rh": 102.90549, "Pd": 106.42, "Ir": 192.217,
    "Pt": 195.084,
}

_ELEMENT = re.compile(r"([A-Z][a-z]?)(\d*)")


def molar_mass(formula: str) -> float:
    """Molar mass in g/mol of a flat formula such as ``C17H38BrFeNOP2`` (no brackets).

    A ``.`` or ``*`` separates parts with an optional leading multiplier (``NiCl2.6H2O``).
    """
    total = 0.0
    for part in re.split(r"[.*·]", formula.strip()):
        m = re.match(r"^(\d+)(.*)$", part)
        mult, body = (int(m.group(1)), m.group(2)) if m else (1, part)
        pos = 0
        for el in _ELEMENT.finditer(body):
            if el.start() != pos:
                raise ValueError(f"cannot read formula {formula!r} at {body[pos:]!r}")
            if el.group(1) not in ATOMIC_WEIGHTS:
                raise ValueError(f"no atomic weight for {el.group(1)!r} in {formula!r}")
            total += mult * ATOMIC_WEIGHTS[el.group(1)] * int(el.group(2) or 1)
            pos = el.end()
        if pos != len(body):
            raise ValueError(f"cannot read formula {formula!r} at {body[pos:]!r}")
    return total



def arrhenius_factor(ea_kj_mol, t_c, tref_c):
    """k(T) / k(Tref) = exp(-Ea/R (1/T - 1/Tref)) (R = N_A k_B, exact in the 2019 SI: screenlab.units)."""
    ea = np.asarray(ea_kj_mol, dtype=float) * 1e3
    t = np.asarray(t_c, dtype=float) + ZERO_C_IN_K
    tr = np.asarray(tref_c, dtype=float) + ZERO_C_IN_K
    return np.exp(-ea / R_J_MOL_K * (1.0 / t - 1.0 / tr))


def _expint(r, t):
    """(1 - exp(-r t)) / r, and t where r == 0 (vectorised)."""
    r = np.asarray(r, dtype=float)
    t = np.asarray(t, dtype=float)
    safe = np.where(r > 0, r, 1.0)
    return np.where(r > 0, -np.expm1(-safe * t) / safe, t)


def activity_integral(t_h, kd_per_h, tau_h):
    """Integral from 0 to t of a(s) = (1 - exp(-s/tau)) exp(-kd s); tau = 0 means no induction."""
    t = np.asarray(t_h, dtype=float)
    kd = np.asarray(kd_per_h, dtype=float)
    tau = np.asarray(tau_h, dtype=float)
    inv_tau = np.where(tau > 0, 1.0 / np.where(tau > 0, tau, 1.0), 0.0)
    induction = np.where(tau > 0, _expint(kd + inv_tau, t), 0.0)
    return _expint(kd, t) - induction


def first_order_conversion(t_h, k_cat_per_h, k_blank_per_h, kd_per_h=0.0, tau_h=0.0):
    """Fraction converted: 1 - exp(-(k_cat I(t) + k_blank t)) (see the module docstring)."""
    t = np.asarray(t_h, dtype=float)
    expo = np.asarray(k_cat_per_h, dtype=float) * activity_integral(t, kd_per_h, tau_h)
    expo = expo + np.asarray(k_blank_per_h, dtype=float) * t
    return -np.expm1(-expo)


def beer_lambert_absorbance(conc_mM, epsilon_M_cm, path_length_cm):
    """A = epsilon x l x c with c converted from mM to mol/L."""
    return np.asarray(epsilon_M_cm, float) * np.asarray(path_length_cm, float) * np.asarray(conc_mM, float) * 1e-3



def site_umol(cat: pd.DataFrame, loading, unit, substrate_umol) -> np.ndarray:
    """Active sites per well by the contract's formulas (used for the truth, not written)."""
    loading = np.asarray(loading, dtype=float)
    unit = np.asarray(unit, dtype=object)
    spu = cat["sites_per_unit"].fillna(1.0).to_numpy()
    mm = cat["molar_mass_g_mol"].to_numpy()
    wt = cat["metal_wt_pct"].to_numpy()
    mmet = cat["metal_molar_mass_g_mol"].to_numpy()
    disp = cat["dispersion"].fillna(1.0).to_numpy()
    mg_sites = np.where(np.isfinite(wt), loading * 1e3 * wt / 100.0 / np.where(np.isfinite(mmet), mmet, 1.0) * disp,
                        loading * 1e3 / np.where(np.isfinite(mm), mm, 1.0) * spu)
    return np.select([unit == "umol", unit == "mg", unit == "mol%"],
                     [loading * spu, mg_sites, loading / 100.0 * np.asarray(substrate_umol, float) * spu], np.nan)

