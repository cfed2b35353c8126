"""The sweep results store: one SQLite file (``<out>/sweep.sqlite``), resumable.

Tables
------
``sweeps``
    ``id``, ``design_digest``, ``design_toml`` (the base design document),
    ``spec`` (canonical JSON of the variations, tolerances, samples, seed,
    distribution), ``seed``, ``n_points``, ``created`` (UTC, ISO 8601).
``points``
    ``sweep_id``, ``idx`` (UNIQUE per sweep), ``inputs`` (JSON), ``status``
    (``ok`` / ``not_settled`` / ``failed`` / ``lost``), ``metrics`` (JSON, the
    metrics.json contract), key metrics as columns for plain SQL
    (``drain_efficiency``, ``pout_w``, ``pdc_w``, ``peak_vd_v``,
    ``peak_vd_over_vdd``, ``settled``), ``engine`` (what computed the stored metrics: ``estimate``
    or ``ngspice``), ``confirmation`` (a fast point re-run in ngspice: ``confirmed`` within the
    bound, ``flagged`` beyond it and its metrics replaced by ngspice's; else NULL), ``error``,
    ``seconds``, ``attempts``.

``failed`` is the design's verdict (the simulator, the sizing or the validation refused the
point) and is final. ``lost`` means the point was cut short by the machinery (a killed or
crashed worker, a lost scheduler, a cancelled task, a full disk): it has no result, it is run
again on resume, and the row is then replaced by the new attempt; ``attempts`` counts the runs
of the point so far. Stores written before ``lost`` existed are upgraded in place on opening.

Finished points are committed as they reach the coordinator (WAL journal): one at a time, or the
points a pool worker returns together in one transaction (:meth:`SweepStore.together`; a batch of
short points, about a fifth of a second of work), so a killed sweep loses at most the points that
were running and those of the last fifth of a second. Opening the same store with the same
design and variation spec returns the existing sweep id and the points already
stored are skipped; a different design or spec is refused with an error (use
another output folder): one store holds one sweep's points, so a plot or CSV of
the store never mixes two experiments.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import sqlite3
from contextlib import contextmanager
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterator

from netgen.errors import NetgenError, OutputError

__all__ = ["SweepStore", "export_csv", "KEY_COLUMNS", "STORE_NAME"]

STORE_NAME = "sweep.sqlite"
#: the worst part of each kind (netgen.results.stress.stress_summary), in the CSV export
STRESS_COLUMNS = ("stress_cap_v_peak_v", "stress_cap_v_peak_part", "stress_ind_i_peak_a", "stress_ind_i_peak_part",
                  "stress_max_loss_w", "stress_max_loss_part")
#: a confirmed point's relative differences, estimate against ngspice (netgen.studies.fast.disagreement), in the CSV
CONFIRM_COLUMNS = ("confirm_pout_rel", "confirm_efficiency_rel")
#: metrics copied into their own columns
KEY_COLUMNS = ("drain_efficiency", "pae", "pout_w", "pdc_w", "pin_w", "peak_vd_v", "peak_vd_over_vdd", "min_vd_v",
               "peak_id_a", "device_dissipation_w", "pin_avail_w", "gain_transducer_db", "gain_power_db",
               "pin_port_w", "am_pm_deg", "conduction_angle_deg")
#: text columns derived from the metrics (engine_of): which engine computed them, their confirmation
ENGINE_COLUMNS = ("engine", "confirmation")
STATUSES = ("ok", "not_settled", "failed", "lost")
#: statuses of a point with a result (the design's verdict); ``lost`` is not one of them
RESULT_STATUSES = ("ok", "not_settled", "failed")

_POINTS = f"""(
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id),
    idx INTEGER NOT NULL,
    inputs TEXT NOT NULL,
    status TEXT NOT NULL CHECK (status IN ({", ".join(repr(x) for x in STATUSES)})),
    metrics TEXT,
    {", ".join(f"{c} REAL" for c in KEY_COLUMNS)},
    {", ".join(f"{c} TEXT" for c in ENGINE_COLUMNS)},
    settled INTEGER,
    error TEXT,
    seconds REAL,
    attempts INTEGER NOT NULL DEFAULT 1,
    UNIQUE (sweep_id, idx)
)"""

_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS sweeps (
    id INTEGER PRIMARY KEY,
    design_digest TEXT NOT NULL,
    design_toml TEXT NOT NULL,
    spec TEXT NOT NULL,
    seed INTEGER,
    n_points INTEGER NOT NULL,
    created TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS points {_POINTS};
"""


