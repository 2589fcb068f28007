"""The selection layer (hydroatlas/study.py): each table read once, the zone assignment and the inferred picks
computed once, the selection policy applied through hydroatlas/selection.py.

The reference for every frame is the store itself: what a Study hands out must equal what the store's own
``read`` and the selection functions give when called directly (pandas.testing compares them). The data are
the invented mini district of conftest.py.
"""

from __future__ import annotations

import json
from collections import Counter

import pandas as pd
import pytest

from hydroatlas import assign, selection
from hydroatlas.errors import ParameterError
from hydroatlas.selection import SelectionPolicy
from hydroatlas.store import open_store
from hydroatlas.store.schema import TABLES
from hydroatlas.study import Study
from hydroatlas.workflows import build_surface, unit_stats, verticals


class CountingStore:
    """A store that counts how often each table is read (rows and geometries); everything else is the store's."""

    def __init__(self, store):
        self._store = store
        self.reads = Counter()

    def read(self, table, columns=None, **kw):
        self.reads[table] += 1
        return self._store.read(table, columns, **kw)

    def read_geometries(self, table):
        self.reads[f"{table} (geometries)"] += 1
        return self._store.read_geometries(table)

    def __getattr__(self, name):
        return getattr(self._store, name)


@pytest.fixture
def calls(monkeypatch):
    """Counts the calls of the zone assignment and of the pick inference (hydroatlas.assign)."""
    counted = Counter()
    for name in ("assign_zones", "infer_picks"):
        real = getattr(assign, name)

        def wrapper(*args, _real=real, _name=name, **kw):
            counted[_name] += 1
            return _real(*args, **kw)

        monkeypatch.setattr(assign, name, wrapper)
    return counted


def test_verticals_reads_each_table_once_and_assigns_zones_once(mini_store, calls):
    # before the selection layer one verticals call read 16 tables, assigned zones twice and inferred picks
    # three times (the mini store's well W4 has no picks, so inference runs)
    with open_store(mini_store) as store:
        counting = CountingStore(store)
        pairs, profiles = verticals(counting)
        expected_pairs, expected_profiles = verticals(store)
    assert max(counting.reads.values()) == 1, counting.reads
    assert set(counting.reads) == {"units", "wells", "picks", "zones", "heads", "pumping", "ktests"}
    assert calls["assign_zones"] == 2 and calls["infer_picks"] == 2  # once for each of the two calls
    pd.testing.assert_frame_equal(pairs, expected_pairs)
    pd.testing.assert_frame_equal(profiles, expected_profiles)
    assert len(pairs) == 2  # W1: P1-P2 and P2-P3


def test_surface_reads_each_table_once(mini_store, tmp_path, calls):
    with open_store(mini_store) as store:
        counting = CountingStore(store)
        side = build_surface(counting, "TOP", "logk", method="idw", out=tmp_path)
    assert side["n_points"] == 3  # W1 P1, W2 S1 and W4 S1 (inferred TOP); W2 S2 is poor and left out
    assert max(counting.reads.values()) == 1, counting.reads
    assert calls["assign_zones"] == 1 and calls["infer_picks"] == 1


def test_one_study_serves_several_workflows(mini_store, tmp_path, calls):
    with open_store(mini_store) as store:
        counting = CountingStore(store)
        study = Study(counting)
        stats = unit_stats(study)
        verticals(study)
        side = build_surface(study, "TOP", "logk", method="idw", out=tmp_path)
        expected = unit_stats(store)
    assert max(counting.reads.values()) == 1, counting.reads
    assert calls["assign_zones"] == 2 and calls["infer_picks"] == 2  # the study's, and the plain store's
    # json spells NaN one way, so rows with NaN variances (one test) compare equal
    assert json.dumps(list(stats)) == json.dumps(list(expected)) and stats.selection == expected.selection
    assert side["selection"]["left_out"] == [e for e in study.left_out if e["what"] == "ktests"]


