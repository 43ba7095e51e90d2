"""Recorded decisions, round links and cross-campaign catalyst look-ups (store schema 2).

A *decision* is what a team lead chose from a campaign's ranking: the metric and temperature,
the constraints and analysis settings used, the chosen catalysts in order with their estimates
and intervals at that moment, a note, who and when (UTC), and a hash of the campaign's data
(:func:`campaign_version`). Decisions are written once by :func:`record_decision` and never
updated; a changed mind is a new decision whose ``supersedes`` names the earlier one.

A next round names its parent campaign and the decision it came from in campaign.toml
(``[campaign] parent``, ``decision``); the import stores them with the manifest and
:func:`check_round_link` refuses a link that contradicts the store. ``Store.campaigns()`` and
:func:`round_links` read the links back.

Every function takes a :class:`~screenlab.store.Store` and opens its own short connection.
Recording a decision does not bump the store's data generation: it changes no campaign data, so
no cached analysis goes stale (readers of decisions read them fresh; the tables are small).
"""
from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from screenlab.errors import NotFoundError, Problem, ScreenlabError, UsageError, ValidationError

if TYPE_CHECKING:  # pragma: no cover
    from screenlab.export.decision import DecisionDraft
    from screenlab.store.db import Store

#: columns of one chosen catalyst of a decision (table decision_catalysts, without decision/seq)
CATALYST_FIELDS = ("position", "catalyst", "name", "role", "estimate", "ci_low", "ci_high", "unit", "censored",
                   "rank", "rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "n", "temperature_c",
                   "basis", "flags")
_INT_FIELDS = ("position", "rank", "rank_low", "rank_high")
_TEXT_FIELDS = ("catalyst", "name", "role", "unit", "censored", "basis", "flags")

#: what ``screenlab decisions`` lists (the first nine are the issue's minimum)
LIST_COLUMNS = ["decision", "campaign", "created_at", "author", "metric", "temperature_c", "catalysts", "note",
                "supersedes", "superseded_by", "status", "top_k", "on_current_data", "campaign_version",
                "import_id", "draws", "seed", "constraints", "settings", "screenlab_version"]

_DECISIONS = """
SELECT decision, campaign, created_at, author, metric, temperature_c, top_k, draws, seed, constraints_json,
       settings_json, note, supersedes, campaign_version, import_id, screenlab_version
FROM decisions WHERE ? IS NULL OR campaign = ? ORDER BY decision"""
_DECISION_CATALYSTS = """
SELECT decision, seq, "position", catalyst, name, role, estimate, ci_low, ci_high, unit, censored, "rank",
       rank_low, rank_high, p_top, p_best, p_beats_reference, n, temperature_c, basis, flags
FROM decision_catalysts WHERE decision IN (SELECT decision FROM decisions WHERE ? IS NULL OR campaign = ?)
ORDER BY decision, seq"""
_ONE_DECISION = "SELECT decision, campaign FROM decisions WHERE decision = ?"
_SUPERSEDED_BY = "SELECT decision FROM decisions WHERE supersedes = ? ORDER BY decision"
_NEXT_DECISION = "SELECT coalesce(max(decision), 0) + 1 FROM decisions"
_INSERT_DECISION = """
INSERT INTO decisions (decision, campaign, created_at, author, metric, temperature_c, top_k, draws, seed,
                       constraints_json, settings_json, note, supersedes, campaign_version, import_id,
                       screenlab_version)
VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"""
_INSERT_CATALYSTS = """
INSERT INTO decision_catalysts (decision, seq, "position", catalyst, name, role, estimate, ci_low, ci_high, unit,
                                censored, "rank", rank_low, rank_high, p_top, p_best, p_beats_reference, n,
                                temperature_c, basis, flags)
SELECT decision, seq, "position", catalyst, name, role, estimate, ci_low, ci_high, unit, censored, "rank",
       rank_low, rank_high, p_top, p_best, p_beats_reference, n, temperature_c, basis, flags
FROM incoming_decision_catalysts"""
_HEADER = "SELECT fingerprint FROM current_campaigns WHERE campaign = ?"
_CATALYST_ROWS = """
SELECT catalyst, name, family, molar_mass_g_mol, sites_per_unit, metal_wt_pct, metal_molar_mass_g_mol,
       dispersion, alias
FROM current_catalysts WHERE campaign = ? ORDER BY catalyst"""
_PLATE_FPS = "SELECT plate, fingerprint FROM current_plates WHERE campaign = ? ORDER BY plate"
_LAST_IMPORT = "SELECT max(import_id) FROM imports WHERE campaign = ?"
_ALL_CATALYSTS = """
SELECT c.campaign, c.catalyst, c.alias, c.name, c.family FROM current_catalysts c ORDER BY c.campaign, c.seq"""
_LINKS = """
SELECT h.campaign, json_extract_string(h.manifest_json, '$.parent') AS parent,
       TRY_CAST(json_extract_string(h.manifest_json, '$.decision') AS BIGINT) AS decision,
       i.imported_at
FROM current_campaigns h
LEFT JOIN (SELECT campaign, min(imported_at) AS imported_at FROM imports GROUP BY campaign) i USING (campaign)
ORDER BY i.imported_at, h.campaign"""