#: the columns each table must have (a foreign file with the same table names is refused)
_COLUMNS = {
    "sweeps": ("id", "design_digest", "design_toml", "spec", "seed", "n_points", "created"),
    "points": ("sweep_id", "idx", "inputs", "status", "metrics", "settled", "error", "seconds"),
}


def _db_errors(method):
    """SQLite errors of a store method become one OutputError naming the file."""
    import functools

    @functools.wraps(method)
    def wrapper(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except sqlite3.DatabaseError as exc:
            raise self._corrupt(f"cannot be read ({exc})") from None

    return wrapper


class SweepStore:
    """A sweep store on disk. Use as a context manager or call :meth:`close`.

    Only the coordinating process writes (workers return results to it), so one
    connection suffices; WAL lets a reader (e.g. a plot or an SQL shell) look
    at the file while a sweep runs.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.con = None
        self._deferred = 0  # > 0 inside together(): record() leaves the commit to it
        made_folder = not self.path.parent.exists()
        made_file = not self.path.exists()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self.con = sqlite3.connect(str(self.path), timeout=30.0)
            self.con.execute("PRAGMA journal_mode=WAL")
            self.con.execute("PRAGMA synchronous=NORMAL")
            self.con.executescript(_SCHEMA)
            self._check_schema()  # before anything is changed: a foreign file is refused as it is
            # a store written before a key column existed gets it (NULL for its points; the metrics JSON has them)
            have = {row[1] for row in self.con.execute("PRAGMA table_info(points)")}
            for col in KEY_COLUMNS:
                if col not in have:
                    self.con.execute(f"ALTER TABLE points ADD COLUMN {col} REAL")
            if any(col not in have for col in ENGINE_COLUMNS):
                self._add_engine_columns(have)
            self.con.commit()
            _upgrade(self.con)
        except (OutputError, sqlite3.DatabaseError, OSError, _BadRow) as exc:
            self._undo(made_file, made_folder)  # a full disk leaves no empty store or folder behind
            if isinstance(exc, OutputError):
                raise
            if isinstance(exc, _BadRow):
                raise self._corrupt(f"point {exc.args[0]} has no inputs or an unknown status") from None
            if isinstance(exc, sqlite3.DatabaseError):
                if _is_full(exc):
                    raise self._full_error() from None
                raise OutputError(f"{self.path}: cannot open the sweep store ({exc}); remove it or choose another "
                                  "output folder.") from None
            raise OutputError(f"{self.path}: cannot create the sweep store ({exc.strerror}); choose another output folder.") from None

    def _add_engine_columns(self, have: set) -> None:
        """Add ``engine`` and ``confirmation`` to a store written before them, filled from each
        point's metrics JSON (:func:`engine_of`)."""
        for col in ENGINE_COLUMNS:
            if col not in have:
                self.con.execute(f"ALTER TABLE points ADD COLUMN {col} TEXT")
        rows = self.con.execute("SELECT rowid, metrics FROM points WHERE metrics IS NOT NULL").fetchall()
        for rowid, text in rows:
            try:
                metrics = json.loads(text)
            except (TypeError, ValueError):
                continue  # a damaged row is reported when it is read
            if isinstance(metrics, dict):
                self.con.execute("UPDATE points SET engine = ?, confirmation = ? WHERE rowid = ?",
                                 (*engine_of(metrics), rowid))

    def _undo(self, made_file: bool, made_folder: bool) -> None:
        """Close, and remove what this failed open created (the store file, its journals, the folder)."""
        try:
            if self.con is not None:
                self.con.close()
        except sqlite3.Error:
            pass
        if made_file:
            for suffix in ("", "-wal", "-shm", "-journal"):
                try:
                    os.unlink(f"{self.path}{suffix}")
                except OSError:
                    pass
        if made_folder:
            try:
                self.path.parent.rmdir()
            except OSError:
                pass

    def _check_schema(self) -> None:
        """Refuse a file whose tables are not this store's (another program, another version)."""
        for table, wanted in _COLUMNS.items():
            have = {r[1] for r in self.con.execute(f"PRAGMA table_info({table})")}
            missing = [c for c in wanted if c not in have]
            if missing:
                raise OutputError(f"{self.path}: is not a pashape sweep store (table '{table}' has no column "
                                  f"'{missing[0]}'); choose another output folder or remove the file.")

    def _corrupt(self, what: str) -> OutputError:
        return OutputError(f"{self.path}: {what}; the store is damaged or was written by another program, "
                           "so choose another output folder (or remove the file to start again).")

    def __enter__(self) -> "SweepStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        self.con.close()

    # ------------------------------------------------------------ sweeps

    @_db_errors
    def open_sweep(self, design_digest: str, design_toml: str, spec: dict, n_points: int,
                   seed: int | None = None) -> int:
        """The sweep id for this design and spec: the stored one, or a new one in an empty store.

        Raises
        ------
        OutputError
            When the store already holds a sweep of another design or variation spec.
        """
        spec_json = json.dumps(spec, sort_keys=True)
        row = self.con.execute("SELECT id, design_digest, spec, n_points FROM sweeps ORDER BY id").fetchone()
        if row is not None:
            sid, digest, old_spec, old_n = row
            if digest != design_digest:
                raise OutputError(
                    f"{self.path}: holds a sweep of a different design (the design file changed since it started); "
                    "choose another output folder with -o, or restore the design to resume."
                )
            if old_spec != spec_json or old_n != n_points:
                raise OutputError(
                    f"{self.path}: holds a sweep with different variations (--vary/--vswr/--tolerance/--samples/--seed/--dist); "
                    "choose another output folder with -o, or repeat the original options to resume."
                )
            return int(sid)
        with self._writing("start the sweep"):
            cur = self.con.execute(
                "INSERT INTO sweeps (design_digest, design_toml, spec, seed, n_points, created) VALUES (?, ?, ?, ?, ?, ?)",
                (design_digest, design_toml, spec_json, seed, int(n_points),
                 datetime.now(timezone.utc).isoformat(timespec="seconds")),
            )
            self.con.commit()
        return int(cur.lastrowid)

    @_db_errors
    def sweep_info(self, sweep_id: int | None = None) -> dict:
        """The sweep row as a dict (``spec`` parsed); the first sweep when ``sweep_id`` is None."""
        q = "SELECT id, design_digest, design_toml, spec, seed, n_points, created FROM sweeps"
        row = (self.con.execute(q + " ORDER BY id").fetchone() if sweep_id is None
               else self.con.execute(q + " WHERE id = ?", (sweep_id,)).fetchone())
        if row is None:
            raise OutputError(f"{self.path}: holds no sweep; run 'pashape sweep' with -o pointing here first.")
        keys = ("id", "design_digest", "design_toml", "spec", "seed", "n_points", "created")
        out = dict(zip(keys, row))
        try:
            out["spec"] = json.loads(out["spec"])
        except (TypeError, ValueError):
            raise self._corrupt(f"sweep {out['id']} has an unreadable spec") from None
        if not isinstance(out["spec"], dict) or not isinstance(out["n_points"], int):
            raise self._corrupt(f"sweep {out['id']} has a spec or point count of the wrong kind")
        return out

    # ------------------------------------------------------------ points

    @_db_errors
    def done_indices(self, sweep_id: int, max_attempts: int | None = None) -> set[int]:
        """Indices not to run again: points with a result (``ok``, ``not_settled``, ``failed``)
        and, given ``max_attempts``, points ``lost`` after that many attempts."""
        q = f"SELECT idx FROM points WHERE sweep_id = ? AND (status IN {RESULT_STATUSES!r}"
        args: tuple = (sweep_id,)
        if max_attempts is not None:
            q += " OR attempts >= ?"
            args += (int(max_attempts),)
        return {r[0] for r in self.con.execute(q + ")", args)}

    @_db_errors
    def lost_attempts(self, sweep_id: int) -> dict[int, int]:
        """``{idx: attempts}`` of the points stored as ``lost``."""
        return dict(self.con.execute("SELECT idx, attempts FROM points WHERE sweep_id = ? AND status = 'lost'",
                                     (sweep_id,)))

    @_db_errors
    def record(self, sweep_id: int, idx: int, inputs: dict, status: str, metrics: dict | None,
               error: str | None, seconds: float) -> bool:
        """Store one finished attempt of a point and commit (inside :meth:`together`: when it ends).

        A new point is inserted with ``attempts`` 1; a point stored as ``lost`` is replaced by the
        new attempt (``attempts`` + 1); a point with a result is kept as is (returns False).

        Raises
        ------
        OutputError
            When the store cannot be written (a full disk among others); what was stored
            before stays stored and consistent (the failed transaction is rolled back).
        """
        if status not in STATUSES:
            raise ValueError(f"status {status!r} not one of {STATUSES}")
        m = metrics or {}
        keys = [_num(m.get(c)) for c in KEY_COLUMNS]
        settled = None if metrics is None else int(bool(m.get("settled")))
        cols = ["inputs", "status", "metrics", *KEY_COLUMNS, *ENGINE_COLUMNS, "settled", "error", "seconds"]
        with self._writing(f"store point {idx}"):
            cur = self.con.execute(
                f"INSERT INTO points (sweep_id, idx, {', '.join(cols)}) VALUES ({', '.join('?' * (2 + len(cols)))}) "
                f"ON CONFLICT (sweep_id, idx) DO UPDATE SET {', '.join(f'{c} = excluded.{c}' for c in cols)}, "
                "attempts = points.attempts + 1 WHERE points.status = 'lost'",
                (sweep_id, int(idx), json.dumps(inputs, sort_keys=True), status,
                 None if metrics is None else json.dumps(metrics, sort_keys=True), *keys,
                 *(engine_of(metrics) if metrics is not None else (None, None)), settled, error,
                 float(seconds)),
            )
            if not self._deferred:
                self.con.commit()
        return cur.rowcount == 1

    @contextmanager
    def together(self):
        """Points recorded inside are committed in one transaction when the block ends, also when
        it ends with an error (what was recorded stays); a failed commit rolls them all back and
        raises OutputError (they have no result then, and run again on resume)."""
        self._deferred += 1
        try:
            yield self
        finally:
            self._deferred -= 1
            if not self._deferred:
                with self._writing("store points"):
                    self.con.commit()

    @contextmanager
    def _writing(self, what: str):
        """Turn a failed write into one OutputError, after rolling the transaction back."""
        try:
            yield
        except sqlite3.DatabaseError as exc:
            try:
                self.con.rollback()
            except sqlite3.DatabaseError:
                pass
            if _is_full(exc):
                raise self._full_error() from None
            raise OutputError(f"{self.path}: cannot {what} ({exc}); the points stored so far are kept; "
                              "fix the cause and run the same command to resume.") from None

    def _full_error(self) -> OutputError:
        try:
            n = self.con.execute("SELECT COUNT(*) FROM points WHERE status != 'lost'").fetchone()[0]
            kept = f"the {n} point(s) stored so far are kept"
        except sqlite3.DatabaseError:
            kept = "the points stored so far are kept"
        return OutputError(f"{self.path}: the disk is full; {kept}; free some space and run the same command to resume.")

    def rows(self, sweep_id: int) -> Iterator[dict]:
        """Stored points in index order: ``idx``, ``inputs``, ``status``, ``metrics``, ``error``,
        ``seconds``, ``attempts``."""
        try:
            cur = self.con.execute(
                "SELECT idx, inputs, status, metrics, error, seconds, attempts FROM points WHERE sweep_id = ? "
                "ORDER BY idx",
                (sweep_id,),
            )
            for row in cur:
                yield self._row(*row)
        except sqlite3.DatabaseError as exc:
            raise self._corrupt(f"cannot be read ({exc})") from None

    def _row(self, idx, inputs, status, metrics, error, seconds, attempts=1) -> dict:
        """One stored point, checked: a row another program wrote or a damaged one is an OutputError."""
        where = f"point {idx}"
        if not isinstance(idx, int):
            raise self._corrupt(f"a point has the index {idx!r}")
        try:
            inputs = json.loads(inputs)
            metrics = None if metrics is None else json.loads(metrics)
        except (TypeError, ValueError):
            raise self._corrupt(f"{where} holds text that is not JSON (or no inputs)") from None
        if not isinstance(inputs, dict) or not (metrics is None or isinstance(metrics, dict)):
            raise self._corrupt(f"{where} holds inputs or metrics of the wrong kind")
        if status not in STATUSES or not (error is None or isinstance(error, str)):
            raise self._corrupt(f"{where} has the status {str(status)[:20]!r} or an error of the wrong kind")
        if seconds is not None and not isinstance(seconds, (int, float)):
            raise self._corrupt(f"{where} has a run time of the wrong kind")
        if not isinstance(attempts, int):
            raise self._corrupt(f"{where} has an attempt count of the wrong kind")
        return {"idx": idx, "inputs": inputs, "status": status, "metrics": metrics, "error": error,
                "seconds": seconds, "attempts": attempts}

    @_db_errors
    def count(self, sweep_id: int) -> dict:
        """Number of stored points per status."""
        out = {s: 0 for s in STATUSES}
        for status, n in self.con.execute(
            "SELECT status, COUNT(*) FROM points WHERE sweep_id = ? GROUP BY status", (sweep_id,)
        ):
            out[status] = n
        return out


def engine_of(metrics: dict) -> tuple[str | None, str | None]:
    """(engine, confirmation) of a point's metrics: ``metrics["engine"]`` (``estimate`` or
    ``ngspice``; None when the metrics do not say: an evaluator given with ``--evaluator``, or a
    point stored before pashape recorded it) and, for a point re-run in ngspice
    (``metrics["confirmation"]``, see netgen.studies.fast.confirm_points), ``flagged`` when it
    disagreed beyond the bound (its metrics are then ngspice's) or ``confirmed``; else None."""
    engine = metrics.get("engine")
    conf = metrics.get("confirmation")
    state = None
    if isinstance(conf, dict):
        state = "flagged" if conf.get("flagged") else "confirmed"
    return (str(engine) if engine else None), state


def _is_full(exc: BaseException) -> bool:
    """True for SQLite's SQLITE_FULL ("database or disk is full")."""
    return getattr(exc, "sqlite_errorcode", None) == sqlite3.SQLITE_FULL or "disk is full" in str(exc)


class _BadRow(Exception):
    """A stored point that no store of ours could have written (``args[0]``: its index)."""


def _upgrade(con: sqlite3.Connection) -> None:
    """Bring a store written before the ``lost`` status and the ``attempts`` column up to date.

    SQLite cannot change a CHECK constraint in place, so the points table is copied into one
    with the current definition, in one transaction (all or nothing).
    """
    row = con.execute("SELECT sql FROM sqlite_master WHERE type = 'table' AND name = 'points'").fetchone()
    if row is None or "'lost'" in row[0]:
        return
    old = [r[1] for r in con.execute("PRAGMA table_info(points)")]
    bad = con.execute("SELECT idx FROM points WHERE sweep_id IS NULL OR idx IS NULL OR inputs IS NULL OR status IS NULL "
                      f"OR status NOT IN {STATUSES!r} LIMIT 1").fetchone()
    if bad is not None:  # such a row would not fit the store's table: say which point, change nothing
        raise _BadRow(bad[0])
    con.execute("BEGIN IMMEDIATE")
    try:
        con.execute("DROP TABLE IF EXISTS points_upgraded")
        con.execute(f"CREATE TABLE points_upgraded {_POINTS}")
        new = {r[1] for r in con.execute("PRAGMA table_info(points_upgraded)")}
        cols = ", ".join(c for c in old if c in new)
        con.execute(f"INSERT INTO points_upgraded ({cols}) SELECT {cols} FROM points")
        con.execute("DROP TABLE points")
        con.execute("ALTER TABLE points_upgraded RENAME TO points")
        con.commit()
    except BaseException:
        con.rollback()
        raise


def _num(v) -> float | None:
    if v is None or isinstance(v, (str, dict, list)):
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def export_csv(db: str | Path, path: str | Path, sweep_id: int | None = None) -> Path:
    """Write one row per stored point to ``path`` (atomically) and return the path.

    Columns: ``idx``, ``status``, ``engine`` (``estimate`` or ``ngspice``: what computed the
    point's metrics), ``confirmation`` (``confirmed`` / ``flagged`` for a fast point re-run in
    ngspice, else empty), one column per varied input (axis values,
    keys set as written when they are not an axis, e.g. ``design.load`` of a
    load circle, sample number, component overrides ``values.<name>``), the key metrics,
    ``h1_dbc`` .. ``hN_dbc``, ``z1_re_ohm``, ``z1_im_ohm`` .. (Z_n presented to the device),
    the worst parts' stress, ``confirm_pout_rel`` and ``confirm_efficiency_rel`` (a confirmed
    point's estimate/ngspice - 1), ``settled``, ``seconds``, ``error``. Inputs are plain SI numbers with the unit in the header
    (``values.tank_c [F]``, ``design.load [ohm]``).
    """
    from netgen.fileio import atomic_write_text

    db = Path(db)
    if not db.is_file():
        raise OutputError(f"{db}: no such sweep store; give the sweep.sqlite of a sweep output folder.")
    with SweepStore(db) as st:
        sid = st.sweep_info(sweep_id)["id"]
        rows = list(st.rows(sid))
    axis_cols: list[str] = []
    set_cols: list[str] = []
    value_cols: list[str] = []
    n_harm = 0
    for r in rows:
        for k in r["inputs"].get("axes", {}):
            if k not in axis_cols:
                axis_cols.append(k)
        for k in r["inputs"].get("set", {}):
            if k not in set_cols and k not in r["inputs"].get("axes", {}):
                set_cols.append(k)
        for k in r["inputs"].get("values", {}):
            if k not in value_cols:
                value_cols.append(k)
        if r["metrics"]:
            n_harm = max(n_harm, len(r["metrics"].get("harmonics") or []))
    units = {k: _unit_of(k, [r["inputs"].get("set", {}).get(k) for r in rows]) for k in (*axis_cols, *set_cols)}
    vunits = {k: _unit_of("", [r["inputs"].get("values", {}).get(k) for r in rows]) for k in value_cols}
    header = (["idx", "status", "engine", "confirmation", *(_head(k, units[k]) for k in (*axis_cols, *set_cols)), "sample",
               *(_head(f"values.{k}", vunits[k]) for k in value_cols),
               *KEY_COLUMNS, *(f"h{n}_dbc" for n in range(1, n_harm + 1)),
               *(f"z{n}_{part}_ohm" for n in range(1, n_harm + 1) for part in ("re", "im")),
               *STRESS_COLUMNS, *CONFIRM_COLUMNS,
               "settled", "seconds", "error"])
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for r in rows:
        m = r["metrics"] or {}
        harm = m.get("harmonics") or []
        engine, confirmation = engine_of(m)
        conf = m.get("confirmation") if isinstance(m.get("confirmation"), dict) else {}
        w.writerow([
            r["idx"], r["status"], engine or "", confirmation or "",
            *(_si_cell(r["inputs"].get("axes", {}).get(k, ""), units[k]) for k in axis_cols),
            *(_si_cell(r["inputs"].get("set", {}).get(k, ""), units[k]) for k in set_cols),
            "" if r["inputs"].get("sample") is None else r["inputs"]["sample"],
            *(_si_cell(r["inputs"].get("values", {}).get(k, ""), vunits[k]) for k in value_cols),
            *(_cell(m.get(c)) for c in KEY_COLUMNS),
            *(_cell(harm[n]["pload_dbc"]) if n < len(harm) else "" for n in range(n_harm)),
            *(_cell(harm[n].get(f"z_{part}_ohm")) if n < len(harm) else ""
              for n in range(n_harm) for part in ("re", "im")),
            *(m.get(c) or "" if c.endswith("_part") else _cell(m.get(c)) for c in STRESS_COLUMNS),
            *(_cell(conf.get(c[len("confirm_"):])) for c in CONFIRM_COLUMNS),
            "" if not r["metrics"] else int(bool(m.get("settled"))),
            "" if r["seconds"] is None else f"{r['seconds']:.3f}", r["error"] or "",
        ])
    return atomic_write_text(path, buf.getvalue())


#: units a stored input may be written in (the design keys' and the components')
_UNITS = ("H", "F", "ohm", "s", "V", "A", "Hz", "W", "deg", "dB")


def _unit_of(key: str, texts: list) -> str:
    """The SI unit of an input column: from the design key's schema entry, else from its texts."""
    from netgen.design import SCHEMA

    section, _, name = key.partition(".")
    spec = SCHEMA.get(section, {}).get(name)
    if spec is not None and spec.unit not in ("str", "bool", "int", "values", "pins", ""):
        return spec.unit
    for text in texts:
        if isinstance(text, str):
            for unit in _UNITS:
                if _parse(text, unit) is not None:
                    return unit
    return ""


def _parse(text, unit: str) -> float | None:
    from netgen.design import parse_quantity

    try:
        return parse_quantity(text, unit, "sweep input")
    except (ValueError, NetgenError):
        return None


def _head(name: str, unit: str) -> str:
    """A column header with its unit: ``values.tank_c [F]`` (cells are plain SI numbers)."""
    return f"{name} [{unit}]" if unit else name


def _si_cell(value, unit: str) -> str:
    """An input as a plain SI number (text with a unit parsed, ``7.9 pF`` -> ``7.9e-12``)."""
    if value is None or value == "":
        return ""
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return repr(float(value))
    if unit:
        f = _parse(value, unit)
        if f is not None:
            return repr(f)
    return str(value)


def _cell(v) -> str:
    f = _num(v)
    return "" if f is None else repr(f)
