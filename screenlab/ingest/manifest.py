"""campaign.toml: parse and check the manifest (all problems at once)."""
from __future__ import annotations

import math
import re
import tomllib
from typing import Any

from screenlab import units
from screenlab.errors import Problem
from screenlab.model import DEFAULT_ANALYTE, READOUT_KINDS, Manifest
from screenlab.settings import SETTINGS, setting_problem

FILE = "campaign.toml"
SCALES = ("percent", "fraction")
_TIME_WORDS = {"s": "s", "sec": "s", "min": "min", "h": "h", "hr": "h"}
_CONC_WORDS = {"m": "M", "mm": "mM", "um": "uM", "nm": "nM"}
_VOL_WORDS = {"l": "L", "ml": "mL", "ul": "uL"}
_TOML_LINE = re.compile(r"line (\d+)")


def _num(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    v = float(value)
    return v if math.isfinite(v) else None


def _line_of(text: str, table: str, key: str | None = None) -> int | None:
    """Line (1-based) of ``[table]`` or of ``key`` inside it, for messages; None if not found."""
    lines = text.splitlines()
    start = None
    for i, line in enumerate(lines):
        s = line.strip()
        if re.match(rf"^\[\s*{re.escape(table)}\s*\]", s):
            start = i
            if key is None:
                return i + 1
            continue
        if start is not None:
            if s.startswith("["):
                break
            if re.match(rf"^{re.escape(key)}\s*=", s):
                return i + 1
    return start + 1 if start is not None else None


def parse_manifest(data: bytes | None, problems: list[Problem]) -> tuple[Manifest | None, dict[str, Any]]:
    """Parse campaign.toml.

    Returns the :class:`Manifest` (None when it has problems) and a dict of the parts that were
    understood (keys ``time_unit``, ``conc_unit``, ``volume_unit``, ``kind``, ``scale``,
    ``product_per_substrate``, ``analytes``, ``analytes_declared``), so that the tables can still
    be checked as far as possible when the manifest has errors.
    """
    info: dict[str, Any] = {}
    n0 = len(problems)
    if data is None:
        problems.append(Problem(FILE, None, None, None, "missing file: every campaign needs a campaign.toml"))
        return None, info
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        problems.append(Problem(FILE, None, None, None, "is not UTF-8 text (TOML files must be UTF-8)"))
        return None, info
    if not text.strip():
        problems.append(Problem(FILE, None, None, None, "the file is empty"))
        return None, info
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = _TOML_LINE.search(str(exc))
        problems.append(Problem(FILE, int(m.group(1)) if m else None, None, None, f"malformed TOML: {exc}"))
        return None, info

    def bad(table: str, key: str | None, value: Any, message: str) -> None:
        col = f"{table}.{key}" if key else f"[{table}]"
        problems.append(Problem(FILE, _line_of(text, table, key), col,
                                None if value is None else str(value), message))

    def table(name: str, required: bool) -> dict:
        t = doc.get(name)
        if t is None:
            if required:
                problems.append(Problem(FILE, None, f"[{name}]", None, f"missing required table [{name}]"))
            return {}
        if not isinstance(t, dict):
            bad(name, None, t, f"'{name}' must be a table ([{name}])")
            return {}
        return t

    def text_key(t: dict, tname: str, key: str, required: bool) -> str | None:
        if key not in t:
            if required:
                problems.append(Problem(FILE, _line_of(text, tname), f"{tname}.{key}", None,
                                        f"missing required key '{key}' in [{tname}]"))
            return None
        v = t[key]
        if not isinstance(v, str):
            bad(tname, key, v, f"'{key}' must be text in quotes")
            return None
        return v.strip()

    camp = table("campaign", True)
    name = text_key(camp, "campaign", "name", True)
    if name is not None and not name:
        bad("campaign", "name", "", "the campaign name must not be empty")
    description = text_key(camp, "campaign", "description", False) or ""
    reaction = text_key(camp, "campaign", "reaction", False) or ""
    # round links (keys of our own): the campaign this round follows and the decision it came from
    parent = text_key(camp, "campaign", "parent", False) or None
    if parent is not None and name and parent == name:
        bad("campaign", "parent", parent,
            "'parent' names the campaign before this one; it cannot be the campaign itself")
    decision = None
    if "decision" in camp:
        v = camp["decision"]
        if isinstance(v, bool) or not isinstance(v, int) or v < 1:
            bad("campaign", "decision", v, "'decision' must be the number of a recorded decision (an integer >= 1, "
                                           "as 'screenlab decisions' lists it)")
        elif parent is None:
            bad("campaign", "decision", v, "'decision' names a decision of the parent campaign; give 'parent' too")
        else:
            decision = int(v)

    # units
    ut = table("units", True)
    unit_specs = (("time", _TIME_WORDS, "time_unit", "s, min, h"),
                  ("concentration", _CONC_WORDS, "conc_unit", "M, mM, uM"),
                  ("volume", _VOL_WORDS, "volume_unit", "L, mL, uL"))
    for key, words, slot, allowed in unit_specs:
        v = text_key(ut, "units", key, True)
        if v is None:
            continue
        canon = words.get(units.normalise_unit_word(v))
        if canon is None:
            bad("units", key, v, f"unknown {key} unit; expected one of {allowed}")
        else:
            info[slot] = canon

    # readout
    ro = table("readout", True)
    kind = text_key(ro, "readout", "kind", True)
    if kind is not None:
        k = kind.lower()
        if k not in READOUT_KINDS:
            bad("readout", "kind", kind, f"unknown readout kind; expected one of {', '.join(READOUT_KINDS)}")
        else:
            info["kind"] = k
    scale = None
    if info.get("kind") in ("conversion", "yield"):
        s = text_key(ro, "readout", "scale", True)
        if s is not None:
            if s.lower() not in SCALES:
                bad("readout", "scale", s, "unknown readout scale; expected percent or fraction")
            else:
                scale = s.lower()
                info["scale"] = scale
    elif "scale" in ro:
        s = ro["scale"]
        if not isinstance(s, str) or s.strip().lower() not in SCALES:
            bad("readout", "scale", s, "unknown readout scale; expected percent or fraction")
    pps = 1.0
    if "product_per_substrate" in ro:
        v = _num(ro["product_per_substrate"])
        if v is None or v <= 0:
            bad("readout", "product_per_substrate", ro["product_per_substrate"],
                "product_per_substrate must be a number > 0 (mol product per mol substrate)")
        else:
            pps = v
    info["product_per_substrate"] = pps
    eps = path = None
    if info.get("kind") == "absorbance":
        for key in ("epsilon_M_cm", "path_length_cm"):
            if key not in ro:
                problems.append(Problem(FILE, _line_of(text, "readout"), f"readout.{key}", None,
                                        f"an absorbance readout needs '{key}' > 0 (Beer-Lambert A = epsilon l c)"))
                continue
            v = _num(ro[key])
            if v is None or v <= 0:
                bad("readout", key, ro[key], f"'{key}' must be a number > 0")
            elif key == "epsilon_M_cm":
                eps = v
            else:
                path = v
    linear_max = None
    if "linear_range_max" in ro:
        v = _num(ro["linear_range_max"])
        if info.get("kind") not in (None, "absorbance"):
            bad("readout", "linear_range_max", ro["linear_range_max"],
                "'linear_range_max' (the detector's linear range) applies to an absorbance readout only")
        elif v is None or v <= 0:
            bad("readout", "linear_range_max", ro["linear_range_max"],
                "'linear_range_max' must be an absorbance > 0 (the top of the detector's linear range)")
        else:
            linear_max = v
    info["linear_range_max"] = linear_max

    # analysis settings
    an = table("analysis", False)
    known = {s.name: s for s in SETTINGS}
    for key, v in an.items():
        if key not in known:
            bad("analysis", key, v, f"unknown analysis setting; known: {', '.join(sorted(known))}")
        elif isinstance(known[key].default, bool):
            if not isinstance(v, bool):
                bad("analysis", key, v, f"'{key}' must be true or false")
        elif _num(v) is None:
            bad("analysis", key, v, "analysis settings must be numbers")
        elif (why := setting_problem(key, v)):
            bad("analysis", key, v, why)

    # analytes
    main = DEFAULT_ANALYTE
    byproducts: tuple[str, ...] = ()
    enantiomers: tuple[str, str] | None = None
    declared = "analytes" in doc
    info["analytes_declared"] = declared
    if declared:
        at = table("analytes", False)
        m = text_key(at, "analytes", "main", True)
        if m is not None:
            if not m:
                bad("analytes", "main", "", "the main analyte name must not be empty")
            else:
                main = m

        def names(key: str) -> tuple[str, ...] | None:
            if key not in at:
                return ()
            v = at[key]
            if not isinstance(v, list) or not all(isinstance(x, str) and x.strip() for x in v):
                bad("analytes", key, v, f"'{key}' must be a list of analyte names in quotes")
                return None
            return tuple(x.strip() for x in v)

        bp = names("byproducts")
        en = names("enantiomers")
        byproducts = bp or ()
        if en:
            if len(en) != 2:
                bad("analytes", "enantiomers", list(en), "'enantiomers' must name exactly two analytes")
            else:
                enantiomers = (en[0], en[1])
        every = [main, *byproducts, *(enantiomers or ())]
        if len(set(every)) != len(every):
            bad("analytes", None, ", ".join(every), "analyte names in [analytes] must all differ")
        if info.get("kind") in ("conversion", "absorbance"):
            bad("analytes", None, info["kind"],
                f"several analytes need a yield or product_conc readout; a {info['kind']} readout "
                "gives one number per well and time")
    info["main"] = main
    info["byproducts"] = byproducts
    info["enantiomers"] = enantiomers

    if len(problems) > n0:
        return None, info
    manifest = Manifest(
        name=name or "", readout_kind=info["kind"], readout_scale=scale, product_per_substrate=pps,
        epsilon_M_cm=eps, path_length_cm=path, linear_range_max=linear_max, description=description, reaction=reaction,
        time_unit=info["time_unit"], concentration_unit=info["conc_unit"], volume_unit=info["volume_unit"],
        analysis=dict(an), analyte_main=main, byproducts=byproducts, enantiomers=enantiomers,
        source_toml=text, parent=parent, decision=decision,
    )
    return manifest, info