@dataclass(frozen=True)
class RecordedDecision:
    """What :func:`record_decision` wrote: its number, time (UTC) and the campaign version hash."""

    decision: int
    campaign: str
    created_at: datetime
    campaign_version: str

    @property
    def message(self) -> str:
        return (f"recorded decision {self.decision} on {self.campaign} at "
                f"{self.created_at.strftime('%Y-%m-%dT%H:%M:%SZ')} (campaign version {self.campaign_version[:12]})")


# --------------------------------------------------------------------------------------------
# the campaign version
# --------------------------------------------------------------------------------------------

def _cell(v: Any) -> Any:
    """A cell as plain JSON (missing -> None, floats by repr so the hash is exact)."""
    if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
        return None
    if isinstance(v, (np.floating, float)):
        return repr(float(v))
    if isinstance(v, (np.integer, int)):
        return int(v)
    return str(v)


def _version(con, campaign: str) -> tuple[str, int | None]:
    head = con.execute(_HEADER, [campaign]).fetchall()
    if not head:
        raise NotFoundError(f"no campaign {campaign!r} in the store")
    cats = con.execute(_CATALYST_ROWS, [campaign]).fetchall()
    plates = con.execute(_PLATE_FPS, [campaign]).fetchall()
    doc = {"manifest": head[0][0], "catalysts": [[_cell(v) for v in row] for row in cats],
           "plates": [[p, fp] for p, fp in plates]}
    digest = hashlib.sha256(json.dumps(doc, sort_keys=True, separators=(",", ":")).encode("utf-8")).hexdigest()
    last = con.execute(_LAST_IMPORT, [campaign]).fetchall()[0][0]
    return digest, None if last is None else int(last)


def campaign_version(store: "Store", campaign: str) -> str:
    """sha256 (hex) of the campaign's current data: the manifest's fingerprint, every catalyst row
    and every current plate's fingerprint (plate row, layout, readings). Any import that changes
    what the analysis sees changes it; re-importing unchanged files does not."""
    with store._connect() as con:
        return _version(con, campaign)[0]


# --------------------------------------------------------------------------------------------
# recording
# --------------------------------------------------------------------------------------------

def _catalyst_frame(rows: pd.DataFrame, decision: int) -> pd.DataFrame:
    out = {"decision": np.full(len(rows), decision, dtype=np.int64), "seq": np.arange(len(rows), dtype=np.int64)}
    for c in CATALYST_FIELDS:
        s = rows[c] if c in rows.columns else pd.Series([pd.NA] * len(rows), index=rows.index)
        s = s.reset_index(drop=True)
        if c in _INT_FIELDS:
            out[c] = pd.to_numeric(s, errors="coerce").astype("Int64")
        elif c in _TEXT_FIELDS:
            out[c] = s.astype("string")
        else:
            out[c] = pd.to_numeric(s, errors="coerce").astype("float64")
    frame = pd.DataFrame(out)
    frame["censored"] = frame["censored"].fillna("")
    return frame


