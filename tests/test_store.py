"""The SQLite sweep store (netgen.studies.store): commit per point or per batch, no duplicates, resume identity, CSV export."""

from __future__ import annotations

import csv
import json
import sqlite3

import pytest

from netgen.errors import OutputError
from netgen.studies.store import KEY_COLUMNS, STORE_NAME, SweepStore, export_csv

SPEC = {"variations": [{"name": "design.vdd", "axis": [10.0, 12.0]}], "tolerances": [], "samples": 0,
        "seed": None, "dist": None}
METRICS = {"settled": True, "drain_efficiency": 0.785, "pout_w": 0.5, "pdc_w": 0.637, "peak_vd_v": 20.0,
           "peak_vd_over_vdd": 2.0, "harmonics": [{"n": 1, "pload_dbc": 0.0}, {"n": 2, "pload_dbc": -42.5}]}


@pytest.fixture
def store(tmp_path):
    with SweepStore(tmp_path / STORE_NAME) as st:
        yield st


def test_wal_and_tables(store):
    # SQLite documents journal_mode=WAL as persistent in the file (sqlite.org/wal.html)
    con = sqlite3.connect(store.path)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    cols = {r[1] for r in con.execute("PRAGMA table_info(points)")}
    assert {"sweep_id", "idx", "inputs", "status", "metrics", "settled", "error", "seconds", *KEY_COLUMNS} <= cols


def test_each_point_is_committed_and_visible_to_another_connection(store):
    sid = store.open_sweep("abc", "", SPEC, 2)
    store.record(sid, 0, {"axes": {"design.vdd": 10.0}}, "ok", METRICS, None, 1.5)
    other = sqlite3.connect(store.path)  # a second connection sees it without any close/flush
    row = other.execute("SELECT idx, status, drain_efficiency, pout_w, settled, seconds FROM points").fetchone()
    assert row == (0, "ok", 0.785, 0.5, 1, 1.5)


def test_points_stored_together_are_committed_when_the_block_ends_also_on_an_error(store):
    # SQLite: a reader sees only committed transactions (sqlite.org/isolation.html); a batch of
    # short points is one transaction, committed when its block ends, even when it ends with an error
    sid = store.open_sweep("abc", "", SPEC, 4)
    other = sqlite3.connect(store.path)
    with store.together():
        store.record(sid, 0, {}, "ok", METRICS, None, 0.1)
        store.record(sid, 1, {}, "ok", METRICS, None, 0.1)
        assert other.execute("SELECT COUNT(*) FROM points").fetchone()[0] == 0
    assert other.execute("SELECT COUNT(*) FROM points").fetchone()[0] == 2
    with pytest.raises(KeyError):
        with store.together():
            store.record(sid, 2, {}, "ok", METRICS, None, 0.1)
            raise KeyError("the coordinator stopped")
    assert other.execute("SELECT idx FROM points ORDER BY idx").fetchall() == [(0,), (1,), (2,)]
    store.record(sid, 3, {}, "ok", METRICS, None, 0.1)  # outside a block: committed at once again
    assert other.execute("SELECT COUNT(*) FROM points").fetchone()[0] == 4


def test_duplicate_index_is_ignored(store):
    sid = store.open_sweep("abc", "", SPEC, 2)
    assert store.record(sid, 1, {}, "failed", None, "SimulationError: x", 0.1) is True
    assert store.record(sid, 1, {}, "ok", METRICS, None, 0.2) is False
    rows = list(store.rows(sid))
    assert len(rows) == 1 and rows[0]["status"] == "failed" and rows[0]["metrics"] is None
    assert store.done_indices(sid) == {1}
    assert store.count(sid) == {"ok": 0, "not_settled": 0, "failed": 1, "lost": 0}


def test_same_spec_resumes_the_same_sweep(tmp_path):
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep("abc", "toml", SPEC, 2)
        st.record(sid, 0, {}, "ok", METRICS, None, 0.0)
    with SweepStore(tmp_path / STORE_NAME) as st:
        assert st.open_sweep("abc", "toml", json.loads(json.dumps(SPEC)), 2) == sid
        assert st.done_indices(sid) == {0}


def test_changed_spec_or_design_is_refused(store):
    store.open_sweep("abc", "", SPEC, 2)
    other = {**SPEC, "samples": 5}
    with pytest.raises(OutputError, match=r"holds a sweep with different variations .*choose another output folder with -o"):
        store.open_sweep("abc", "", other, 2)
    with pytest.raises(OutputError, match=r"holds a sweep of a different design"):
        store.open_sweep("xyz", "", SPEC, 2)


def test_bad_status_is_a_bug_not_a_row(store):
    sid = store.open_sweep("abc", "", SPEC, 2)
    with pytest.raises(ValueError):
        store.record(sid, 0, {}, "maybe", None, None, 0.0)


