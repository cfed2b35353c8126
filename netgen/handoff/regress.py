"""Template regression against golden metrics.

A golden file ``<design>.expect.json`` sits beside ``<design>.toml``. It holds
the metrics a known-good run produced, a tolerance per metric, the pashape
version and the sized-design digest it came from (format in
docs/regression.md). :func:`check_designs` re-runs designs (in a process pool)
and compares; :func:`accept` rewrites goldens after an intended change.
Comparing two designs (``pashape diff``) is :mod:`netgen.handoff.diff`.

Library code: nothing here prints or exits; the CLI (netgen.cli.handoff) and the
pytest plugin (netgen.handoff.pytest_plugin) present the results.
"""

from __future__ import annotations

import json
import math
import multiprocessing
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable

from netgen import __version__
from netgen.errors import DesignError, NetgenError
from netgen.fileio import atomic_write_text

__all__ = [
    "GOLDEN_SUFFIX",
    "GOLDEN_FORMAT",
    "Tolerance",
    "Row",
    "CheckResult",
    "golden_path",
    "find_designs",
    "select_metrics",
    "default_tolerances",
    "make_golden",
    "read_golden",
    "write_golden",
    "compare",
    "run_one",
    "check_designs",
    "accept",
    "format_result",
    "format_summary",
    "format_number",
]

GOLDEN_SUFFIX = ".expect.json"
GOLDEN_FORMAT = "pashape-expect-1"
#: Format tags read as well: the same layout under the name before the rename (its version key
#: was ``netgen_version``).
OLD_GOLDEN_FORMATS = ("netgen-expect-1",)
#: Key of the version that wrote a golden (``netgen_version`` in goldens before the rename).
VERSION_KEY = "pashape_version"
#: Harmonics compared (n = 1..HARMONICS_COMPARED).
HARMONICS_COMPARED = 5
#: Harmonic load power at or below this (dBc) counts as "absent": two such values agree.
DBC_FLOOR = -60.0
#: A harmonic impedance above this multiple of |Z1| counts as "open": two such values agree.
OPEN_FACTOR = 10.0


@dataclass(frozen=True)
class Tolerance:
    """Allowed deviation of one metric: ``|new - golden| <= abs + rel * |golden|``.

    ``floor``: when both values are at or below it they agree (harmonic levels
    lost in numerical noise). ``ceiling``: when both are at or above it they
    agree (an open circuit is an open circuit, whether 3 kohm or 8 kohm).
    """

    abs: float = 0.0
    rel: float = 0.0
    floor: float | None = None
    ceiling: float | None = None

    def allows(self, golden: float, new: float) -> bool:
        if new is None or golden is None or not math.isfinite(new) or not math.isfinite(golden):
            return new == golden  # both missing agree; a NaN never passes
        if self.floor is not None and golden <= self.floor and new <= self.floor:
            return True
        if self.ceiling is not None and golden >= self.ceiling and new >= self.ceiling:
            return True
        return abs(new - golden) <= self.abs + self.rel * abs(golden) + 1e-15

    def describe(self, diff_unit: str = "", level_unit: str = "") -> str:
        """The tolerance as text: the absolute part in ``diff_unit`` (e.g. "dB"), floor and ceiling
        in ``level_unit`` (e.g. "dBc"); without units as plain numbers."""
        du, lu = (f" {diff_unit}" if diff_unit else ""), (f" {level_unit}" if level_unit else "")
        parts = []
        if self.abs:
            parts.append(f"+/-{self.abs:g}{du}")
        if self.rel:
            parts.append(f"+/-{100 * self.rel:g}%")
        text = " ".join(parts) or "exact"
        if self.floor is not None:
            text += f" (<= {self.floor:g}{lu} equal)"
        if self.ceiling is not None:
            text += f" (>= {self.ceiling:.4g}{lu} equal)"
        return text

    def to_json(self) -> dict:
        out = {}
        for key in ("abs", "rel", "floor", "ceiling"):
            value = getattr(self, key)
            if value is not None and (key in ("floor", "ceiling") or value != 0.0):
                out[key] = value
        return out