@pytest.mark.parametrize("table", ["units", "wells", "picks", "zones", "ktests", "heads", "pumping", "springs",
                                   "discharge", "areas"])
def test_read_equals_the_store(mini_store, table):
    with open_store(mini_store) as store:
        study = Study(store)
        own = [c.name for c in TABLES[table].columns]
        for columns in (None, own, own[:2], own[::-1], ["attrs", own[0]]):
            pd.testing.assert_frame_equal(study.read(table, columns), store.read(table, columns))


def test_frames_are_copies(mini_store):
    with open_store(mini_store) as store:
        study = Study(store)
        wells = study.wells
        wells.loc[:, "ground_elev"] = -1.0
        wells["extra"] = 1
        assert (study.wells["ground_elev"] > 0).all() and "extra" not in study.wells
        asg = study.assignment
        asg["unit"] = None
        assert study.assignment["unit"].notna().any()


def test_selections_equal_the_selection_functions(mini_store):
    with open_store(mini_store) as store:
        for policy in (None, SelectionPolicy(include_poor=True), SelectionPolicy(exclude_wells="W2")):
            study = Study(store, policy)
            asg = assign.assign_zones(store.read("zones"), store.read("picks"), store.read("wells"),
                                      store.read("units"))
            pd.testing.assert_frame_equal(study.assignment, asg)
            heads, heads_out = selection.select_heads(store, policy, window="2024-01-01/2024-12-31")
            got, got_out = study.select_heads(window="2024-01-01/2024-12-31")
            pd.testing.assert_frame_equal(got, heads)
            assert got_out == heads_out
            tests, tests_out = selection.select_ktests(store, policy)
            got, got_out = study.select_ktests()
            pd.testing.assert_frame_equal(got, tests)
            assert got_out == tests_out
            assert study.left_out == heads_out + tests_out


def test_left_out_and_policies(mini_store):
    with open_store(mini_store) as store:
        counting = CountingStore(store)
        study = Study(counting)
        assert study.left_out == []
        tests = study.ktests()
        assert ("W2", "S2") not in set(zip(tests["well_id"], tests["zone_id"]))  # quality poor
        assert study.left_out == [{"what": "ktests", "well_id": "W2", "zone_id": "S2", "reason": "quality poor",
                                   "count": 1}]
        assert study.selection_record()["policy"] == SelectionPolicy().to_dict()
        loose = study.with_policy(SelectionPolicy(include_poor=True))
        assert ("W2", "S2") in set(zip(loose.ktests()["well_id"], loose.ktests()["zone_id"]))
        assert loose.left_out == []
        assert Study.of(study) is study and Study.of(study, SelectionPolicy()) is study
        assert Study.of(study, SelectionPolicy(include_poor=True)).policy.include_poor
    assert max(counting.reads.values()) == 1, counting.reads  # the policies share the tables


def test_bad_input(mini_store):
    with open_store(mini_store) as store:
        study = Study(store)
        with pytest.raises(ParameterError, match="Study already"):
            Study(study)
        with pytest.raises(ParameterError, match="not in the store: NOPE"):
            Study(store, SelectionPolicy(exclude_wells="NOPE"))
        with pytest.raises(ParameterError, match="unit 'XX' is not in the store; known units: TOP, MID, LOW"):
            study.unit_members("XX")
        assert study.unit_members("TOP") == {"TOP"}
        with pytest.raises(ParameterError, match="unknown table"):
            study.read("nope")


def test_other_tables_and_attributes_are_the_stores(mini_store):
    with open_store(mini_store) as store:
        counting = CountingStore(store)
        study = Study(counting)
        for _ in range(2):
            study.read("imports")  # not an input table: read afresh each time (it changes as the store is used)
        assert counting.reads["imports"] == 2
        assert study.schema_version == store.schema_version
        assert study.transaction.__self__ is store  # writes go to the store (a Study never writes)
