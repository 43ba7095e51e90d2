"""Recorded decisions, round links and catalyst aliases in the store (schema 2).

The rules checked here are the issue's, stated in a few plain lines each: a decision is written
once with every field and never changed; a changed mind is a new decision naming the one it
supersedes; the next round's campaign.toml names its parent and the decision and the import keeps
them; ids are matched exactly and an alias joins a renamed catalyst to its old id.
"""
from __future__ import annotations

import dataclasses
import shutil
from datetime import datetime, timedelta, timezone

import pandas as pd
import pytest
from rounds import NOTE, ROUND1, ROUND2, add_second_round, next_round_folder  # tests/rounds.py

from screenlab.errors import NotFoundError, ScreenlabError, UsageError, ValidationError
from screenlab.export.decision import default_author, draft_decision
from screenlab.ingest import read_campaign
from screenlab.pipeline import analyse
from screenlab.stats.ranking import rank_candidates
from screenlab.store import Store
from screenlab.store import decisions as D
from screenlab.store.backup import backup_store, restore_store
from screenlab.synthetic import synthetic_campaign

ISSUE_COLUMNS = ["decision", "campaign", "created_at", "author", "metric", "temperature_c", "catalysts", "note",
                 "supersedes"]


@pytest.fixture(scope="module")
def two_rounds(demo_store, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("rounds")
    path = tmp / "store.duckdb"
    shutil.copy2(demo_store, path)
    number = add_second_round(path, tmp)
    return path, number


def _draft(store, campaign, picks=None, **kw):
    data = store.load_campaign(campaign)
    a = analyse(data)
    r = rank_candidates(a.kinetics, a.quality, metric="tof", top_k=3, draws=500, seed=0,
                        confidence=a.settings.confidence, catalysts=data.catalysts)
    if picks is None:
        picks = r[r["rank"].notna() & (r["role"] != "reference")]["catalyst"].head(2).tolist()
    args = dict(campaign=campaign, note="why: test", author="tester", settings=a.settings, top_k=3, draws=500,
                seed=0, catalysts=data.catalysts)
    args.update(kw)
    return draft_decision(r, picks, **args), r


def test_a_recorded_decision_has_every_field(two_rounds):
    path, number = two_rounds
    store = Store(path, read_only=True)
    listed = D.decisions(store)
    assert set(ISSUE_COLUMNS) <= set(listed.columns)
    row = listed[listed["decision"] == number].iloc[0]
    assert row["campaign"] == ROUND1 and row["author"] == "T. Lead" and row["note"] == NOTE
    assert row["metric"] == "tof" and row["temperature_c"] == 60.0 and pd.isna(row["supersedes"])
    # the chosen catalysts in order: the top 3 candidates (benchmark excluded) of that ranking
    assert row["catalysts"] == "RU-01, RU-02, RU-04"
    created = pd.Timestamp(row["created_at"]).to_pydatetime().replace(tzinfo=timezone.utc)
    assert abs(datetime.now(timezone.utc) - created) < timedelta(hours=1)   # stored in UTC
    assert row["settings"]["reference_temperature_c"] == 60.0 and row["constraints"]["top_k"] == 3
    assert row["status"] == "current" and row["on_current_data"]
    # the version hash is a sha256 hex of the campaign it was made on, and the current data still match
    assert len(row["campaign_version"]) == 64 and int(row["campaign_version"], 16) >= 0
    assert row["campaign_version"] == D.campaign_version(store, ROUND1)
    rec, rows = D.get_decision(store, number)
    chosen = rows[rows["position"].notna()]
    assert chosen["position"].tolist() == [1, 2, 3]
    assert (chosen["ci_low"] < chosen["estimate"]).all() and (chosen["estimate"] < chosen["ci_high"]).all()
    assert rows.loc[rows["position"].isna(), "catalyst"].tolist() == ["REF-RU"]   # benchmark kept for comparison
    assert (rows["censored"] == "").all()   # the rates table carries no censored column yet: all measured


def test_decisions_are_never_edited_a_new_one_supersedes(demo_store_copy):
    store = Store(demo_store_copy)
    first, r = _draft(store, ROUND1)
    one = D.record_decision(store, first)
    before = D.decisions(store).set_index("decision").loc[one.decision].drop(["status", "superseded_by"])
    before_rows = D.get_decision(store, one.decision)[1]
    second, _ = _draft(store, ROUND1, picks=["RU-01", "MN-01"], supersedes=one.decision, note="changed mind")
    two = D.record_decision(store, second)
    listed = D.decisions(store).set_index("decision")
    after = listed.loc[one.decision].drop(["status", "superseded_by"])
    pd.testing.assert_series_equal(after, before)                        # the old decision is as it was
    pd.testing.assert_frame_equal(D.get_decision(store, one.decision)[1], before_rows)
    assert listed.loc[one.decision, "status"] == f"superseded by {two.decision}"
    assert listed.loc[two.decision, "supersedes"] == one.decision
    assert listed.loc[two.decision, "catalysts"] == "RU-01, MN-01"
    assert D.decisions(store).loc[lambda d: d["decision"] == two.decision, "constraints"].iloc[0]["selection"] == \
        "picked by hand"
    # a decision can be superseded once; the chain continues from the newest
    third, _ = _draft(store, ROUND1, supersedes=one.decision)
    with pytest.raises(UsageError, match=f"already superseded by decision {two.decision}"):
        D.record_decision(store, third)
    with pytest.raises(UsageError, match="there is no decision 99"):
        D.record_decision(store, _draft(store, ROUND1, supersedes=99)[0])
    other, _ = _draft(store, "ester-hydrolysis-uv", supersedes=two.decision)
    with pytest.raises(UsageError, match="made on campaign"):
        D.record_decision(store, other)
    assert len(D.decisions(store)) == 2      # nothing written by the refused ones


def test_recording_is_refused_without_note_on_read_only_or_changed_data(tmp_path):
    path = tmp_path / "s.duckdb"
    store = Store(path)
    data = synthetic_campaign(n_plates=4, fmt=48, seed=3, name="camp")
    store.import_campaign(data)
    version = D.campaign_version(store, "camp")
    draft, _ = _draft(store, "camp", campaign_version=version)
    with pytest.raises(UsageError, match="note"):
        D.record_decision(store, draft_decision(_draft(store, "camp")[1], draft.chosen, campaign="camp", note="  ",
                                                top_k=3, draws=10, seed=0))
    with pytest.raises(ScreenlabError, match="read-only"):
        D.record_decision(Store(path, read_only=True), draft)
    # an import between the analysis and the recording: the decision would name data it was not made on
    readings = data.readings.copy()
    readings.loc[readings.index[5], "value"] += 1.0
    store.import_campaign(dataclasses.replace(data, readings=readings), replace=True)
    assert D.campaign_version(store, "camp") != version
    with pytest.raises(ScreenlabError, match="changed in the store since it was analysed"):
        D.record_decision(store, draft)
    assert D.decisions(store).empty


def test_campaign_version_follows_the_data_not_the_import(tmp_path, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "c", "vers")
    store = Store(tmp_path / "s.duckdb")
    store.import_campaign(read_campaign(folder))
    v1 = D.campaign_version(store, "vers")
    assert store.import_campaign(read_campaign(folder)).status == "unchanged"
    assert D.campaign_version(store, "vers") == v1            # an unchanged re-import keeps the version
    lay = (folder / "readings.csv").read_text().splitlines()
    head, first = lay[0], lay[1].split(",")
    first[-1] = str(float(first[-1]) + 1.0)                    # one reading changes
    (folder / "readings.csv").write_text("\n".join([head, ",".join(first), *lay[2:]]) + "\n")
    store.import_campaign(read_campaign(folder), replace=True)
    assert D.campaign_version(store, "vers") != v1


def test_next_round_names_parent_and_decision_and_the_import_keeps_them(two_rounds):
    path, number = two_rounds
    store = Store(path, read_only=True)
    summary = store.campaigns().set_index("campaign")
    assert summary.loc[ROUND2, "parent"] == ROUND1 and summary.loc[ROUND2, "parent_decision"] == number
    assert pd.isna(summary.loc[ROUND1, "parent"]) and pd.isna(summary.loc[ROUND1, "parent_decision"])
    m = store.load_campaign(ROUND2).manifest
    assert (m.parent, m.decision) == (ROUND1, number)
    links = D.round_links(store).set_index("campaign")
    assert links.loc[ROUND2, "parent"] == ROUND1 and links.loc[ROUND2, "decision"] == number


def test_a_contradicting_round_link_is_refused(demo_store_copy, tmp_path):
    folder, number = next_round_folder(demo_store_copy, tmp_path)
    toml = (folder / "campaign.toml").read_text()
    (folder / "campaign.toml").write_text(toml.replace(f'parent = "{ROUND1}"', 'parent = "ester-hydrolysis-uv"'))
    store = Store(demo_store_copy)
    n = len(store.campaign_names())
    with pytest.raises(ValidationError) as exc:
        store.import_campaign(read_campaign(folder))
    p = exc.value.problems[0]
    assert p.file == "campaign.toml" and p.column == "campaign.decision" and p.row is not None
    assert toml.splitlines()[p.row - 1].startswith("decision = ")    # the line of the key
    assert ROUND1 in p.message and len(store.campaign_names()) == n
    # a parent and decision this store does not hold are kept as given (another store, a later import)
    (folder / "campaign.toml").write_text(toml.replace(f'parent = "{ROUND1}"', 'parent = "elsewhere-2025"')
                                          .replace(f"decision = {number}", "decision = 77"))
    store.import_campaign(read_campaign(folder))
    row = store.campaigns().set_index("campaign").loc[ROUND2]
    assert row["parent"] == "elsewhere-2025" and row["parent_decision"] == 77


@pytest.mark.parametrize("lines, message", [
    ('parent = "same"', "cannot be the campaign itself"),
    ('parent = "first"\ndecision = "two"', "must be the number of a recorded decision"),
    ('parent = "first"\ndecision = 0', "must be the number of a recorded decision"),
    ("decision = 3", "give 'parent' too"),
])
def test_round_link_keys_are_checked_in_the_manifest(tmp_path, lines, message, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "c", "same")
    toml = (folder / "campaign.toml").read_text()
    (folder / "campaign.toml").write_text(toml.replace('reaction = "A + B -> C"\n', f'reaction = "A + B -> C"\n{lines}\n'))
    with pytest.raises(ValidationError) as exc:
        read_campaign(folder)
    assert any(message in p.message and p.file == "campaign.toml" for p in exc.value.problems), exc.value


def test_old_campaigns_stay_unchanged_on_reimport(tmp_path, write_sample_campaign):
    """The new manifest keys and the alias column are left out while unused: a campaign stored before
    imports again as unchanged."""
    folder = write_sample_campaign(tmp_path / "c", "plain")
    store = Store(tmp_path / "s.duckdb")
    store.import_campaign(read_campaign(folder))
    data = store.load_campaign("plain")
    assert "alias" not in data.catalysts.columns and data.manifest.parent is None
    assert store.import_campaign(read_campaign(folder)).status == "unchanged"


def test_alias_joins_a_renamed_catalyst_across_campaigns(two_rounds):
    path, _ = two_rounds
    store = Store(path, read_only=True)
    cats = D.all_catalysts(store)
    assert D.same_catalyst(cats, "RU-04") == {"RU-04", "RU-04-B2"}
    assert D.same_catalyst(cats, "RU-04-B2") == {"RU-04", "RU-04-B2"}
    assert D.same_catalyst(cats, "RU-01") == {"RU-01"}       # exact ids: no fuzzy joining
    found = D.catalyst_campaigns(store, "RU-04")
    assert found[["campaign", "catalyst"]].values.tolist() == [[ROUND1, "RU-04"], [ROUND2, "RU-04-B2"]]
    data = store.load_campaign(ROUND2)
    assert data.catalysts.set_index("catalyst").loc["RU-04-B2", "alias"] == "RU-04"
    with pytest.raises(NotFoundError, match="did you mean RU-01"):
        D.catalyst_campaigns(store, "ru-01")


def test_alias_chains_are_followed():
    cats = pd.DataFrame({"campaign": ["a", "b", "c", "c"], "catalyst": ["X1", "X2", "X3", "Y"],
                         "alias": [None, "X1", "X2", None], "name": "", "family": ""})
    assert D.same_catalyst(cats, "X3") == {"X1", "X2", "X3"} == D.same_catalyst(cats, "X1")
    assert D.same_catalyst(cats, "Y") == {"Y"}


@pytest.mark.parametrize("alias, message", [("C1", "is the catalyst's own id"), ("C2", "id of another catalyst")])
def test_alias_column_is_checked(tmp_path, alias, message, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "c", "al")
    cats = pd.read_csv(folder / "catalysts.csv")
    cats["alias"] = ""
    cats.loc[cats["catalyst"] == "C1", "alias"] = alias
    cats.to_csv(folder / "catalysts.csv", index=False)
    with pytest.raises(ValidationError) as exc:
        read_campaign(folder)
    p = [p for p in exc.value.problems if message in p.message][0]
    assert p.file == "catalysts.csv" and p.column == "alias" and p.row == 2   # header = row 1


def test_backup_and_restore_carry_the_decisions(two_rounds, tmp_path):
    path, number = two_rounds
    work = tmp_path / "s.duckdb"
    shutil.copy2(path, work)
    backup_store(work, tmp_path / "bk")
    assert (tmp_path / "bk" / "tables" / "decisions.parquet").is_file()
    assert (tmp_path / "bk" / "tables" / "decision_catalysts.parquet").is_file()
    got = pd.read_parquet(tmp_path / "bk" / "tables" / "decisions.parquet")      # pyarrow's reader
    assert got["note"].tolist() == [NOTE]
    restore_store(tmp_path / "bk", tmp_path / "back.duckdb")
    back = Store(tmp_path / "back.duckdb")
    assert back.table_counts() == Store(work).table_counts() and back.table_counts()["decisions"] == 1
    pd.testing.assert_frame_equal(D.decisions(back), D.decisions(Store(work)))
    assert back.campaigns().set_index("campaign").loc[ROUND2, "parent_decision"] == number


def test_default_author_is_the_os_user(monkeypatch):
    import getpass

    assert default_author() == getpass.getuser()
    monkeypatch.setattr(getpass, "getuser", lambda: (_ for _ in ()).throw(KeyError("no passwd entry")))
    monkeypatch.setenv("USER", "lab-user")
    assert default_author() == "lab-user"