def _finite_or_none(v) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def record_decision(store: "Store", draft: "DecisionDraft") -> RecordedDecision:
    """Write ``draft`` (:class:`screenlab.export.decision.DecisionDraft`) as a new decision, in one
    transaction, and return its number.

    Refused (nothing written) when the campaign is not stored, when its data changed since the
    draft's analysis (``draft.campaign_version`` differs from the current one), when no catalyst is
    chosen, when the note or author is empty, or when ``supersedes`` names a decision that does
    not exist, belongs to another campaign or is already superseded.
    """
    if store.read_only:
        raise ScreenlabError(f"store {store.path} is open read-only; cannot record a decision")
    chosen = draft.catalysts[pd.to_numeric(draft.catalysts["position"], errors="coerce").notna()]
    if chosen.empty:
        raise UsageError("a decision needs at least one chosen catalyst")
    if not str(draft.note or "").strip():
        raise UsageError("a decision needs a note (why these catalysts); give --note TEXT")
    if not str(draft.author or "").strip():
        raise UsageError("a decision needs an author; give --author NAME")
    from screenlab import __version__

    with store._connect() as con:
        con.begin()
        try:
            version, last_import = _version(con, draft.campaign)
            if draft.campaign_version is not None and draft.campaign_version != version:
                raise ScreenlabError(
                    f"campaign {draft.campaign!r} changed in the store since it was analysed (an import "
                    f"happened meanwhile); nothing was recorded. Run the shortlist again on the current data.")
            if draft.supersedes is not None:
                old = con.execute(_ONE_DECISION, [int(draft.supersedes)]).fetchall()
                if not old:
                    raise UsageError(f"--supersedes {draft.supersedes}: there is no decision {draft.supersedes} "
                                     f"in the store (see screenlab decisions)")
                if old[0][1] != draft.campaign:
                    raise UsageError(f"--supersedes {draft.supersedes}: that decision was made on campaign "
                                     f"{old[0][1]!r}, not on {draft.campaign!r}")
                later = con.execute(_SUPERSEDED_BY, [int(draft.supersedes)]).fetchall()
                if later:
                    raise UsageError(f"--supersedes {draft.supersedes}: decision {draft.supersedes} is already "
                                     f"superseded by decision {later[0][0]}; supersede that one instead")
            number = int(con.execute(_NEXT_DECISION).fetchall()[0][0])
            now = datetime.now(timezone.utc).replace(microsecond=0)
            con.execute(_INSERT_DECISION, [
                number, draft.campaign, now.replace(tzinfo=None), str(draft.author).strip(), draft.metric,
                _finite_or_none(draft.temperature_c), None if draft.top_k is None else int(draft.top_k),
                None if draft.draws is None else int(draft.draws), None if draft.seed is None else int(draft.seed),
                json.dumps(draft.constraints or {}, sort_keys=True, default=str),
                json.dumps(draft.settings or {}, sort_keys=True, default=str), str(draft.note).strip(),
                None if draft.supersedes is None else int(draft.supersedes), version, last_import, __version__])
            frame = _catalyst_frame(draft.catalysts, number)
            con.register("incoming_decision_catalysts", frame)
            try:
                con.execute(_INSERT_CATALYSTS)
            finally:
                con.unregister("incoming_decision_catalysts")
            con.commit()
        except BaseException:
            con.rollback()
            raise
    return RecordedDecision(decision=number, campaign=draft.campaign, created_at=now, campaign_version=version)


# --------------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------------

def decision_catalysts(store: "Store", campaign: str | None = None) -> pd.DataFrame:
    """Every chosen catalyst (and benchmark row) of the decisions on ``campaign`` (all when None):
    ``decision, seq`` and :data:`CATALYST_FIELDS`, in decision and row order."""
    with store._connect() as con:
        frame = con.execute(_DECISION_CATALYSTS, [campaign, campaign]).df()
    for c in ("decision", "seq"):
        frame[c] = frame[c].astype("int64")
    for c in _INT_FIELDS:
        frame[c] = frame[c].astype("Int64")
    frame["censored"] = frame["censored"].fillna("").astype(str)
    return frame


