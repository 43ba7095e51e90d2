"""Analysis settings: one registry of named settings with defaults, units and help text.

The same records feed the CLI flags, the app's help texts and the documentation. A campaign's
``[analysis]`` table in campaign.toml overrides the defaults; CLI flags override both.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, replace
from typing import Any


@dataclass(frozen=True)
class Setting:
    name: str
    default: Any
    help: str
    #: the allowed range: (low, high, low included, high included); None = any value of the type
    bounds: tuple[float, float, bool, bool] | None = None
    #: what to tell a user who gave a value outside it
    hint: str = ""


SETTINGS: tuple[Setting, ...] = (
    Setting("conversion_window_pct", 50.0,
            "Early window of the generic rate law (a quadratic through the origin, used where a course "
            "is not initial-rate kinetics): readings up to the first one at or above this percent of the "
            "course's largest product.", (0.0, 100.0, False, True), "a percentage above 0 and at most 100"),
    Setting("min_window_points", 3, "Fewest readings in the early window of the generic rate law.",
            (3, 1000, True, True), "a whole number of readings, at least 3 (the quadratic has 2 parameters)"),
    Setting("reference_temperature_c", 60.0, "Temperature at which TOF is compared across candidates, degC.",
            (-273.15, 1000.0, False, True), "a temperature in degC above absolute zero (-273.15)"),
    Setting("confidence", 0.95, "Confidence level of every interval.", (0.5, 1.0, True, False),
            "a level from 0.5 up to (not including) 1, e.g. 0.95"),
    Setting("outlier_z", 3.5,
            "Robust z (0.6745 x |x - median| / MAD, Iglewicz & Hoaglin 1993) above which a replicate is flagged.",
            (0.0, 1e6, False, True), "a robust z above 0, e.g. 3.5"),
    Setting("low_ea_kj_mol", 20.0,
            "Apparent Ea below this suggests transport (diffusion) control (common practice, no source).",
            (0.0, 1000.0, True, True), "an activation energy in kJ/mol, 0 or more"),
    Setting("zprime_min", 0.5,
            "Plates with Z' below this are flagged (Zhang, Chung & Oldenburg 1999; IUPAC Gold Book 'Z' factor').",
            (-1e6, 1.0, True, True), "a Z' of at most 1 (1 is a perfect assay)"),
    Setting("include_irregular_courses", False,
            "Fit the Arrhenius line through temperatures whose courses show induction, product decline or "
            "deactivation (left out by default: their initial rate is not the catalyst's working rate)."),
)

_DEFAULTS = {s.name: s.default for s in SETTINGS}
_BY_NAME = {s.name: s for s in SETTINGS}


def setting_problem(name: str, value: Any) -> str | None:
    """Why ``value`` cannot be the setting ``name`` (one plain sentence), or None when it can.
    The one rule the manifest's [analysis] table, the command line and the app's sidebar share."""
    s = _BY_NAME.get(name)
    if s is None:
        return f"unknown analysis setting {name!r}; known: {', '.join(sorted(_BY_NAME))}"
    if isinstance(s.default, bool):
        return None if isinstance(value, (bool, int)) and value in (0, 1, True, False) else \
            f"{name} must be true or false, not {value!r}"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return f"{name} must be a number, not {value!r}"
    v = float(value)
    if not math.isfinite(v):
        return f"{name} must be a finite number, not {value!r}"
    if isinstance(s.default, int) and not v.is_integer():
        return f"{name} = {value!r}: {s.hint or 'a whole number'}"
    if s.bounds is not None:
        lo, hi, lo_in, hi_in = s.bounds
        if (v < lo or (v == lo and not lo_in)) or (v > hi or (v == hi and not hi_in)):
            return f"{name} = {value!r} is out of range: {s.hint}"
    return None


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

    def __post_init__(self) -> None:
        """Every value inside its range (:func:`setting_problem`), else a UsageError naming it."""
        from screenlab.errors import UsageError

        problems = [p for f in fields(self) if (p := setting_problem(f.name, getattr(self, f.name)))]
        if problems:
            raise UsageError("; ".join(problems))

    @classmethod
    def from_mapping(cls, mapping: dict[str, Any] | None, **overrides: Any) -> "AnalysisSettings":
        """Defaults, then a manifest's ``[analysis]`` table, then explicit overrides (None = keep).
        Unknown keys are ignored here (the manifest reader refuses them); values out of range raise
        :class:`~screenlab.errors.UsageError`."""
        from screenlab.errors import UsageError

        known = {f.name for f in fields(cls)}
        values: dict[str, Any] = {}
        problems = []
        for src in (mapping or {}), overrides:
            for k, v in src.items():
                if k in known and v is not None:
                    if (p := setting_problem(k, v)):
                        problems.append(p)
                        continue
                    values[k] = type(_DEFAULTS[k])(v) if not isinstance(_DEFAULTS[k], bool) else bool(v)
        if problems:
            raise UsageError("; ".join(problems))
        return replace(cls(), **values)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)