@dataclass(frozen=True)
class Row:
    """One compared metric."""

    metric: str
    golden: float | None
    new: float | None
    tolerance: Tolerance
    ok: bool

    @property
    def deviation(self) -> str:
        if self.golden is None or self.new is None:
            return "missing"
        if not (math.isfinite(self.golden) and math.isfinite(self.new)):
            return "n/a"
        d = self.new - self.golden
        if self.metric.endswith("_dbc"):  # levels in dB: their difference is in dB, a percentage means nothing
            return f"{d:+.3g} dB"
        text = f"{d:+.4g}"
        if self.golden != 0:
            text += f" ({100 * d / abs(self.golden):+.2f}%)"
        return text


@dataclass(frozen=True)
class CheckResult:
    """Outcome of checking one design against its golden file."""

    design_path: Path
    golden_path: Path
    rows: tuple[Row, ...] = ()
    settled: bool = True
    error: str | None = None
    notes: tuple[str, ...] = ()
    new_golden: dict | None = field(default=None, compare=False, repr=False)

    @property
    def ok(self) -> bool:
        return self.error is None and self.settled and all(r.ok for r in self.rows)

    @property
    def failed_metrics(self) -> list[str]:
        return [r.metric for r in self.rows if not r.ok]


# ---------------------------------------------------------------- goldens


def golden_path(design_path: str | Path) -> Path:
    """``sims/x.toml`` -> ``sims/x.expect.json``."""
    p = Path(design_path)
    return p.with_name(p.name[: -len(".toml")] + GOLDEN_SUFFIX if p.name.endswith(".toml") else p.name + GOLDEN_SUFFIX)


def find_designs(paths: Iterable[str | Path], *, include_new: bool = False) -> list[Path]:
    """Design files to check.

    A folder contributes every ``*.toml`` that has a golden beside it; a
    ``.toml`` file is taken as it is (it needs a golden unless
    ``include_new``); a ``.expect.json`` file stands for its design.

    Raises
    ------
    DesignError
        A path that does not exist, a golden without its design, or a design
        without a golden (unless ``include_new``).
    """
    out: list[Path] = []
    for raw in paths:
        p = Path(raw)
        if not p.exists():
            raise DesignError(f"{p}: no such file or folder; give design files (*.toml) or folders holding them.")
        if p.is_dir():
            out += sorted(t for t in p.glob("*.toml") if golden_path(t).is_file())
            continue
        if p.name.endswith(GOLDEN_SUFFIX):
            design = p.with_name(p.name[: -len(GOLDEN_SUFFIX)] + ".toml")
            if not design.is_file():
                raise DesignError(f"{p}: golden file without its design {design.name}; restore the design or delete the golden.")
            out.append(design)
        elif p.suffix == ".toml":
            if not include_new and not golden_path(p).is_file():
                raise DesignError(f"{p}: no golden file {golden_path(p).name}; create it with 'pashape check --accept {p}'.")
            out.append(p)
        else:
            raise DesignError(f"{p}: not a design (*.toml) or golden (*{GOLDEN_SUFFIX}) file.")
    seen, unique = set(), []
    for p in out:
        key = p.resolve()
        if key not in seen:
            seen.add(key)
            unique.append(p)
    return unique


def _z_mag(h: dict) -> float:
    return math.hypot(float(h["z_re_ohm"]), float(h["z_im_ohm"]))