def test_not_a_database_is_a_clear_error(tmp_path):
    bad = tmp_path / STORE_NAME
    bad.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(OutputError, match=r"sweep\.sqlite: cannot open the sweep store"):
        SweepStore(bad)


def test_export_csv(tmp_path):
    db = tmp_path / STORE_NAME
    with SweepStore(db) as st:
        sid = st.open_sweep("abc", "", SPEC, 2)
        st.record(sid, 1, {"axes": {"design.vdd": 12.0}, "sample": None}, "failed", None, "SizingError: no", 0.25)
        st.record(sid, 0, {"axes": {"design.vdd": 10.0}, "set": {"design.vdd": "10 V", "design.load_x": "5 ohm"},
                           "sample": None, "values": {"tank_c": "7.9 pF"}},
                  "ok", METRICS, None, 1.0)
    path = export_csv(db, tmp_path / "sweep.csv")
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["idx"] for r in rows] == ["0", "1"]
    # numeric SI cells, the unit in the header (issue 13)
    assert rows[0]["design.vdd [V]"] == "10.0" and float(rows[0]["values.tank_c [F]"]) == pytest.approx(7.9e-12)
    assert float(rows[0]["design.load_x [ohm]"]) == 5.0 and rows[1]["design.load_x [ohm]"] == ""
    assert float(rows[0]["drain_efficiency"]) == 0.785 and float(rows[0]["h2_dbc"]) == -42.5
    assert rows[1]["status"] == "failed" and rows[1]["error"] == "SizingError: no" and rows[1]["pout_w"] == ""
    with pytest.raises(OutputError, match="no such sweep store"):
        export_csv(tmp_path / "missing.sqlite", tmp_path / "x.csv")


# ---------------------------------------------------------------- lost points, attempts, a full disk

def test_a_lost_point_is_replaced_by_its_next_attempt(store):
    # 'lost' is the machinery's fault, not the design's: the row gives way to the next attempt,
    # whereas a result (ok, not_settled, failed) is final (docs/sweeps.md)
    sid = store.open_sweep("abc", "", SPEC, 2)
    assert store.record(sid, 0, {}, "lost", None, "WorkerCrash: killed", 0.0) is True
    assert store.done_indices(sid) == set()  # no result: it runs again
    assert store.lost_attempts(sid) == {0: 1}
    assert store.record(sid, 0, {}, "lost", None, "SchedulerLost: gone", 0.0) is True
    assert store.lost_attempts(sid) == {0: 2}
    assert store.done_indices(sid, max_attempts=2) == {0}  # tried twice: left out when 2 is the limit
    assert store.done_indices(sid, max_attempts=3) == set()
    assert store.record(sid, 0, {"axes": {"design.vdd": 10.0}}, "ok", METRICS, None, 1.0) is True
    (row,) = store.rows(sid)
    assert (row["status"], row["attempts"], row["error"], row["metrics"]["pout_w"]) == ("ok", 3, None, 0.5)
    assert store.record(sid, 0, {}, "lost", None, "late", 0.0) is False  # a result is never overwritten
    assert store.count(sid) == {"ok": 1, "not_settled": 0, "failed": 0, "lost": 0}


def test_a_store_from_before_the_lost_status_is_upgraded(tmp_path):
    # a points table with the old three-status CHECK and no attempts column, as earlier versions wrote it
    db = tmp_path / STORE_NAME
    con = sqlite3.connect(db)
    con.executescript(f"""
        CREATE TABLE sweeps (id INTEGER PRIMARY KEY, design_digest TEXT NOT NULL, design_toml TEXT NOT NULL,
            spec TEXT NOT NULL, seed INTEGER, n_points INTEGER NOT NULL, created TEXT NOT NULL);
        CREATE TABLE points (sweep_id INTEGER NOT NULL REFERENCES sweeps(id), idx INTEGER NOT NULL,
            inputs TEXT NOT NULL, status TEXT NOT NULL CHECK (status IN ('ok', 'not_settled', 'failed')),
            metrics TEXT, {", ".join(f"{c} REAL" for c in KEY_COLUMNS)}, settled INTEGER, error TEXT,
            seconds REAL, UNIQUE (sweep_id, idx));
        INSERT INTO sweeps VALUES (1, 'abc', '', '{json.dumps(SPEC, sort_keys=True)}', NULL, 2, '2024-01-01');
        INSERT INTO points (sweep_id, idx, inputs, status, pout_w, settled, seconds) VALUES (1, 0, '{{}}', 'ok', 0.5, 1, 2.0);
    """)
    con.commit()
    con.close()
    with SweepStore(db) as st:
        assert st.open_sweep("abc", "", SPEC, 2) == 1
        (row,) = st.rows(1)
        assert (row["status"], row["attempts"], row["seconds"]) == ("ok", 1, 2.0)
        assert st.record(1, 1, {}, "lost", None, "WorkerCrash: x", 0.0)
        assert st.con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert st.con.execute("SELECT pout_w FROM points WHERE idx = 0").fetchone()[0] == 0.5


