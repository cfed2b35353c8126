"""Design-to-design comparison: sized components, Ropt and (optionally) metrics of two designs.

Either design may be a path or ``git:REV:path`` (that file as of a revision). Library code:
nothing here prints; ``pashape diff`` (netgen.cli.handoff) presents :func:`format_diff`.
"""

from __future__ import annotations

import subprocess
from dataclasses import dataclass
from pathlib import Path

import tomllib

from netgen.errors import DesignError

from .regress import format_number, select_metrics

__all__ = ["ComponentRow", "DesignDiff", "load_design_spec", "diff_designs", "format_diff"]



@dataclass(frozen=True)
class ComponentRow:
    """One component in either design: values in SI (None when absent)."""

    name: str
    kind: str
    unit: str
    a: float | None
    b: float | None

    @property
    def change_pct(self) -> float | None:
        if self.a is None or self.b is None or self.a == 0:
            return None
        return 100.0 * (self.b - self.a) / abs(self.a)


@dataclass(frozen=True)
class DesignDiff:
    """Two designs compared: sized components, Ropt, and (optionally) metrics."""

    a_label: str
    b_label: str
    ropt_ohm: tuple[float, float]
    components: tuple[ComponentRow, ...]
    metrics: tuple[tuple[str, float | None, float | None], ...] = ()
    settled: tuple[bool, bool] | None = None
    #: every input key (device, network options, supply, sim settings ...) whose value differs:
    #: (dotted key, a as text, b as text)
    inputs: tuple[tuple[str, str, str], ...] = ()


def input_differences(da, db) -> tuple[tuple[str, str, str], ...]:
    """The design keys (``device.vknee``, ``network.capacitor_esr``, ``sim.points_per_cycle`` ...)
    whose validated values differ between two designs, in the order of the key reference; the
    component values are compared separately (``[network.values]`` is left out here)."""
    from netgen.design import SCHEMA, format_quantity

    out = []
    for section, keys in SCHEMA.items():
        for key, spec in keys.items():
            if key in ("values", "name"):
                continue
            owner_a = da if section == "design" else getattr(da, section, None)
            owner_b = db if section == "design" else getattr(db, section, None)
            va, vb = getattr(owner_a, spec.attr, None), getattr(owner_b, spec.attr, None)
            if va == vb:
                continue

            out.append((f"{section}.{key}", _input_text(va, spec.unit, format_quantity),
                        _input_text(vb, spec.unit, format_quantity)))
    return tuple(out)


def _input_text(value, unit: str, format_quantity) -> str:
    """An input value for the diff table: a quantity with its unit, else as written."""
    if isinstance(value, float) and unit not in ("", "int"):
        try:
            return format_quantity(value, unit)
        except (TypeError, ValueError):
            return repr(value)
    return "-" if value is None else str(value)


def load_design_spec(spec: str):
    """Load a design from a path or from ``git:REV:path`` (that file as of revision REV).

    Raises
    ------
    DesignError
        When git cannot produce the file (unknown revision, path not tracked).
    """
    from netgen.design import design_from_dict, load_design

    if not spec.startswith("git:"):
        return load_design(spec)
    try:
        _, rev, path = spec.split(":", 2)
    except ValueError:
        raise DesignError(f"{spec}: write a revision as git:REV:path, e.g. git:HEAD~1:sims/demo.toml.") from None
    p = Path(path)
    folder = p.parent if str(p.parent) else Path(".")
    try:
        proc = subprocess.run(["git", "-C", str(folder), "show", f"{rev}:./{p.name}"],
                              capture_output=True, text=True, check=False)
    except FileNotFoundError:
        raise DesignError(f"{spec}: git is not installed; compare two files instead.") from None
    if proc.returncode != 0:
        msg = proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else "git failed"
        raise DesignError(f"{spec}: git cannot show that file ({msg}); check the revision and path.")
    try:
        doc = tomllib.loads(proc.stdout)
    except tomllib.TOMLDecodeError as exc:
        raise DesignError(f"{spec}: TOML syntax error: {exc}.") from None
    return design_from_dict(doc, source=p.resolve(), where=spec)


def diff_designs(a_spec: str, b_spec: str, *, run: bool = True) -> DesignDiff:
    """Compare two designs: sized component values (% change) and, with ``run``, metrics."""
    from netgen.synthesis import size

    da, db = load_design_spec(a_spec), load_design_spec(b_spec)
    sa, sb = size(da), size(db)
    names = list(sa.components) + [n for n in sb.components if n not in sa.components]
    rows = []
    for n in names:
        ca, cb = sa.components.get(n), sb.components.get(n)
        c = ca or cb
        rows.append(ComponentRow(n, c.kind, c.unit, ca.value if ca else None, cb.value if cb else None))
    metrics: tuple = ()
    settled = None
    if run:
        from netgen.pipeline import run_design

        ma = run_design(da, None, plots=False).metrics
        mb = run_design(db, None, plots=False).metrics
        va, vb = select_metrics(ma), select_metrics(mb)
        keys = list(va) + [k for k in vb if k not in va]
        metrics = tuple((k, va.get(k), vb.get(k)) for k in keys)
        settled = (bool(ma.get("settled")), bool(mb.get("settled")))
    return DesignDiff(a_spec, b_spec, (sa.ropt_ohm, sb.ropt_ohm), tuple(rows), metrics, settled,
                      input_differences(da, db))


def format_diff(diff: DesignDiff, *, changed_only: bool = False) -> str:
    """Text tables of a :class:`DesignDiff` (components, then metrics)."""
    lines = [f"a: {diff.a_label}", f"b: {diff.b_label}", ""]
    if diff.inputs:
        lines += _columns([("input", "a", "b"), *diff.inputs]) + [""]
    table = [("component", "unit", "a", "b", "change")]
    ra, rb = diff.ropt_ohm
    table.append(("Ropt", "ohm", f"{ra:.6g}", f"{rb:.6g}", f"{100 * (rb - ra) / ra:+.2f}%" if ra else "-"))
    for c in diff.components:
        pct = c.change_pct
        if changed_only and pct is not None and abs(pct) < 1e-9:
            continue
        change = "only in b" if c.a is None else "only in a" if c.b is None else f"{pct:+.2f}%" if pct is not None else "-"
        table.append((c.name, c.unit, format_number(c.a), format_number(c.b), change))
    lines += _columns(table)
    if diff.metrics:
        lines.append("")
        if diff.settled and not all(diff.settled):
            lines.append(f"note: settled a={diff.settled[0]} b={diff.settled[1]}; an unsettled run's metrics are not final")
        mt = [("metric", "a", "b", "change")]
        for key, a, b in diff.metrics:
            if a is None or b is None:
                change = "only in " + ("b" if a is None else "a")
            elif key.endswith("_dbc") or key == "drain_efficiency":
                change = f"{b - a:+.4g}" + (" dB" if key.endswith("_dbc") else "")
            else:
                change = f"{100 * (b - a) / abs(a):+.2f}%" if a else f"{b - a:+.4g}"
            mt.append((key, format_number(a), format_number(b), change))
        lines += _columns(mt)
    return "\n".join(lines)


def _columns(table: list[tuple]) -> list[str]:
    widths = [max(len(t[i]) for t in table) for i in range(len(table[0]))]
    return ["  ".join(c.ljust(w) for c, w in zip(t, widths)).rstrip() for t in table]