def decisions(store: "Store", campaign: str | None = None, *, current_versions: bool = True) -> pd.DataFrame:
    """The decisions (of ``campaign``, or all), oldest first, with :data:`LIST_COLUMNS`.

    ``catalysts`` joins the chosen catalysts in order with ", "; ``superseded_by`` is the decision
    that replaced this one (missing while it stands) and ``status`` says ``current`` or
    ``superseded by N``; ``on_current_data`` is False when the campaign's data changed since (its
    version hash differs); ``constraints`` and ``settings`` are dicts. Times are UTC.
    """
    if store.read_only and not store.path.exists():
        return pd.DataFrame(columns=LIST_COLUMNS)
    with store._connect() as con:
        d = con.execute(_DECISIONS, [campaign, campaign]).df()
        cats = con.execute(_DECISION_CATALYSTS, [campaign, campaign]).df()
        versions = {}
        if current_versions:
            for name in d["campaign"].drop_duplicates().tolist():  # a handful of campaigns
                try:
                    versions[name] = _version(con, name)[0]
                except NotFoundError:
                    versions[name] = None
    if d.empty:
        return pd.DataFrame(columns=LIST_COLUMNS)
    chosen = cats[cats["position"].notna()].sort_values(["decision", "position"])
    names = chosen.groupby("decision")["catalyst"].agg(lambda s: ", ".join(s.astype(str)))
    d["catalysts"] = d["decision"].map(names).fillna("")
    succ = d.dropna(subset=["supersedes"]).astype({"supersedes": "int64"})
    by = dict(zip(succ["supersedes"], succ["decision"]))
    d["superseded_by"] = pd.array([by.get(int(x)) for x in d["decision"]], dtype="Int64")
    d["status"] = ["current" if pd.isna(s) else f"superseded by {int(s)}" for s in d["superseded_by"]]
    d["on_current_data"] = [versions.get(c) == v if current_versions else pd.NA
                            for c, v in zip(d["campaign"], d["campaign_version"])]
    d["constraints"] = d["constraints_json"].map(json.loads)
    d["settings"] = d["settings_json"].map(json.loads)
    for c in ("decision",):
        d[c] = d[c].astype("int64")
    for c in ("supersedes", "top_k", "import_id", "draws", "seed"):
        d[c] = d[c].astype("Int64")
    return d[LIST_COLUMNS].reset_index(drop=True)


def get_decision(store: "Store", decision: int) -> tuple[dict, pd.DataFrame]:
    """One decision as a dict (the :func:`decisions` row) and its catalyst rows."""
    with store._connect() as con:
        row = con.execute(_ONE_DECISION, [int(decision)]).fetchall()
    if not row:
        raise NotFoundError(f"there is no decision {decision} in store {store.path} (see screenlab decisions)")
    campaign = row[0][1]
    listed = decisions(store, campaign)
    rec = listed[listed["decision"] == int(decision)].iloc[0].to_dict()
    cats = decision_catalysts(store, campaign)
    return rec, cats[cats["decision"] == int(decision)].reset_index(drop=True)


# --------------------------------------------------------------------------------------------
# round links
# --------------------------------------------------------------------------------------------

def _line_of_key(text: str, key: str) -> int | None:
    """Line (1-based) of ``key = ...`` in the [campaign] table of a manifest's text, for messages."""
    from screenlab.ingest.manifest import _line_of

    return _line_of(text or "", "campaign", key)


def check_round_link(con, manifest) -> None:
    """Refuse (ValidationError naming campaign.toml, its line and key) a round link the store
    contradicts: a ``decision`` that the store holds for a campaign other than ``parent``. A
    parent or decision the store does not hold is accepted and kept as given (it may live in
    another store, or be imported later). Runs inside the import's transaction."""
    number = getattr(manifest, "decision", None)
    if number is None:
        return
    row = con.execute(_ONE_DECISION, [int(number)]).fetchall()
    if row and row[0][1] != manifest.parent:
        raise ValidationError([Problem(
            "campaign.toml", _line_of_key(manifest.source_toml, "decision"), "campaign.decision", str(number),
            f"decision {number} in this store was made on campaign {row[0][1]!r}, not on the parent "
            f"{manifest.parent!r}; correct 'parent' or 'decision'")], source=f"campaign {manifest.name!r}")


def round_links(store: "Store") -> pd.DataFrame:
    """``campaign, parent, decision, imported_at`` for every stored campaign (first import first);
    parent / decision missing for a first round."""
    if store.read_only and not store.path.exists():
        return pd.DataFrame(columns=["campaign", "parent", "decision", "imported_at"])
    with store._connect() as con:
        frame = con.execute(_LINKS).df()
    frame["decision"] = frame["decision"].astype("Int64")
    return frame


# --------------------------------------------------------------------------------------------
# catalysts across campaigns
# --------------------------------------------------------------------------------------------

def all_catalysts(store: "Store") -> pd.DataFrame:
    """``campaign, catalyst, alias, name, family`` of every stored campaign's current catalysts."""
    if store.read_only and not store.path.exists():
        return pd.DataFrame(columns=["campaign", "catalyst", "alias", "name", "family"])
    with store._connect() as con:
        return con.execute(_ALL_CATALYSTS).df()