def select_metrics(metrics: dict, n_max: int = HARMONICS_COMPARED) -> dict[str, float]:
    """The compared numbers of a metrics dict (the metrics.json contract), flat.

    ``drain_efficiency`` (0..1), ``pout_w``, ``pdc_w``, ``pload_total_w``,
    ``peak_vd_over_vdd``, ``peak_id_a``, ``h<n>_dbc`` (harmonic load power,
    n = 2..n_max) and ``z<n>_ohm`` (``|Z_n|`` at the drain, n = 1..n_max).
    """
    out: dict[str, float] = {}
    for key in ("drain_efficiency", "pout_w", "pdc_w", "pload_total_w", "peak_vd_over_vdd", "peak_id_a"):
        if metrics.get(key) is not None:
            out[key] = float(metrics[key])
    for h in metrics.get("harmonics", []):
        n = int(h["n"])
        if n > n_max:
            continue
        if n >= 2 and h.get("pload_dbc") is not None:
            out[f"h{n}_dbc"] = max(float(h["pload_dbc"]), -300.0)
        if h.get("z_re_ohm") is not None and h.get("z_im_ohm") is not None:
            out[f"z{n}_ohm"] = _z_mag(h)
    return out


def default_tolerances(values: dict[str, float]) -> dict[str, Tolerance]:
    """Default tolerance per selected metric (docs/regression.md explains the choice).

    Efficiency +/- 0.5 points; powers 1 %; peak voltage ratio 1 %; peak current
    2 %; harmonic levels +/- 1 dB, equal below -60 dBc; |Z_n| 2 % + 0.05 ohm,
    equal above 10 |Z_1| (open).
    """
    z1 = values.get("z1_ohm")
    out = {}
    for key in values:
        if key == "drain_efficiency":
            out[key] = Tolerance(abs=0.005)
        elif key in ("pout_w", "pdc_w", "pload_total_w", "peak_vd_over_vdd"):
            out[key] = Tolerance(rel=0.01)
        elif key == "peak_id_a":
            out[key] = Tolerance(rel=0.02)
        elif key.endswith("_dbc"):
            out[key] = Tolerance(abs=1.0, floor=DBC_FLOOR)
        elif key.startswith("z") and key.endswith("_ohm"):
            ceiling = OPEN_FACTOR * z1 if (z1 and key != "z1_ohm") else None
            out[key] = Tolerance(rel=0.02, abs=0.05, ceiling=ceiling)
        else:
            out[key] = Tolerance(rel=0.01)
    return out


def make_golden(design_path: Path, metrics: dict, digest: str, old: dict | None = None) -> dict:
    """A golden document from a run; tolerances edited by hand in ``old`` are kept."""
    values = select_metrics(metrics)
    tols = default_tolerances(values)
    old_metrics = (old or {}).get("metrics", {})
    entries = {}
    for key, value in values.items():
        tol = tols[key].to_json()
        if key in old_metrics and isinstance(old_metrics[key], dict):
            kept = {k: v for k, v in old_metrics[key].items() if k in ("abs", "rel", "floor", "ceiling")}
            if kept:
                tol = kept
        entries[key] = {"value": value, **tol}
    return {
        "format": GOLDEN_FORMAT,
        "design_file": Path(design_path).name,
        VERSION_KEY: __version__,
        "sized_digest": digest,
        "settled": bool(metrics.get("settled", False)),
        "cycles": metrics.get("cycles"),
        "metrics": entries,
    }


