"""``pashape tune`` and ``pashape loadpull``: design closure at estimate speed. Parse, call, print.

The work is in :mod:`netgen.studies.tune` / :mod:`netgen.studies.tune_report` and
:mod:`netgen.studies.loadpull` / :mod:`netgen.studies.loadpull_run`.
"""

from __future__ import annotations

import sys
from pathlib import Path

import click

from netgen.errors import DesignError

__all__ = ["loadpull_command", "tune_command"]

_TUNE_HELP = """Tune a few values of a design toward targets, on the periodic estimate, then confirm in ngspice.

\b
The network is kept as sized; the --free keys move within their bounds.
  --free network.values.line_z0=30ohm:70ohm   a component value (any unit)
  --free design.vdd=20V:28V                   any numeric design key
\b
Goals (any number; a 1 % miss of a target weighs like 100 % of efficiency):
  --target pout=8W                            hit a value (pout, efficiency, peak_vd, ... or metrics.json keys)
  --target zvs                                class E: zero drain voltage and slope at turn-on
  --maximise drain_efficiency   --minimise peak_vd
  --limit "h2_dbc<-40"   --limit "peak_vd<3.2*vdd"
\b
Search: differential evolution (scipy.optimize) then a bounded Nelder-Mead polish,
--budget evaluations in all. Writes OUT/tuned.toml (values with how they were
obtained), OUT/report.html (before/after, objective history), OUT/tune.json and
OUT/confirm/ (the tuned design run in ngspice).

\b
Example:
  pashape tune my_pa.toml --free network.values.line_z0=30ohm:70ohm \\
      --target pout=8W --maximise drain_efficiency -o tuned/
"""


@click.command("tune", help=_TUNE_HELP)
@click.argument("design_file", type=click.Path(path_type=Path, dir_okay=False), metavar="DESIGN.toml")
@click.option("--free", "free", multiple=True, required=True, metavar="PATH=LOW:HIGH", help="A key to tune and its bounds; repeatable.")
@click.option("--target", "targets", multiple=True, metavar="METRIC=VALUE", help="A value to reach (or zvs); repeatable.")
@click.option("--maximise", "--maximize", "maximise", multiple=True, metavar="METRIC", help="A metric to make large; repeatable.")
@click.option("--minimise", "--minimize", "minimise", multiple=True, metavar="METRIC", help="A metric to make small; repeatable.")
@click.option("--limit", "limits", multiple=True, metavar="METRIC<VALUE", help="A bound a metric must keep; repeatable.")
@click.option("--budget", type=int, default=300, show_default=True, help="Evaluations in all.")
@click.option("--seed", type=int, default=1, show_default=True, help="Seed of the global search.")
@click.option("--no-confirm", is_flag=True, help="Skip the final ngspice run.")
@click.option("-o", "--out", type=click.Path(path_type=Path, file_okay=False), default=None,
              help="Output folder (default tune_<design name>/).")
