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
from functools import partial
from pathlib import Path
from typing import Callable, Iterable

from netgen import __version__
from netgen.errors import DesignError, NetgenError
from netgen.fileio import atomic_write_text

from . import step
from .check_text import format_number, format_result, format_summary, step_lines

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
    ``step_abs``: the half-width is at least this (the metric's unit), widened
    from the measured step dependence (netgen.handoff.step).
    """

    abs: float = 0.0
    rel: float = 0.0
    floor: float | None = None
    ceiling: float | None = None
    step_abs: float = 0.0

    def allows(self, golden: float, new: float) -> bool:
        if new is None or golden is None or not math.isfinite(new) or not math.isfinite(golden):
            return new == golden  # both missing agree; a NaN never passes
        if self.floor is not None and golden <= self.floor and new <= self.floor:
            return True
        if self.ceiling is not None and golden >= self.ceiling and new >= self.ceiling:
            return True
        return abs(new - golden) <= max(self.abs + self.rel * abs(golden), self.step_abs) + 1e-15

    def widened(self, golden: float) -> bool:
        """True when the step-dependence width is the one that applies at ``golden``."""
        return self.step_abs > self.abs + self.rel * abs(golden or 0.0)

    def describe(self, diff_unit: str = "", level_unit: str = "", golden: float | None = None) -> str:
        """The tolerance as text: the absolute part in ``diff_unit`` (e.g. "dB"), floor and ceiling
        in ``level_unit`` (e.g. "dBc"); without units as plain numbers. With ``golden``, a
        step-widened tolerance shows its width and the default it replaces."""
        du, lu = (f" {diff_unit}" if diff_unit else ""), (f" {level_unit}" if level_unit else "")
        parts = []
        if self.abs:
            parts.append(f"+/-{self.abs:g}{du}")
        if self.rel:
            parts.append(f"+/-{100 * self.rel:g}%")
        text = " ".join(parts) or "exact"
        if golden is not None and self.widened(golden):
            text = f"+/-{self.step_abs:.3g}{du} (step; default {text})"
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
    #: why the metric is not compared (not converged in the time step), or None
    excluded: str | None = None
    #: the measured step dependence behind a widened tolerance, or None
    widened: str | None = None

    @property
    def result(self) -> str:
        if self.excluded:
            return "excluded"
        return ("ok" if self.ok else "FAIL") + (" (widened)" if self.widened else "")

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


def make_golden(design_path: Path, metrics: dict, digest: str, old: dict | None = None, *,
                fine_metrics: dict | None = None, points: tuple[int, int] | None = None,
                step_note: str | None = None) -> dict:
    """A golden document from a run; tolerances edited by hand in ``old`` are kept.

    ``fine_metrics``: the same design run at ``points[1]`` points per cycle (``points[0]`` is
    this run's): each metric's step dependence is measured (netgen.handoff.step) and its
    tolerance kept, widened (``step_abs``) or the metric excluded (``excluded``, the reason).
    Without it the step entries of ``old`` are carried over and ``step_note`` (why there is no
    measurement) is recorded.
    """
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
    doc = {
        "format": GOLDEN_FORMAT,
        "design_file": Path(design_path).name,
        VERSION_KEY: __version__,
        "sized_digest": digest,
        "settled": bool(metrics.get("settled", False)),
        "cycles": metrics.get("cycles"),
    }
    if fine_metrics is not None and points is not None:
        measured = step.measure(values, select_metrics(fine_metrics),
                                {k: _tolerance(e) for k, e in entries.items()}, points)
        for key, extra in measured.items():
            entries[key].update(extra)
        doc["step_check"] = {"points_per_cycle": [int(points[0]), int(points[1])]}
    else:
        for key, entry in entries.items():
            entry.update({k: v for k, v in (old_metrics.get(key) or {}).items() if k in step.STEP_KEYS})
        if step_note or (old or {}).get("step_check"):
            doc["step_check"] = {**((old or {}).get("step_check") or {}),
                                 **({"not_measured": step_note} if step_note else {})}
    doc["metrics"] = entries
    return doc


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
        for k in ("value", "abs", "rel", "floor", "ceiling", "step_abs"):
            if k in entry and entry[k] is not None and not isinstance(entry[k], (int, float)):
                raise DesignError(f"{path}: metrics.{key}.{k} must be a number.")
        if "excluded" in entry and not isinstance(entry["excluded"], str):
            raise DesignError(f"{path}: metrics.{key}.excluded must be the reason, as text.")
        if "step" in entry and not isinstance(entry["step"], dict):
            raise DesignError(f"{path}: metrics.{key}.step must be a table (points_per_cycle, fine_value, delta).")
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
        step_abs=float(entry.get("step_abs", 0.0) or 0.0),
    )


def compare(golden: dict, metrics: dict) -> tuple[Row, ...]:
    """Compare a run's metrics with a golden document, one :class:`Row` per golden metric."""
    new = select_metrics(metrics)
    rows = []
    for key, entry in golden["metrics"].items():
        value = new.get(key)
        tol = _tolerance(entry)
        golden_value = float(entry["value"])
        if entry.get("excluded"):
            rows.append(Row(key, golden_value, value, tol, True, excluded=str(entry["excluded"])))
            continue
        ok = value is not None and tol.allows(golden_value, value)
        why = None
        if tol.widened(golden_value):
            record = entry.get("step") if isinstance(entry.get("step"), dict) else None
            why = (step.describe_step(key, golden_value, record) if record and "fine_value" in record
                   else "step dependence (recorded without its measurement)")
            why += f"; tolerance widened to +/-{tol.step_abs:.3g} ({step.STEP_K:g} x the change)"
        rows.append(Row(key, golden_value, value, tol, ok, widened=why))
    return tuple(rows)


# ---------------------------------------------------------------- running


#: largest points per cycle of the step-dependence run (the key's upper limit, design/key_table.py)
POINTS_MAX = 20000


def run_one(design_path: str, points_factor: int = 1) -> dict:
    """Run one design (in a worker process) and return plain data.

    ``points_factor``: run with this many times the design's ``sim.points_per_cycle`` (the
    step-dependence run of an accept, netgen.handoff.step).

    Returns ``{"metrics": dict, "digest": str, "points_per_cycle": int, "error": None}`` or
    ``{"error": "message"}`` for an error the user can cause or a simulator failure.
    """
    from dataclasses import replace

    from netgen.design import load_design
    from netgen.pipeline import run_design

    try:
        design = load_design(design_path)
        if points_factor != 1:
            ppc = min(int(design.sim.points_per_cycle) * int(points_factor), POINTS_MAX)
            design = replace(design, sim=replace(design.sim, points_per_cycle=ppc))
        result = run_design(design, None, plots=False)
        return {"metrics": result.metrics, "digest": result.sized.digest(),
                "points_per_cycle": int(design.sim.points_per_cycle), "error": None}
    except NetgenError as exc:
        return {"error": f"{type(exc).__name__}: {exc}"}


def _fine_golden_inputs(run: dict, fine: dict | None) -> dict:
    """make_golden's step arguments from the two runs of an accept (or why there is no measurement)."""
    if fine is None:
        return {"step_note": "no second run (a runner without one)"}
    if fine.get("error"):
        return {"step_note": f"the run at more points per cycle failed ({fine['error']})"}
    if not fine["metrics"].get("settled", False):
        return {"step_note": "the run at more points per cycle did not settle"}
    p0, p1 = run.get("points_per_cycle"), fine.get("points_per_cycle")
    if not p0 or not p1 or p1 <= p0:
        return {"step_note": "the runs do not say their points per cycle"}
    return {"fine_metrics": fine["metrics"], "points": (int(p0), int(p1))}


def _result(design: Path, run: dict, accept: bool, fine: dict | None = None) -> CheckResult:
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
    new_golden = make_golden(design, metrics, run["digest"], old, **_fine_golden_inputs(run, fine)) if accept else None
    return CheckResult(design, gpath, rows, settled, None, tuple(notes), new_golden)


def check_designs(
    paths: Iterable[str | Path],
    *,
    jobs: int | None = None,
    accept: bool = False,
    on_done: Callable[[CheckResult], None] | None = None,
    runner: Callable[[str], dict] = run_one,
    step_runner: Callable[[str], dict] | None = None,
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
        Each design also runs at ``STEP_FACTOR`` times its points per cycle
        (``step_runner``) to measure the step dependence of every metric.
    on_done : callable, optional
        Called with each result as it completes (progress display).
    runner : callable
        ``design path -> run dict`` (:func:`run_one`); must be picklable.
    step_runner : callable, optional
        The finer run of an accept (default: :func:`run_one` with ``points_factor =
        STEP_FACTOR`` when ``runner`` is :func:`run_one`; none for another runner).

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
    if accept and step_runner is None and runner is run_one:
        step_runner = partial(run_one, points_factor=step.STEP_FACTOR)
    fine_runner = step_runner if accept else None
    workers = jobs or min(len(designs), multiprocessing.cpu_count() or 1)
    results: dict[int, CheckResult] = {}
    if workers <= 1 or len(designs) == 1:
        for i, d in enumerate(designs):
            run = runner(str(d))
            fine = fine_runner(str(d)) if fine_runner and not run.get("error") else None
            results[i] = _result(d, run, accept, fine)
            if on_done:
                on_done(results[i])
    else:
        ctx = multiprocessing.get_context("spawn")  # a fresh interpreter: no inherited simulator state
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
            futures = {pool.submit(runner, str(d)): (i, 0) for i, d in enumerate(designs)}
            if fine_runner:
                futures.update({pool.submit(fine_runner, str(d)): (i, 1) for i, d in enumerate(designs)})
            runs: dict[int, list] = {i: [None, None] for i in range(len(designs))}
            from concurrent.futures import as_completed

            for fut in as_completed(futures):
                i, which = futures[fut]
                try:
                    runs[i][which] = fut.result()
                except Exception as exc:  # a crashed worker is a failed check, reported, not hidden
                    runs[i][which] = {"error": f"worker failed: {type(exc).__name__}: {exc}"}
                run, fine = runs[i]
                if run is None or (fine_runner and fine is None):
                    continue
                results[i] = _result(designs[i], run, accept, fine)
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
        changed = [row for row in r.rows if row.new is None or row.golden is None
                   or abs(row.new - row.golden) > 1e-9 * max(abs(row.golden), 1e-12)]  # not the last digits
        if not r.golden_path.is_file():
            lines.append(f"{name}: new golden {r.golden_path.name} ({len(r.new_golden['metrics'])} metrics)")
        elif not changed and all(row.ok for row in r.rows):
            lines.append(f"{name}: unchanged")
        else:
            parts = [f"{row.metric} {row.golden:.6g} -> {row.new:.6g}" if row.new is not None else f"{row.metric} removed"
                     for row in changed]
            lines.append(f"{name}: updated: " + ("; ".join(parts) if parts else "metadata only"))
        lines += step_lines(r.new_golden)
        write_golden(r.golden_path, r.new_golden)
    return lines