def read_golden(path: str | Path) -> dict:
    """Read and validate a golden file.

    Raises
    ------
    DesignError
        Naming the file and what is wrong with it.
    """
    path = Path(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DesignError(f"{path}: golden file missing; create it with 'pashape check --accept <design.toml>'.") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise DesignError(f"{path}: not a readable golden file ({exc}); regenerate it with 'pashape check --accept'.") from None
    if not isinstance(doc, dict) or doc.get("format") not in (GOLDEN_FORMAT, *OLD_GOLDEN_FORMATS) \
            or not isinstance(doc.get("metrics"), dict):
        raise DesignError(f"{path}: not a golden file of format '{GOLDEN_FORMAT}'; regenerate it with 'pashape check --accept'.")
    for key, entry in doc["metrics"].items():
        if not isinstance(entry, dict) or "value" not in entry:
            raise DesignError(f"{path}: metrics.{key} needs a 'value' (and optional abs, rel, floor, ceiling).")
        for k in ("value", "abs", "rel", "floor", "ceiling"):
            if k in entry and entry[k] is not None and not isinstance(entry[k], (int, float)):
                raise DesignError(f"{path}: metrics.{key}.{k} must be a number.")
    if doc["format"] != GOLDEN_FORMAT:  # read the older layout as the current one
        doc = {**doc, "format": GOLDEN_FORMAT}
        if "netgen_version" in doc:
            doc[VERSION_KEY] = doc.pop("netgen_version")
    return doc


def write_golden(path: str | Path, doc: dict) -> Path:
    """Write a golden file atomically (stable key order, one metric a line)."""
    return atomic_write_text(path, json.dumps(doc, indent=2) + "\n")


def _tolerance(entry: dict) -> Tolerance:
    return Tolerance(
        abs=float(entry.get("abs", 0.0) or 0.0),
        rel=float(entry.get("rel", 0.0) or 0.0),
        floor=entry.get("floor"),
        ceiling=entry.get("ceiling"),
    )


def compare(golden: dict, metrics: dict) -> tuple[Row, ...]:
    """Compare a run's metrics with a golden document, one :class:`Row` per golden metric."""
    new = select_metrics(metrics)
    rows = []
    for key, entry in golden["metrics"].items():
        value = new.get(key)
        tol = _tolerance(entry)
        ok = value is not None and tol.allows(float(entry["value"]), value)
        rows.append(Row(key, float(entry["value"]), value, tol, ok))
    return tuple(rows)


# ---------------------------------------------------------------- running


def run_one(design_path: str) -> dict:
    """Run one design (in a worker process) and return plain data.

    Returns ``{"metrics": dict, "digest": str, "error": None}`` or
    ``{"error": "message"}`` for an error the user can cause or a simulator failure.
    """
    from netgen.design import load_design
    from netgen.pipeline import run_design

    try:
        design = load_design(design_path)
        result = run_design(design, None, plots=False)
        return {"metrics": result.metrics, "digest": result.sized.digest(), "error": None}
    except NetgenError as exc:
        return {"error": f"{type(exc).__name__}: {exc}"}


def _result(design: Path, run: dict, accept: bool) -> CheckResult:
    gpath = golden_path(design)
    old = read_golden(gpath) if gpath.is_file() else None
    if run.get("error"):
        return CheckResult(design, gpath, error=run["error"])
    metrics = run["metrics"]
    settled = bool(metrics.get("settled", False))
    notes = []
    if not settled:
        notes.append(f"the run did not settle in {metrics.get('cycles')} cycles; a run that does not settle fails the check")
    rows: tuple[Row, ...] = ()
    if old is not None:
        rows = compare(old, metrics)
        if old.get("sized_digest") != run["digest"]:
            notes.append(f"sized design changed since the golden (digest {old.get('sized_digest')} -> {run['digest']})")
        if old.get(VERSION_KEY) != __version__:
            notes.append(f"golden made by version {old.get(VERSION_KEY)}, this is {__version__}")
    else:
        notes.append("no golden yet")
    new_golden = make_golden(design, metrics, run["digest"], old) if accept else None
    return CheckResult(design, gpath, rows, settled, None, tuple(notes), new_golden)


def check_designs(
    paths: Iterable[str | Path],
    *,
    jobs: int | None = None,
    accept: bool = False,
    on_done: Callable[[CheckResult], None] | None = None,
    runner: Callable[[str], dict] = run_one,
) -> list[CheckResult]:
    """Re-run designs and compare each with its golden file.

    Parameters
    ----------
    paths : files or folders (see :func:`find_designs`).
    jobs : int, optional
        Worker processes (default: one per core, at most one per design);
        1 runs in this process.
    accept : bool
        Also build the new golden documents (``CheckResult.new_golden``);
        :func:`accept` writes them. Designs without a golden are then allowed.
    on_done : callable, optional
        Called with each result as it completes (progress display).
    runner : callable
        ``design path -> run dict`` (:func:`run_one`); must be picklable.

    Returns
    -------
    list of CheckResult, in the order of the designs.
    """
    designs = find_designs(paths, include_new=accept)
    for d in designs:  # fail early on a broken golden (a user error), before any simulation
        if golden_path(d).is_file():
            read_golden(golden_path(d))
    if not designs:
        return []
    workers = jobs or min(len(designs), multiprocessing.cpu_count() or 1)
    results: dict[int, CheckResult] = {}
    if workers <= 1 or len(designs) == 1:
        for i, d in enumerate(designs):
            results[i] = _result(d, runner(str(d)), accept)
            if on_done:
                on_done(results[i])
    else:
        ctx = multiprocessing.get_context("spawn")  # a fresh interpreter: no inherited simulator state
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
            futures = {pool.submit(runner, str(d)): i for i, d in enumerate(designs)}
            from concurrent.futures import as_completed

            for fut in as_completed(futures):
                i = futures[fut]
                try:
                    run = fut.result()
                except Exception as exc:  # a crashed worker is a failed check, reported, not hidden
                    run = {"error": f"worker failed: {type(exc).__name__}: {exc}"}
                results[i] = _result(designs[i], run, accept)
                if on_done:
                    on_done(results[i])
    return [results[i] for i in range(len(designs))]


def accept(results: Iterable[CheckResult]) -> list[str]:
    """Write the new goldens of ``results`` (from ``check_designs(..., accept=True)``).

    Designs that failed to run or did not settle are not accepted. Returns one
    line per design saying what changed.
    """
    lines = []
    for r in results:
        name = r.design_path.name
        if r.error:
            lines.append(f"{name}: not accepted ({r.error})")
            continue
        if not r.settled:
            lines.append(f"{name}: not accepted (the run did not settle)")
            continue
        if r.new_golden is None:
            continue
        changed = [row for row in r.rows if row.new is None or row.golden != row.new]
        if not r.golden_path.is_file():
            lines.append(f"{name}: new golden {r.golden_path.name} ({len(r.new_golden['metrics'])} metrics)")
        elif not changed and all(row.ok for row in r.rows):
            lines.append(f"{name}: unchanged")
        else:
            parts = [f"{row.metric} {row.golden:.6g} -> {row.new:.6g}" if row.new is not None else f"{row.metric} removed"
                     for row in changed]
            lines.append(f"{name}: updated: " + ("; ".join(parts) if parts else "metadata only"))
        write_golden(r.golden_path, r.new_golden)
    return lines


def format_number(x: float | None) -> str:
    return "-" if x is None else f"{x:.6g}"


def format_result(r: CheckResult, *, only_failures: bool = False) -> str:
    """A pass/fail table for one design: metric, golden, new, deviation, tolerance, result."""
    status = "PASS" if r.ok else "FAIL"
    if r.ok and not r.rows and not r.golden_path.is_file():
        status = "NEW "
    head = f"{status}  {r.design_path}"
    lines = [head]
    for note in r.notes:
        lines.append(f"  note: {note}")
    if r.error:
        lines.append(f"  error: {r.error}")
        return "\n".join(lines)
    rows = [row for row in r.rows if not (only_failures and row.ok)]
    if rows:
        table = [("metric", "golden", "new", "deviation", "tolerance", "result")]
        table += [(row.metric, format_number(row.golden), format_number(row.new), row.deviation,
                   row.tolerance.describe(*(("dB", "dBc") if row.metric.endswith("_dbc") else ())),
                   "ok" if row.ok else "FAIL") for row in rows]
        widths = [max(len(t[i]) for t in table) for i in range(6)]
        for t in table:
            lines.append("  " + "  ".join(c.ljust(w) for c, w in zip(t, widths)).rstrip())
    return "\n".join(lines)


def format_summary(results: list[CheckResult]) -> str:
    """One closing line: how many designs passed."""
    failed = [r.design_path.name for r in results if not r.ok]
    text = f"{len(results) - len(failed)} of {len(results)} designs pass"
    if failed:
        text += "; failed: " + ", ".join(failed)
    return text
