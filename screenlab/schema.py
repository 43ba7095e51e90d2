"""The declared columns of every frame that flows through ScreenLab: name, dtype, unit, meaning.

One :class:`FrameSchema` per frame, in data-flow order (campaign frames, then the kinetics, quality
and ranking tables). The import builds the campaign frames to these schemas, the store keeps their
columns (``screenlab.store.storage`` derives its column lists from them), the CLI picks the
columns it prints from them (:meth:`FrameSchema.pick`), and the contributor guide's
"Frame contracts" tables are written from them (:func:`markdown`; ``tests/test_schema.py`` keeps
DEVELOPERS.md in step). :func:`check_frame` checks a frame against its schema at the entry of an
analysis step.

dtypes are kinds, not exact pandas dtypes: ``text`` (pandas ``str`` / ``string`` or object),
``float`` (any real number; integers are accepted), ``int`` (numpy or nullable integers) and
``bool``. A frame may carry more columns than its schema declares (named factors, diagnostics);
``extra`` says which. Units are written as in the column names (``mM``, ``h-1``, ``kJ/mol``);
``""`` is a count, a code, a text or a dimensionless ratio.

This module imports nothing heavy (pandas only inside :func:`check_frame`), so the CLI can build
its column lists without loading the analysis.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable

from screenlab.errors import FrameError

DTYPES = ("text", "float", "int", "bool")


@dataclass(frozen=True)
class Column:
    """One declared column. ``optional``: may be absent (e.g. only when the file had it)."""

    name: str
    dtype: str
    unit: str = ""
    meaning: str = ""
    optional: bool = False

    def __post_init__(self) -> None:
        if self.dtype not in DTYPES:
            raise ValueError(f"column {self.name!r}: dtype {self.dtype!r} is not one of {', '.join(DTYPES)}")


@dataclass(frozen=True)
class FrameSchema:
    """The columns of one frame, in their order, and where the frame is made."""

    name: str
    made_by: str
    columns: tuple[Column, ...]
    extra: str = ""

    def __post_init__(self) -> None:
        seen = [c.name for c in self.columns]
        if len(set(seen)) != len(seen):
            raise ValueError(f"frame {self.name!r} declares a column twice")

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    @property
    def required(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns if not c.optional)

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(f"frame {self.name!r} declares no column {name!r}")

    def pick(self, names: Iterable[str], *also: "FrameSchema") -> list[str]:
        """``names`` as a list, each checked to be a column of this frame (or of ``also``, frames
        joined to it), so that a column list of a surface cannot drift from the schema."""
        names = list(names)
        known = set(self.names).union(*(s.names for s in also))
        unknown = [n for n in names if n not in known]
        if unknown:
            raise KeyError(f"{', '.join(unknown)}: not declared in the {self.name!r} frame schema")
        return names


def _cols(*rows: tuple) -> tuple[Column, ...]:
    return tuple(Column(*row) if not isinstance(row, Column) else row for row in rows)


def _opt(name: str, dtype: str, unit: str, meaning: str) -> Column:
    return Column(name, dtype, unit, meaning, optional=True)


# --------------------------------------------------------------------------------------------
# the campaign frames (screenlab.model.CampaignData), canonical units

CATALYSTS = FrameSchema("catalysts", "screenlab.ingest.validate.check_catalysts", _cols(
    ("catalyst", "text", "", "catalyst id, unique in the campaign"),
    ("name", "text", "", "display name (the id when catalysts.csv gives none)"),
    ("family", "text", "", "family or class, for grouping"),
    ("molar_mass_g_mol", "float", "g/mol", "molar mass of the weighed material per formula unit; NaN when not given"),
    ("sites_per_unit", "float", "", "active sites per formula unit (default 1)"),
    ("metal_wt_pct", "float", "%", "metal content of a supported catalyst, by mass; NaN when not given"),
    ("metal_molar_mass_g_mol", "float", "g/mol", "molar mass of that metal; NaN when not given"),
    ("dispersion", "float", "", "fraction of metal atoms at the surface (default 1)"),
    _opt("alias", "text", "", "the id the catalyst had in an earlier campaign (only when catalysts.csv has the column)"),
))

PLATES = FrameSchema("plates", "screenlab.ingest.validate.check_plates", _cols(
    ("plate", "text", "", "plate (or vial block) id, unique in the campaign"),
    ("format", "int", "", "wells per plate: 24, 48, 96 or 384"),
    ("n_rows", "int", "", "rows of the format"),
    ("n_cols", "int", "", "columns of the format"),
    ("temperature_c", "float", "degC", "block temperature"),
    ("run_date", "text", "", "ISO date of the run (YYYY-MM-DD), or missing"),
    ("notes", "text", "", "free text, or missing"),
))

WELLS = FrameSchema("wells", "screenlab.ingest.validate.check_layout", _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "canonical well name, e.g. A1"),
    ("row", "int", "", "row index, 0-based"),
    ("col", "int", "", "column index, 0-based"),
    ("role", "text", "", "sample, blank, reference or empty"),
    ("catalyst", "text", "", "catalyst id; missing for blank and empty wells"),
    ("loading", "float", "loading_unit", "amount of catalyst in the well"),
    ("loading_unit", "text", "", "umol, mg or mol%; missing without a catalyst"),
    ("substrate_conc_mM", "float", "mM", "initial substrate concentration; NaN for empty wells"),
    ("volume_uL", "float", "uL", "reaction volume; NaN for empty wells"),
    ("temperature_c", "float", "degC", "the well's own temperature if the layout gives one, else its plate's"),
), extra="one text column per named factor (CampaignData.factor_names), and the optional text column "
         "`sample` (a code naming the well, not a factor)")

READINGS = FrameSchema("readings", "screenlab.ingest.validate.check_readings", _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "canonical well name"),
    ("analyte", "text", "", "analyte name (`product` when the campaign declares no analytes)"),
    ("time_h", "float", "h", "time since the start of the reaction, >= 0"),
    ("value", "float", "readout", "the reading in the readout's own scale: percent or fraction, product "
                                  "concentration in the manifest's unit, or absorbance"),
), extra="none; rows sorted by plate, well, analyte, time_h")

#: the campaign frames by their attribute name on CampaignData
CAMPAIGN_FRAMES: dict[str, FrameSchema] = {"catalysts": CATALYSTS, "plates": PLATES, "wells": WELLS,
                                           "readings": READINGS}


# --------------------------------------------------------------------------------------------
# checking and documenting

def _kind_ok(dtype, kind: str, empty: bool) -> bool:
    import numpy as np
    import pandas as pd

    if isinstance(dtype, pd.StringDtype):
        return kind == "text"
    if isinstance(dtype, pd.BooleanDtype):
        return kind == "bool"
    if pd.api.types.is_extension_array_dtype(dtype):
        if pd.api.types.is_integer_dtype(dtype):
            return kind in ("int", "float")
        if pd.api.types.is_float_dtype(dtype):
            return kind == "float"
        return False
    dtype = np.dtype(dtype)
    if dtype == object:
        return kind == "text" or empty   # an empty frame's columns have no dtype of their own
    return dtype.kind in {"float": "fiu", "int": "iu", "bool": "b", "text": ""}[kind]


def frame_problems(frame, schema: FrameSchema) -> list[str]:
    """What keeps ``frame`` from meeting ``schema``: missing columns and columns of another kind."""
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        return [f"is a {type(frame).__name__}, not a table (pandas DataFrame)"]
    out = []
    missing = [c for c in schema.required if c not in frame.columns]
    if missing:
        out.append(f"missing column{'s' if len(missing) > 1 else ''} {', '.join(missing)}")
    empty = len(frame) == 0
    for col in schema.columns:
        if col.name in frame.columns:
            dtype = frame[col.name].dtype
            if not _kind_ok(dtype, col.dtype, empty):
                out.append(f"column {col.name} holds {dtype}, expected {col.dtype}")
    return out


def check_frame(frame, schema: FrameSchema, *, where: str = ""):
    """``frame`` itself when it has every required column of ``schema`` with a compatible dtype;
    else :class:`~screenlab.errors.FrameError` naming the frame, the caller (``where``) and every
    missing or mistyped column. Extra columns are allowed."""
    problems = frame_problems(frame, schema)
    if problems:
        head = f"{where}: " if where else ""
        raise FrameError(f"{head}the {schema.name} frame does not meet its schema (screenlab.schema."
                         f"{schema.name}): {'; '.join(problems)}")
    return frame


def markdown(schema: FrameSchema) -> str:
    """The schema as the Markdown table the contributor guide shows."""
    lines = [f"`{schema.name}` (made by `{schema.made_by}`)", "",
             "| column | dtype | unit | meaning |", "|---|---|---|---|"]
    for c in schema.columns:
        unit = f"`{c.unit}`" if c.unit else ""
        lines.append(f"| `{c.name}` | {c.dtype} | {unit} | {c.meaning}{' (optional)' if c.optional else ''} |")
    if schema.extra:
        lines += ["", f"Other columns: {schema.extra}."]
    return "\n".join(lines)


def all_schemas() -> list[FrameSchema]:
    """Every declared frame schema, in data-flow order."""
    return [v for v in globals().values() if isinstance(v, FrameSchema)]