def same_catalyst(catalysts: pd.DataFrame, catalyst: str) -> set[str]:
    """Every id that names the same catalyst as ``catalyst``: ids match exactly, and an ``alias``
    (the id a catalyst had before) joins the two ids, across any number of renamings."""
    parent: dict[str, str] = {}

    def find(x: str) -> str:
        while parent.get(x, x) != x:
            parent[x] = parent.get(parent[x], parent[x])
            x = parent[x]
        return x

    edges = catalysts.dropna(subset=["alias"])
    for a, b in zip(edges["catalyst"].astype(str), edges["alias"].astype(str)):  # one per renamed catalyst
        if b.strip():
            ra, rb = find(a), find(b.strip())
            if ra != rb:
                parent[ra] = rb
    root = find(str(catalyst))
    ids = set(catalysts["catalyst"].astype(str)) | set(edges["alias"].astype(str).str.strip())
    return {i for i in ids if find(i) == root} | {str(catalyst)}


def catalyst_campaigns(store: "Store", catalyst: str) -> pd.DataFrame:
    """The stored campaigns that hold ``catalyst`` (by exact id, or through an alias):
    ``campaign, catalyst`` (its id there), ``alias, name, family, parent, decision, imported_at``,
    first import first. Raises NotFoundError (with near matches) when no campaign holds it."""
    cats = all_catalysts(store)
    ids = same_catalyst(cats, catalyst)
    hit = cats[cats["catalyst"].astype(str).isin(ids)]
    if hit.empty:
        known = sorted(set(cats["catalyst"].astype(str)))
        near = [k for k in known if k.lower() == str(catalyst).lower()]
        if not near:
            import difflib

            near = difflib.get_close_matches(str(catalyst), known, n=3)
        hint = f"; did you mean {', '.join(near)}?" if near else ""
        raise NotFoundError(f"no stored campaign holds catalyst {catalyst!r} (ids are matched exactly){hint}")
    links = round_links(store)
    out = hit.merge(links, on="campaign", how="left")
    return out.sort_values(["imported_at", "campaign"], kind="stable").reset_index(drop=True)


def chosen_in(store: "Store") -> pd.DataFrame:
    """``decision, campaign, catalyst, position, status`` for every catalyst chosen in a decision
    (status ``current`` or ``superseded by N``)."""
    d = decisions(store, current_versions=False)
    c = decision_catalysts(store)
    c = c[c["position"].notna()]
    if d.empty or c.empty:
        return pd.DataFrame(columns=["decision", "campaign", "catalyst", "position", "status"])
    out = c.merge(d[["decision", "campaign", "status"]], on="decision", how="left")
    return out[["decision", "campaign", "catalyst", "position", "status"]].reset_index(drop=True)


def history_sources(store: "Store", catalyst: str, analysis_of, ranking_of=None):
    """The campaigns holding ``catalyst`` (:func:`catalyst_campaigns`) as
    :class:`screenlab.stats.history.HistorySource` records, first import first.

    ``analysis_of(campaign)`` gives the campaign's :class:`~screenlab.pipeline.Analysis` (the
    caller decides on settings and caching); ``ranking_of(campaign)``, when given, its TOF ranking.
    Each source says in which recorded decisions the catalyst was chosen ("decision 2 (pick 1)")."""
    from screenlab.stats.history import HistorySource

    camps = catalyst_campaigns(store, catalyst)
    picks = chosen_in(store)
    out = []
    for row in camps.itertuples(index=False):  # one per campaign holding the catalyst
        mine = picks[(picks["campaign"] == row.campaign) & (picks["catalyst"].astype(str) == str(row.catalyst))]
        text = "; ".join(f"decision {int(p.decision)} (pick {int(p.position)}"
                         + ("" if p.status == "current" else f", {p.status}") + ")"
                         for p in mine.itertuples(index=False))
        parent = None if _missing(row.parent) else str(row.parent)
        out.append(HistorySource(campaign=str(row.campaign), catalyst=str(row.catalyst),
                                 analysis=analysis_of(str(row.campaign)), parent=parent,
                                 ranking=None if ranking_of is None else ranking_of(str(row.campaign)),
                                 decisions=text))
    return camps, out


def _missing(v) -> bool:
    return v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v))


__all__ = ["CATALYST_FIELDS", "LIST_COLUMNS", "RecordedDecision", "all_catalysts", "campaign_version",
           "catalyst_campaigns", "check_round_link", "chosen_in", "history_sources", "decision_catalysts", "decisions", "get_decision",
           "record_decision", "round_links", "same_catalyst"]
