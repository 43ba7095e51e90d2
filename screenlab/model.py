"""The validated campaign: the one shape that flows from import to analysis.

``ingest`` turns a folder into a :class:`CampaignData`; the store saves one and loads one back;
the kinetics core takes one. All frames use canonical units (see :mod:`screenlab.units`) and
the columns documented below. Frames are never mutated by consumers.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import pandas as pd

READOUT_KINDS = ("conversion", "yield", "product_conc", "absorbance")
ROLES = ("sample", "blank", "reference", "empty")
#: analyte name used when a campaign has no [analytes] table and no analyte column
DEFAULT_ANALYTE = "product"
#: the catalyst name of the background (blank) rows in the analysis tables; reserved, so no
#: catalyst of a campaign may take it (refused at import)
UNCATALYSED = "(uncatalysed)"
#: absorbance above which a plate reader is usually no longer linear (Beer-Lambert deviations and
#: stray light; common practice, no source); ``[readout].linear_range_max`` overrides it
DEFAULT_LINEAR_RANGE_MAX = 3.0


@dataclass(frozen=True)
class Manifest:
    """campaign.toml, parsed and checked.

    Units are the manifest's own words (already normalised: ``s|min|h``, ``M|mM|uM``,
    ``L|mL|uL``); the frames of :class:`CampaignData` are already converted to canonical units.
    """

    name: str
    readout_kind: str                      # conversion | yield | product_conc | absorbance
    readout_scale: str | None = None       # percent | fraction (conversion, yield), else None
    product_per_substrate: float = 1.0
    epsilon_M_cm: float | None = None      # absorbance only, L mol-1 cm-1
    path_length_cm: float | None = None    # absorbance only
    #: absorbance only: top of the detector's linear range (A units); None = DEFAULT_LINEAR_RANGE_MAX
    linear_range_max: float | None = None
    description: str = ""
    reaction: str = ""
    time_unit: str = "min"
    concentration_unit: str = "mM"
    volume_unit: str = "uL"
    analysis: dict = field(default_factory=dict)          # raw [analysis] table
    analyte_main: str = DEFAULT_ANALYTE                    # [analytes].main
    byproducts: tuple[str, ...] = ()                       # [analytes].byproducts
    enantiomers: tuple[str, str] | None = None             # [analytes].enantiomers
    source_toml: str = ""                                  # the manifest text as imported
    #: [campaign].parent: the campaign this round follows (a key of our own; None for a first round)
    parent: str | None = None
    #: [campaign].decision: the recorded decision of ``parent`` this round was laid out from
    decision: int | None = None

    @property
    def absorbance_linear_max(self) -> float:
        """Absorbance above which readings are outside the linear range (``[readout].linear_range_max``)."""
        return float(self.linear_range_max) if self.linear_range_max is not None else DEFAULT_LINEAR_RANGE_MAX

    @property
    def has_analytes(self) -> bool:
        return bool(self.byproducts) or self.enantiomers is not None


@dataclass(frozen=True)
class CampaignData:
    """One campaign's validated tables in canonical units.

    ``catalysts`` (one row per catalyst), ``plates`` (one row per plate), ``wells`` (one row per
    layout position, with one text column per named factor, see ``factor_names``) and
    ``readings`` (one row per reading, sorted by plate, well, analyte, time_h). Their columns,
    dtypes and units are declared once, in :mod:`screenlab.schema` (``CATALYSTS``, ``PLATES``,
    ``WELLS``, ``READINGS``).
    """

    manifest: Manifest
    catalysts: pd.DataFrame
    plates: pd.DataFrame
    wells: pd.DataFrame
    readings: pd.DataFrame
    factor_names: tuple[str, ...] = ()

    @property
    def name(self) -> str:
        return self.manifest.name

    def content_hash(self) -> str:
        """A fingerprint of the data (not of file bytes), stable across store round trips."""
        h = hashlib.sha256()
        h.update(self.manifest.name.encode())
        for frame in (self.catalysts, self.plates, self.wells, self.readings):
            h.update(pd.util.hash_pandas_object(frame.reset_index(drop=True), index=False).values.tobytes())
        return h.hexdigest()