@click.option("--quiet", is_flag=True, help="No progress bar.")
def tune_command(design_file, free, targets, maximise, minimise, limits, budget, seed, no_confirm, out, quiet):
    from netgen.design import load_design
    from netgen.studies import (
        parse_extremum,
        parse_free,
        parse_limit,
        parse_target,
        tune_design,
        write_tuning,
    )

    if budget < 10:
        raise click.BadParameter("give at least 10 evaluations.", param_hint="--budget")
    design = load_design(design_file)
    frees = [parse_free(f) for f in free]
    goals = [g for t in targets for g in parse_target(t)]
    goals += [parse_extremum(m, "max") for m in maximise] + [parse_extremum(m, "min") for m in minimise]
    goals += [parse_limit(text) for text in limits]
    bar = None
    if not quiet:
        from tqdm import tqdm

        bar = tqdm(total=budget, file=sys.stderr, unit="eval", desc="tune", dynamic_ncols=True,
                   disable=not sys.stderr.isatty())  # on a terminal only

    def progress(done, total, entry):
        if done == 1 and entry.get("engine") == "ngspice":  # said once, on a terminal or not
            click.echo(slow_path_note(entry, total), err=True)
        if bar is not None:
            bar.n = min(done, total)
            bar.set_postfix_str(f"best {entry['best']:.4g}")

    try:
        result = tune_design(design.raw, frees, goals, source=design.source, budget=budget, seed=seed,
                             progress=progress)
    finally:
        if bar is not None:
            bar.close()
    out = out or Path(f"tune_{design.name}")
    summary = write_tuning(result, out, Path(design_file).read_text(encoding="utf-8"), confirm=not no_confirm)
    click.echo(f"{len(result.history)} evaluations in {result.seconds:.1f} s ({result.method})")
    for f in summary["free"]:
        click.echo(f"  {f['path']}: {f['start']:.6g} -> {f['tuned']:.6g} {f['unit']}")
    head = f"  {'metric':<22} {'before':>11} {'after':>11} {'ngspice':>11}"
    click.echo(head)
    for k, after in summary["after"].items():
        if k == "engine":
            continue
        cells = [summary["before"].get(k), after, (summary["ngspice"] or {}).get(k)]
        click.echo(f"  {k:<22} " + " ".join(f"{'-' if c is None else f'{c:.5g}':>11}" for c in cells))
    for t in summary["targets"]:
        if t["ngspice_rel"] is not None:
            click.echo(f"  goal {t['goal']}: ngspice {t['ngspice']:.5g} ({100 * t['ngspice_rel']:+.2f} % from {t['value']:.5g})")
    conf = summary.get("confirm")
    if conf and summary["after"].get("engine") == "ngspice":
        click.echo("  the tuned point itself ran in ngspice (the estimate does not apply): nothing to compare")
    elif conf:
        flag = " (flagged: more than 0.2 % apart; trust ngspice)" if conf["flagged"] else ""
        click.echo(f"  estimate vs ngspice at the tuned point: Pout {100 * (conf['pout_rel'] or 0):+.3f} %, "
                   f"efficiency {100 * (conf['efficiency_rel'] or 0):+.3f} %{flag}")
    click.echo(f"wrote {out / 'tuned.toml'}, {out / 'report.html'}")


def slow_path_note(entry: dict, budget: int) -> str:
    """The note when the start point ran in ngspice (the periodic estimate does not apply): every
    evaluation will, so the time of the search is the budget times that of one run."""
    from netgen.studies import fallback_reason

    why = fallback_reason(entry.get("engine_note"))
    secs = float(entry.get("seconds") or 0.0)
    total = budget * secs
    length = f"{total:.0f} s" if total < 90.0 else f"{total / 60.0:.0f} min"
    return (f"Note: {why}; each evaluation runs in ngspice ({secs:.1f} s at the start point), so "
            f"{budget} evaluations may take about {length}. Ctrl-C stops; a smaller --budget "
            "or fewer --free keys is quicker.")


_LP_HELP = """Harmonic load-pull at the intrinsic plane: an ideal device against ideal terminations.

\b
The output network is removed: the drain sees Z1 at f0, Z2 at 2 f0, ... set
directly (the periodic state is solved per harmonic, not in ngspice). Vdd and f0
come from the design; Z0 of the chart defaults to its sized Ropt.
  --z1 grid:15          15 x 15 reflection coefficients inside |Gamma| <= 0.95
  --z1 25+10j           one impedance (ohm)
  --z2 ring:0.9:24      24 phases at |Gamma| = 0.9     --z2 short | open | C=2pF
  --zn 4=open           any other harmonic               --rest short (the others)
\b
Device: --device current (a half sine of peak --imax, class B, or Raab's current
--current even:M; a knee keeps the drain at or above about 0 V) or --device switch
(--ron, 50 % duty). Results go to OUT/loadpull.sqlite as they finish (running the
same command again resumes), OUT/loadpull.csv, Smith charts of efficiency, P1 and
peak drain voltage, OUT/summary.json. The efficiency optimum (and --confirm N points
drawn at random) is then re-run in ngspice with the terminations built from ideal
resonators; a point more than 0.2 % apart in Pout or efficiency is flagged.

\b
Example:
  pashape loadpull my_pa.toml --z1 grid:15 --z3 open -o lp/
"""


