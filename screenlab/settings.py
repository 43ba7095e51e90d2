"""Analysis settings: one registry of named settings with defaults, units and help text.

The same records feed the CLI flags, the app's help texts and the documentation. A campaign's
``[analysis]`` table in campaign.toml overrides the defaults; CLI flags override both.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace
from typing import Any


@dataclass(frozen=True)
class Setting:
    name: str
    default: Any
    help: str


SETTINGS: tuple[Setting, ...] = (
    Setting("conversion_window_pct", 50.0,
            "Early window of the generic rate law (a quadratic through the origin, used where a course "
            "is not initial-rate kinetics): readings up to the first one at or above this percent of the "
            "course's largest product."),
    Setting("min_window_points", 3, "Fewest readings in the early window of the generic rate law."),
    Setting("reference_temperature_c", 60.0, "Temperature at which TOF is compared across candidates, degC."),
    Setting("confidence", 0.95, "Confidence level of every interval."),
    Setting("outlier_z", 3.5,
            "Robust z (0.6745 x |x - median| / MAD, Iglewicz & Hoaglin 1993) above which a replicate is flagged."),
    Setting("low_ea_kj_mol", 20.0,
            "Apparent Ea below this suggests transport (diffusion) control (common practice, no source)."),
    Setting("zprime_min", 0.5,
            "Plates with Z' below this are flagged (Zhang, Chung & Oldenburg 1999; IUPAC Gold Book 'Z' factor')."),
    Setting("include_irregular_courses", False,
            "Fit the Arrhenius line through temperatures whose courses show induction, product decline or "
            "deactivation (left out by default: their initial rate is not the catalyst's working rate)."),
)

_DEFAULTS = {s.name: s.default for s in SETTINGS}


@dataclass(frozen=True)
class AnalysisSettings:
    conversion_window_pct: float = _DEFAULTS["conversion_window_pct"]
    min_window_points: int = _DEFAULTS["min_window_points"]
    reference_temperature_c: float = _DEFAULTS["reference_temperature_c"]
    confidence: float = _DEFAULTS["confidence"]
    outlier_z: float = _DEFAULTS["outlier_z"]
    low_ea_kj_mol: float = _DEFAULTS["low_ea_kj_mol"]
    zprime_min: float = _DEFAULTS["zprime_min"]
    include_irregular_courses: bool = _DEFAULTS["include_irregular_courses"]

    @classmethod
    def from_mapping(cls, mapping: dict[str, Any] | None, **overrides: Any) -> "AnalysisSettings":
        """Defaults, then a manifest's ``[analysis]`` table, then explicit overrides (None = keep)."""
        known = {f.name for f in fields(cls)}
        values: dict[str, Any] = {}
        for src in (mapping or {}), overrides:
            for k, v in src.items():
                if k in known and v is not None:
                    values[k] = type(_DEFAULTS[k])(v) if not isinstance(_DEFAULTS[k], bool) else bool(v)
        return replace(cls(), **values)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)
