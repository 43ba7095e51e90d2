"""The import plan (screenlab.store.planner.plan_import), tested without DuckDB: what the store holds
(``Stored``) against the incoming data (``Incoming``) gives the plates added, unchanged, changed and
kept, the catalyst changes, the refusals, the status, the rows to write and the report's message.

Each rule is stated in a few plain lines (set arithmetic on plate names, pandas ``isin`` counts)."""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from screenlab.store import fingerprints as F
from screenlab.store.planner import ImportRefusedError, Incoming, Stored, names_text, plan_import
from screenlab.store.storage import CATALYST_COLS, prepare, storage_form


def incoming(data, *, fingerprints_needed: bool = True) -> Incoming:
    prep = prepare(data)
    fps = F.with_text(F.of_prepared(prep))

    def give():
        assert fingerprints_needed, "the plan asked for fingerprints it does not need"
        return fps

    return Incoming(data.name, F.manifest_fingerprint(data.manifest), tuple(data.factor_names), prep, give)


def stored_after(data, plates=None) -> Stored:
    """What the store holds after importing ``data`` (only ``plates`` of it, when given)."""
    inc = incoming(data)
    fps = inc.fingerprints()
    if plates is not None:
        fps = fps[fps["plate"].isin(plates)]
    return Stored(manifest_fingerprint=inc.manifest_fingerprint, factor_names=inc.factor_names,
                  frame_schema=inc.prepared.schema,
                  catalysts=storage_form(inc.prepared.catalysts.drop(columns="seq"), CATALYST_COLS),
                  plate_fingerprints=dict(zip(fps["plate"], fps["fp"])))


def _with(data, **frames):
    return dataclasses.replace(data, **frames)


def _subset(data, plates):
    keep = lambda f: f.loc[f["plate"].isin(plates)].reset_index(drop=True)  # noqa: E731
    return _with(data, plates=keep(data.plates), wells=keep(data.wells), readings=keep(data.readings))


def _scaled(data, plates, factor=0.5):
    r = data.readings.copy()
    hit = r["plate"].isin(plates).to_numpy()
    r.loc[hit, "value"] = r.loc[hit, "value"] * factor
    return _with(data, readings=r)


def test_a_new_campaign_adds_every_plate_without_asking_for_fingerprints(make_data):
    data = make_data("fresh", plates=("P1", "P2"))
    plan = plan_import(Stored(), incoming(data, fingerprints_needed=False))
    assert plan.status == "imported" and plan.added == ("P1", "P2") and plan.fingerprints is None
    assert plan.rows is None and (plan.n_wells, plan.n_readings) == (len(data.wells), len(data.readings))
    assert plan.header is not None and list(plan.header.catalysts["catalyst"]) == list(data.catalysts["catalyst"])
    assert plan.message() == f"fresh: new campaign with 2 plates (P1, P2) [192 wells, {len(data.readings):,} readings]"
    report = plan.report(dry_run=True)
    assert report.status == "dry_run" and report.import_id is None
    assert report.message == ("dry run, nothing written: fresh: would be new campaign with 2 plates (P1, P2) "
                              f"[192 wells, {len(data.readings):,} readings]")


def test_the_same_data_again_is_unchanged(make_data):
    data = make_data("same")
    plan = plan_import(stored_after(data), incoming(data))
    assert plan.status == "unchanged" and not plan.writes and plan.header is None
    assert plan.unchanged == ("P1", "P2") and plan.added == plan.changed == plan.kept == ()
    assert plan.message() == "same: unchanged, nothing to import (2 plates (P1, P2) already stored)"
    assert plan.report(dry_run=True).message == "dry run: " + plan.message()


def test_a_new_plate_is_added_and_only_its_rows_are_written(make_data):
    data = make_data("grow", plates=("P1", "P2", "P3"))
    plan = plan_import(stored_after(data, plates=["P1"]), incoming(data))
    assert plan.status == "added_plates" and plan.added == ("P2", "P3") and plan.unchanged == ("P1",)
    new = data.readings["plate"].isin(["P2", "P3"]).to_numpy()
    assert plan.n_readings == int(new.sum()) and plan.n_wells == int(data.wells["plate"].isin(["P2", "P3"]).sum())
    np.testing.assert_array_equal(plan.rows["readings"], new)
    assert plan.message().endswith(f"added 2 plates (P2, P3); 1 unchanged [192 wells, {int(new.sum()):,} readings]")


def test_a_changed_plate_is_refused_naming_what_changed_and_replaced_on_request(make_data):
    data = make_data("chg", plates=("P1", "P2"))
    changed = _scaled(data, ["P2"])
    with pytest.raises(ImportRefusedError) as err:
        plan_import(stored_after(data), incoming(changed))
    assert err.value.plates == ("P2",) and not err.value.manifest
    assert str(err.value).startswith("campaign 'chg': plate P2 (readings) differ from the stored data. Nothing was "
                                     "written.")
    plan = plan_import(stored_after(data), incoming(changed), replace=True)
    assert plan.status == "replaced" and plan.changed == ("P2",) and plan.unchanged == ("P1",)
    assert "replaced 1 plate (P2) (old version kept as history); 1 unchanged" in plan.message()