@click.command("loadpull", help=_LP_HELP)
@click.argument("design_file", type=click.Path(path_type=Path, dir_okay=False), metavar="DESIGN.toml")
@click.option("--z1", default="grid:11", show_default=True, help="Termination at f0.")
@click.option("--z2", default="short", show_default=True, help="Termination at 2 f0.")
@click.option("--z3", default="short", show_default=True, help="Termination at 3 f0.")
@click.option("--zn", multiple=True, metavar="N=TERM", help="Termination at N f0 (N >= 4); repeatable.")
@click.option("--rest", default="short", show_default=True, help="Termination of every harmonic not given.")
@click.option("--z0", "z0_ohm", type=float, default=None, help="Reference impedance of the chart, ohm (default: the sized Ropt).")
@click.option("--device", "device_kind", type=click.Choice(["current", "switch"]), default="current", show_default=True)
@click.option("--current", "current", default="half-sine", show_default=True, help="Drive of the current source: half-sine or even:M.")
@click.option("--imax", "imax_a", type=float, default=None, help="Peak drive current, A (default 2 Vdd / Ropt: class B at Ropt).")
@click.option("--vknee", "vknee_v", type=float, default=None, help="Knee of the current source, V (default 0.1 % of Vdd).")
@click.option("--ron", "ron_ohm", type=float, default=None, help="Switch on-resistance, ohm (default the design's device.ron).")
@click.option("--points", type=int, default=256, show_default=True, help="Grid points a period.")
@click.option("-o", "--out", type=click.Path(path_type=Path, file_okay=False), default=None,
              help="Output folder (default loadpull_<design name>/).")
@click.option("--no-plots", is_flag=True, help="Skip the Smith charts.")
@click.option("--confirm", "confirm_n", type=int, default=0, show_default=True,
              help="Points drawn at random (--seed) re-run in ngspice besides the efficiency optimum.")
