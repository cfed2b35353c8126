"""The sweep results store: one SQLite file (``<out>/sweep.sqlite``), resumable.

Tables
------
``sweeps``
    ``id``, ``design_digest``, ``design_toml`` (the base design document),
    ``spec`` (canonical JSON of the variations, tolerances, samples, seed,
    distribution), ``seed``, ``n_points``, ``created`` (UTC, ISO 8601).
``points``
    ``sweep_id``, ``idx`` (UNIQUE per sweep), ``inputs`` (JSON), ``status``
    (``ok`` / ``not_settled`` / ``failed``), ``metrics`` (JSON, the
    metrics.json contract), key metrics as columns for plain SQL
    (``drain_efficiency``, ``pout_w``, ``pdc_w``, ``peak_vd_v``,
    ``peak_vd_over_vdd``, ``settled``), ``error``, ``seconds``.

Each finished point is committed at once (WAL journal), so a killed sweep loses
at most the points that were running. Opening the same store with the same
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
import sqlite3
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterator

from netgen.errors import OutputError

__all__ = ["SweepStore", "export_csv", "KEY_COLUMNS", "STORE_NAME"]

STORE_NAME = "sweep.sqlite"
#: the worst part of each kind (netgen.results.stress.stress_summary), in the CSV export
STRESS_COLUMNS = ("stress_cap_v_peak_v", "stress_cap_v_peak_part", "stress_ind_i_peak_a", "stress_ind_i_peak_part",
                  "stress_max_loss_w", "stress_max_loss_part")
#: metrics copied into their own columns
KEY_COLUMNS = ("drain_efficiency", "pout_w", "pdc_w", "peak_vd_v", "peak_vd_over_vdd")
STATUSES = ("ok", "not_settled", "failed")

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
CREATE TABLE IF NOT EXISTS points (
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id),
    idx INTEGER NOT NULL,
    inputs TEXT NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('ok', 'not_settled', 'failed')),
    metrics TEXT,
    {", ".join(f"{c} REAL" for c in KEY_COLUMNS)},
    settled INTEGER,
    error TEXT,
    seconds REAL,
    UNIQUE (sweep_id, idx)
);
"""