def test_stored_plates_the_import_does_not_mention_are_kept(make_data):
    data = make_data("keep", plates=("P1", "P2"))
    only = _subset(data, ["P2"])
    plan = plan_import(stored_after(data), incoming(only))
    assert plan.status == "unchanged" and plan.kept == ("P1",)
    assert plan.message().endswith("; 1 stored plate not in this import left as they are")


def test_catalyst_changes_and_the_merged_set(make_data):
    data = make_data("cat")
    cats = data.catalysts.copy()
    cats.loc[cats["catalyst"] == "C2", "molar_mass_g_mol"] = 999.0
    cats.loc[len(cats)] = {"catalyst": "C9", "name": "new", "family": "nhc", "molar_mass_g_mol": 300.0,
                           "sites_per_unit": 1.0, "metal_wt_pct": np.nan, "metal_molar_mass_g_mol": np.nan,
                           "dispersion": 1.0}
    newer = _with(data, catalysts=cats.iloc[::-1].reset_index(drop=True))  # file order does not matter
    with pytest.raises(ImportRefusedError, match="catalyst C2 differ") as err:
        plan_import(stored_after(data), incoming(newer))
    assert err.value.catalysts == ("C2",)
    plan = plan_import(stored_after(data), incoming(newer), replace=True)
    assert plan.status == "replaced" and plan.catalysts_added == ("C9",) and plan.catalysts_changed == ("C2",)
    merged = plan.header.catalysts
    assert list(merged["catalyst"]) == list(data.catalysts["catalyst"]) + ["C9"]   # stored order, then additions
    assert merged.set_index("catalyst").loc["C2", "molar_mass_g_mol"] == 999.0
    assert list(merged["seq"]) == list(range(len(merged)))
    only_new = _with(data, catalysts=cats.assign(molar_mass_g_mol=np.where(cats["catalyst"] == "C2",
                                                                           data.catalysts["molar_mass_g_mol"].iloc[1],
                                                                           cats["molar_mass_g_mol"])))
    plan = plan_import(stored_after(data), incoming(only_new))
    assert plan.status == "added_plates" and plan.catalysts_added == ("C9",) and plan.header is not None
    assert plan.added == () and "added catalyst C9" in plan.message()


def test_a_changed_manifest_needs_replace(make_data):
    data = make_data("man")
    other = _with(data, manifest=dataclasses.replace(data.manifest, description="second look"))
    with pytest.raises(ImportRefusedError, match=r"the manifest \(campaign.toml\) differs") as err:
        plan_import(stored_after(data), incoming(other))
    assert err.value.manifest
    plan = plan_import(stored_after(data), incoming(other), replace=True)
    assert plan.status == "replaced" and plan.manifest_replaced and plan.header is not None
    assert plan.message() == "man: 2 unchanged; replaced the manifest [0 wells, 0 readings]"


def test_names_are_listed_up_to_twelve():
    items = [f"P{i}" for i in range(14)]
    assert names_text(items) == ", ".join(items[:12]) + " and 2 more"
    assert names_text(items[:12]) == ", ".join(items[:12])


@given(stored=st.sets(st.sampled_from(["A", "B", "C", "D"])), wanted=st.sets(st.sampled_from(["A", "B", "C", "D"]),
                                                                               min_size=1),
       changed=st.sets(st.sampled_from(["A", "B", "C", "D"])))
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_plates_are_partitioned_by_name_and_fingerprint(make_data, stored, wanted, changed):
    """added = incoming - stored; of the rest, changed where the data differ, else unchanged;
    kept = stored - incoming (sorted); the rows written are those of the added and changed plates."""
    everything = make_data("part", plates=("A", "B", "C", "D"), fmt=24)
    before = stored_after(everything, plates=sorted(stored)) if stored else Stored()
    new = _subset(everything, sorted(wanted))
    new = _scaled(new, sorted(changed & wanted & stored))
    plan = plan_import(before, incoming(new), replace=True)
    assert set(plan.added) == wanted - stored
    assert set(plan.changed) == wanted & stored & changed
    assert set(plan.unchanged) == (wanted & stored) - changed
    assert plan.kept == tuple(sorted(stored - wanted))
    written = set(plan.added) | set(plan.changed)
    assert plan.n_readings == int(new.readings["plate"].isin(written).sum())
    assert plan.n_wells == int(new.wells["plate"].isin(written).sum())
    assert plan.status == ("imported" if not stored else "replaced" if plan.changed else
                           "added_plates" if plan.added else "unchanged")