@click.option("--no-confirm", is_flag=True, help="Do not re-run the efficiency optimum in ngspice.")
@click.option("--seed", type=int, default=1, show_default=True, help="Seed of the points drawn for --confirm.")
@click.option("--quiet", is_flag=True, help="No progress bar.")
def loadpull_command(design_file, z1, z2, z3, zn, rest, z0_ohm, device_kind, current, imax_a, vknee_v, ron_ohm,
                     points, out, no_plots, confirm_n, no_confirm, seed, quiet):
    import tomlkit

    from netgen.design import load_design
    from netgen.studies import (
        IdealDevice,
        loadpull_outputs,
        make_loadpull_plan,
        run_loadpull,
    )
    from netgen.synthesis import size

    design = load_design(design_file)
    if confirm_n < 0:
        raise click.BadParameter("must be 0 or more.", param_hint="--confirm")
    if points < 16 or points % 2:
        raise click.BadParameter("give an even number, at least 16.", param_hint="--points")
    ropt = float(size(design).ropt_ohm)
    terms = {1: z1, 2: z2, 3: z3}
    for text in zn:
        n, sep, term = text.partition("=")
        if not sep or not n.strip().isdigit() or int(n) < 4:
            raise DesignError(f"--zn {text!r}: write N=TERM with N >= 4, e.g. 4=open.")
        terms[int(n)] = term
    for name, x in (("--imax", imax_a), ("--vknee", vknee_v), ("--ron", ron_ohm), ("--z0", z0_ohm)):
        if x is not None and not x > 0:
            raise click.BadParameter("must be positive.", param_hint=name)
    device = IdealDevice(device_kind, float(design.vdd_v), imax_a or 2.0 * float(design.vdd_v) / ropt, current=current,
                         vknee_v=vknee_v, ron_ohm=ron_ohm if ron_ohm is not None else float(design.device.ron_ohm),
                         points=points)
    plan = make_loadpull_plan(device, z0_ohm=z0_ohm or ropt, f0_hz=float(design.f0_hz), terms=terms, rest=rest)
    if device_kind == "current":
        from netgen.studies import drive_current

        drive_current(current, 1.0, 16)  # a wrong --current is an error before anything runs
    from netgen.studies import free_open_harmonics

    free = free_open_harmonics(device, plan)
    if free:
        which = ", ".join(f"{n} f0" for n in free)
        click.echo(f"Note: the drive current has no component at {which}, terminated open here: the drain voltage "
                   "there, and with it the peak drain voltage, is nearly undetermined (read it as indicative; "
                   "efficiency and P1 are not affected; docs/closure.md).", err=True)
    out = out or Path(f"loadpull_{design.name}")
    bar = None
    if not quiet:
        from tqdm import tqdm

        bar = tqdm(total=plan.n_points, file=sys.stderr, unit="pt", desc="load-pull", dynamic_ncols=True,
                   disable=not sys.stderr.isatty())  # on a terminal only

    def progress(done, total):
        if bar is not None:
            bar.n = done
            bar.refresh()

    try:
        counts = run_loadpull(plan, out, design_toml=tomlkit.dumps(design.raw), progress=progress)
    finally:
        if bar is not None:
            bar.close()
    if not no_confirm or confirm_n:
        from netgen.studies import confirm_study

        confirm_study(plan, out, confirm_n, seed=seed, optimum=not no_confirm)
    summary = loadpull_outputs(plan, out, plots=not no_plots)
    click.echo(f"{plan.n_points} points ({counts['skipped']} already stored, {counts['ran']} run now, "
               f"{summary['failed']} failed); Z0 = {plan.z0_ohm:.4g} ohm")
    best = summary["best"]
    if best:
        zs = ", ".join(f"Z{t.harmonic} = {_z_text(best, t.harmonic)}" for t in plan.terms)
        click.echo(f"  efficiency optimum {100 * best['drain_efficiency']:.2f} % at {zs}: "
                   f"P1 {best['pout_w']:.4g} W, peak drain {best['peak_vd_v']:.4g} V")
    _echo_lp_confirmation(summary.get("confirmation"))
    click.echo(f"wrote {counts['store']}, {summary['files']['csv']}"
               + (f", {len(summary['files']) - 2} charts" if not no_plots else ""))


def _echo_lp_confirmation(conf: dict | None) -> None:
    """One line on the ngspice confirmation of the load-pull points (the sweep's contract)."""
    if not conf:
        click.echo("ngspice: no load-pull point confirmed (--no-confirm, or no point with output power).")
        return
    flagged = [p["idx"] for p in conf["points"] if p.get("flagged")]
    errors = [p for p in conf["points"] if "error" in p]
    line = (f"ngspice: {conf['confirmed']} point(s) confirmed, largest difference Pout "
            f"{_pct(conf['worst_pout_rel'])}, efficiency {_pct(conf['worst_efficiency_rel'])} (bound 0.2 %)")
    if flagged:
        line += f"; FLAGGED (beyond the bound, stored figures now ngspice's): point(s) {', '.join(map(str, flagged))}"
    click.echo(line + ".")
    for p in errors:
        click.echo(f"  point {p['idx']} could not be confirmed: {p['error']}")


def _pct(x) -> str:
    return "n/a" if x is None else f"{100 * x:.3f} %"


def _z_text(axes: dict, n: int) -> str:
    re_, im = axes[f"z{n}_re_ohm"], axes[f"z{n}_im_ohm"]
    return "open" if re_ == "open" else f"{re_:.4g}{im:+.4g}j ohm"