class SweepStore:
    """A sweep store on disk. Use as a context manager or call :meth:`close`.

    Only the coordinating process writes (workers return results to it), so one
    connection suffices; WAL lets a reader (e.g. a plot or an SQL shell) look
    at the file while a sweep runs.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self.con = sqlite3.connect(str(self.path), timeout=30.0)
            self.con.execute("PRAGMA journal_mode=WAL")
            self.con.execute("PRAGMA synchronous=NORMAL")
            self.con.executescript(_SCHEMA)
            self.con.commit()
        except sqlite3.DatabaseError as exc:
            raise OutputError(f"{self.path}: cannot open the sweep store ({exc}); remove it or choose another output folder.") from None
        except OSError as exc:
            raise OutputError(f"{self.path}: cannot create the sweep store ({exc.strerror}); choose another output folder.") from None

    def __enter__(self) -> "SweepStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        self.con.close()

    # ------------------------------------------------------------ sweeps

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
        cur = self.con.execute(
            "INSERT INTO sweeps (design_digest, design_toml, spec, seed, n_points, created) VALUES (?, ?, ?, ?, ?, ?)",
            (design_digest, design_toml, spec_json, seed, int(n_points),
             datetime.now(timezone.utc).isoformat(timespec="seconds")),
        )
        self.con.commit()
        return int(cur.lastrowid)

    def sweep_info(self, sweep_id: int | None = None) -> dict:
        """The sweep row as a dict (``spec`` parsed); the first sweep when ``sweep_id`` is None."""
        q = "SELECT id, design_digest, design_toml, spec, seed, n_points, created FROM sweeps"
        row = (self.con.execute(q + " ORDER BY id").fetchone() if sweep_id is None
               else self.con.execute(q + " WHERE id = ?", (sweep_id,)).fetchone())
        if row is None:
            raise OutputError(f"{self.path}: holds no sweep; run 'netgen sweep' with -o pointing here first.")
        keys = ("id", "design_digest", "design_toml", "spec", "seed", "n_points", "created")
        out = dict(zip(keys, row))
        out["spec"] = json.loads(out["spec"])
        return out

    # ------------------------------------------------------------ points

    def done_indices(self, sweep_id: int) -> set[int]:
        """Indices of the points already stored (any status)."""
        return {r[0] for r in self.con.execute("SELECT idx FROM points WHERE sweep_id = ?", (sweep_id,))}

    def record(self, sweep_id: int, idx: int, inputs: dict, status: str, metrics: dict | None,
               error: str | None, seconds: float) -> bool:
        """Store one finished point and commit. Returns False if ``idx`` was already stored (kept as is)."""
        if status not in STATUSES:
            raise ValueError(f"status {status!r} not one of {STATUSES}")
        m = metrics or {}
        keys = [_num(m.get(c)) for c in KEY_COLUMNS]
        settled = None if metrics is None else int(bool(m.get("settled")))
        cur = self.con.execute(
            f"INSERT OR IGNORE INTO points (sweep_id, idx, inputs, status, metrics, {', '.join(KEY_COLUMNS)}, "
            f"settled, error, seconds) VALUES ({', '.join('?' * (8 + len(KEY_COLUMNS)))})",
            (sweep_id, int(idx), json.dumps(inputs, sort_keys=True), status,
             None if metrics is None else json.dumps(metrics, sort_keys=True), *keys, settled, error,
             float(seconds)),
        )
        self.con.commit()
        return cur.rowcount == 1

    def rows(self, sweep_id: int) -> Iterator[dict]:
        """Stored points in index order: ``idx``, ``inputs``, ``status``, ``metrics``, ``error``, ``seconds``."""
        cur = self.con.execute(
            "SELECT idx, inputs, status, metrics, error, seconds FROM points WHERE sweep_id = ? ORDER BY idx",
            (sweep_id,),
        )
        for idx, inputs, status, metrics, error, seconds in cur:
            yield {"idx": idx, "inputs": json.loads(inputs), "status": status,
                   "metrics": None if metrics is None else json.loads(metrics),
                   "error": error, "seconds": seconds}

    def count(self, sweep_id: int) -> dict:
        """Number of stored points per status."""
        out = {s: 0 for s in STATUSES}
        for status, n in self.con.execute(
            "SELECT status, COUNT(*) FROM points WHERE sweep_id = ? GROUP BY status", (sweep_id,)
        ):
            out[status] = n
        return out


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

    Columns: ``idx``, ``status``, one column per varied input (axis values,
    keys set as written when they are not an axis, e.g. ``design.load`` of a
    load circle, sample number, component overrides ``values.<name>``), the key metrics,
    ``h1_dbc`` .. ``hN_dbc``, ``settled``, ``seconds``, ``error``.
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
    header = (["idx", "status", *axis_cols, *set_cols, "sample", *(f"values.{k}" for k in value_cols),
               *KEY_COLUMNS, *(f"h{n}_dbc" for n in range(1, n_harm + 1)), *STRESS_COLUMNS,
               "settled", "seconds", "error"])
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for r in rows:
        m = r["metrics"] or {}
        harm = m.get("harmonics") or []
        w.writerow([
            r["idx"], r["status"],
            *(r["inputs"].get("axes", {}).get(k, "") for k in axis_cols),
            *(r["inputs"].get("set", {}).get(k, "") for k in set_cols),
            "" if r["inputs"].get("sample") is None else r["inputs"]["sample"],
            *(r["inputs"].get("values", {}).get(k, "") for k in value_cols),
            *(_cell(m.get(c)) for c in KEY_COLUMNS),
            *(_cell(harm[n]["pload_dbc"]) if n < len(harm) else "" for n in range(n_harm)),
            *(m.get(c) or "" if c.endswith("_part") else _cell(m.get(c)) for c in STRESS_COLUMNS),
            "" if not r["metrics"] else int(bool(m.get("settled"))),
            f"{r['seconds']:.3f}", r["error"] or "",
        ])
    return atomic_write_text(path, buf.getvalue())


def _cell(v) -> str:
    f = _num(v)
    return "" if f is None else repr(f)
