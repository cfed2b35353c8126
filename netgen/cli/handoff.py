"""Click commands ``check`` (golden regression), ``diff`` (two designs) and ``export`` (hand-off pack).

Thin wrappers: parse, call netgen.handoff.regress / netgen.handoff.export, print. The lead's
``netgen.cli.root`` adds them to the ``pashape`` group.
"""

from __future__ import annotations

from pathlib import Path

import click

from netgen.errors import NetgenError

__all__ = ["check_command", "diff_command", "export_command"]


def _user_error(exc: NetgenError) -> click.ClickException:
    err = click.ClickException(str(exc))
    err.exit_code = exc.exit_code
    return err


@click.command("check")
@click.argument("paths", nargs=-1, type=click.Path(path_type=Path), metavar="[PATHS]...")
@click.option("--accept", is_flag=True, help="Rewrite the golden files from this run (after an intended change) and print what changed.")
@click.option("-j", "--jobs", type=click.IntRange(min=1), default=None, help="Designs run at once (default: one per core).")
@click.option("--failures-only", is_flag=True, help="Show only the metrics out of tolerance.")
def check_command(paths: tuple[Path, ...], accept: bool, jobs: int | None, failures_only: bool) -> None:
    """Re-run designs that have golden metrics and compare (template regression).

    PATHS are design files (*.toml), golden files (*.expect.json) or folders
    (every design with a golden beside it); default: sims/. Exit code 0 when
    every design is within tolerance, 1 on any regression or unsettled run,
    2 for a usage error. A new golden is made by naming the design file with
    --accept.

    \b
    Example:
      pashape check                       # every design in sims/
      pashape check sims/class_e.toml -j 1
      pashape check --accept sims/my_pa.toml   # create or refresh its golden
    """
    from netgen import handoff as regress

    targets = list(paths) or [Path("sims")]
    try:
        results = regress.check_designs(targets, jobs=jobs, accept=accept)
    except NetgenError as exc:
        raise _user_error(exc) from None
    if not results:
        err = click.ClickException(f"no design with a golden file in {', '.join(map(str, targets))}; "
                                   "create one with 'pashape check --accept DESIGN.toml'.")
        err.exit_code = 2
        raise err
    for r in results:
        click.echo(regress.format_result(r, only_failures=failures_only))
        click.echo("")
    if accept:
        try:
            for line in regress.accept(results):
                click.echo(line)
        except NetgenError as exc:
            raise _user_error(exc) from None
        if any(r.error or not r.settled for r in results):
            click.get_current_context().exit(1)
        return
    click.echo(regress.format_summary(results))
    if not all(r.ok for r in results):
        click.get_current_context().exit(1)


@click.command("diff")
@click.argument("design_a", metavar="A.toml")
@click.argument("design_b", metavar="B.toml")
@click.option("--no-run", is_flag=True, help="Compare sized components only; do not simulate.")
@click.option("--changed-only", is_flag=True, help="List only components whose value changed.")
def diff_command(design_a: str, design_b: str, no_run: bool, changed_only: bool) -> None:
    """Compare two designs component by component and metric by metric.

    Either argument may be git:REV:path, the design file as of a git revision.

    \b
    Example:
      pashape diff sims/demo.toml my_pa.toml --no-run
      pashape diff git:HEAD~1:sims/demo.toml sims/demo.toml
    """
    from netgen import handoff as regress

    try:
        diff = regress.diff_designs(design_a, design_b, run=not no_run)
    except NetgenError as exc:
        raise _user_error(exc) from None
    click.echo(regress.format_diff(diff, changed_only=changed_only))


@click.command("export")
@click.argument("design_file", type=click.Path(path_type=Path, dir_okay=False), metavar="DESIGN.toml")
@click.option("-o", "--out", "outdir", type=click.Path(path_type=Path, file_okay=False), required=True, help="Pack folder to write (replaced as a whole).")
@click.option("--z0", "z0_ohm", type=click.FloatRange(min=0, min_open=True), default=50.0, show_default=True, help="Reference impedance of the Touchstone file, ohm.")
@click.option("--no-verify", is_flag=True, help="Skip re-running the portable netlist in ngspice to confirm it reproduces the metrics.")
def export_command(design_file: Path, outdir: Path, z0_ohm: float, no_verify: bool) -> None:
    """Write a hand-off pack for colleagues on other simulators.

    The pack holds the portable netlist (SPICE3 subset, models inline), the
    ngspice netlist, a README with the analysis settings and how to read the
    results, the expected metrics (JSON) and waveforms (CSV, two settled
    periods), and the output network's S-parameters (Touchstone, 1-port at the
    drain) around f0 and its harmonics.

    \b
    Example:
      pashape export sims/demo.toml -o demo-pack/
    """
    from netgen.design import load_design
    from netgen.handoff import export_pack

    try:
        design = load_design(design_file)
        pack = export_pack(design, outdir, z0_ohm=z0_ohm, verify=not no_verify)
    except NetgenError as exc:
        raise _user_error(exc) from None
    for name in pack.files:
        click.echo(f"  {outdir / name}")
    if pack.verify_note:
        click.echo(pack.verify_note)
    if not pack.settled:
        click.echo("Warning: the design's run did NOT settle; the expected numbers in the pack are provisional.", err=True)
    click.echo(f"Wrote the hand-off pack to {outdir}.")