def test_a_full_disk_is_one_error_and_the_store_stays_whole(tmp_path):
    # SQLite reports a full disk as SQLITE_FULL; PRAGMA max_page_count produces that very error
    # (sqlite.org/pragma.html#pragma_max_page_count) without filling a real disk
    db = tmp_path / STORE_NAME
    with SweepStore(db) as st:
        sid = st.open_sweep("abc", "", SPEC, 1000)
        pages = st.con.execute("PRAGMA page_count").fetchone()[0]
        st.con.execute(f"PRAGMA max_page_count = {pages + 2}")
        big = {**METRICS, "note": "x" * 3000}
        stored = 0
        with pytest.raises(OutputError) as err:
            for idx in range(1000):
                st.record(sid, idx, {}, "ok", big, None, 0.0)
                stored += 1
        assert 0 < stored < 1000
        message = str(err.value)
        assert "\n" not in message and message.startswith(f"{db}: the disk is full;")
        assert message.endswith("free some space and run the same command to resume.")
    with SweepStore(db) as st:  # a new connection: the limit is gone, as after freeing space
        assert st.con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert st.done_indices(sid) == set(range(stored))
        assert st.record(sid, stored, {}, "ok", big, None, 0.0)


# ---------------------------------------------------------------- the engine of each point

def test_engine_and_confirmation_in_the_store_and_the_csv(tmp_path):
    # docs/sweeps.md: which engine computed a point's metrics, and a fast point's confirmation in ngspice
    db = tmp_path / STORE_NAME
    conf_ok = {"pout_rel": 4e-4, "efficiency_rel": -1e-4, "worst": 4e-4, "flagged": False}
    conf_bad = {"pout_rel": 3e-3, "efficiency_rel": 1e-3, "worst": 3e-3, "flagged": True}
    with SweepStore(db) as st:
        sid = st.open_sweep("abc", "", SPEC, 5)
        st.record(sid, 0, {}, "ok", {**METRICS, "engine": "estimate"}, None, 0.01)
        st.record(sid, 1, {}, "ok", {**METRICS, "engine": "estimate", "confirmation": conf_ok}, None, 0.01)
        st.record(sid, 2, {}, "ok", {**METRICS, "engine": "ngspice", "confirmation": conf_bad}, None, 0.2)
        st.record(sid, 3, {}, "ok", {**METRICS, "engine": "ngspice", "engine_note": "subcircuit"}, None, 0.2)
        st.record(sid, 4, {}, "failed", None, "SizingError: no", 0.0)
        got = st.con.execute("SELECT idx, engine, confirmation FROM points ORDER BY idx").fetchall()
    assert got == [(0, "estimate", None), (1, "estimate", "confirmed"), (2, "ngspice", "flagged"),
                   (3, "ngspice", None), (4, None, None)]
    with open(export_csv(db, tmp_path / "sweep.csv"), newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [(r["engine"], r["confirmation"]) for r in rows] == [
        ("estimate", ""), ("estimate", "confirmed"), ("ngspice", "flagged"), ("ngspice", ""), ("", "")]
    assert float(rows[1]["confirm_pout_rel"]) == 4e-4 and float(rows[2]["confirm_efficiency_rel"]) == 1e-3
    assert rows[0]["confirm_pout_rel"] == ""


def test_a_store_from_before_the_engine_columns_gets_them_from_the_metrics(tmp_path):
    db = tmp_path / STORE_NAME
    with SweepStore(db) as st:
        sid = st.open_sweep("abc", "", SPEC, 2)
        st.record(sid, 0, {}, "ok", {**METRICS, "engine": "estimate", "confirmation": {"flagged": False}}, None, 0.01)
        st.record(sid, 1, {}, "ok", {**METRICS, "engine": "ngspice"}, None, 0.2)
    con = sqlite3.connect(db)  # the columns gone, as a store of an earlier pashape
    con.execute("ALTER TABLE points DROP COLUMN engine")
    con.execute("ALTER TABLE points DROP COLUMN confirmation")
    con.commit()
    con.close()
    with SweepStore(db) as st:
        got = st.con.execute("SELECT idx, engine, confirmation FROM points ORDER BY idx").fetchall()
    assert got == [(0, "estimate", "confirmed"), (1, "ngspice", None)]
