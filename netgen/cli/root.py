"""The ``netgen`` command line: parse, call the pipeline, print. No physics here.

Every error a user can cause ends as one ``Error: ...`` line on stderr and exit
code 2, with no traceback and no half-written output.
"""

from __future__ import annotations

import os
import sys
import threading
import time
from importlib import resources
from pathlib import Path

import click

from netgen import __version__
from netgen.errors import NetgenError

__all__ = ["cli", "main"]

DEMO_DESIGN = "demo.toml"


def _demo_path() -> Path:
    """The embedded demo design (shipped in the wheel as netgen.sims/demo.toml)."""
    return Path(str(resources.files("netgen.sims").joinpath(DEMO_DESIGN)))


def _load(path: Path):
    from netgen.design import load_design

    return load_design(path)


class _Progress:
    """A one-line progress indicator on stderr while the simulator runs."""

    def __init__(self, label: str, enabled: bool):
        self.label = label
        self.enabled = enabled and sys.stderr.isatty()
        self.t0 = time.monotonic()
        self.shown = False

    def __call__(self, *args) -> None:
        # netgen.periodic.steady reports one message string; (cycles, change) is accepted too
        if not self.enabled:
            return
        if len(args) == 2 and not isinstance(args[0], str):
            text = f"{args[0]} cycles simulated, last change {args[1]:.2e}"
        else:
            text = " ".join(str(a) for a in args)
        msg = f"\r{self.label}: {text[:50]}, {time.monotonic() - self.t0:.1f} s"
        click.echo(msg, nl=False, err=True)
        self.shown = True

    def done(self) -> None:
        if self.shown:
            click.echo("\r" + " " * 78 + "\r", nl=False, err=True)


# Paths are checked by netgen itself (design.load_design, fileio, pipeline.atomic_folder), so
# every problem with them is one 'Error:' line naming the path.
DESIGN_ARG = click.argument(
    "design_file", type=click.Path(path_type=Path), metavar="DESIGN.toml"
)


def _check_outdir(outdir: Path) -> None:
    """Refuse an output folder that can never be created (a file in the way) before any work."""
    from netgen.errors import OutputError

    for folder in (outdir, *outdir.parents):
        if folder.exists():
            if not folder.is_dir():
                raise OutputError(f"{outdir}: '{folder}' is a file, not a folder; choose another output folder with -o.")
            if not os.access(folder, os.W_OK | os.X_OK):
                raise OutputError(f"{outdir}: cannot write in '{folder}' (permission denied); choose another output folder with -o.")
            return


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="netgen")
def cli() -> None:
    """netgen: size, render and simulate RF power-amplifier output networks.

    \b
    Typical use:
      netgen demo                         # the whole pipeline on the built-in example
      netgen size my_pa.toml -o sized.toml
      netgen render my_pa.toml -o out/
      netgen run my_pa.toml -o out/       # metrics.json, waveforms.csv, plots, report.html
      netgen sweep my_pa.toml --vary design.vdd=20V:28V:5 -o sweep/
      netgen check sims/                  # regression against golden metrics
      netgen export my_pa.toml -o pack/   # hand-off pack for other simulators
      netgen doctor                       # is ngspice installed and usable?
    """


@cli.command()
@click.option("-o", "--out", "outdir", type=click.Path(path_type=Path), default=Path("netgen-demo"), show_default=True, help="Output folder.")
@click.option("--write-design", type=click.Path(path_type=Path, dir_okay=False), default=None, help="Only copy the demo design file to this path (a starting point for your own) and stop.")
def demo(outdir: Path, write_design: Path | None) -> None:
    """Run the whole pipeline on the built-in demo design.

    The demo is an invented 8 W, 915 MHz class-F stage for a field-telemetry
    transmitter (24 V supply, 50 ohm antenna port). It is sized, rendered,
    simulated to periodic steady state and analysed; the report is written
    to the output folder.

    \b
    Example:
      netgen demo -o demo-out/
      netgen demo --write-design my_pa.toml
    """
    src = _demo_path()
    if write_design is not None:
        from netgen.fileio import atomic_write_text

        atomic_write_text(write_design, src.read_text(encoding="utf-8"))
        click.echo(f"Wrote the demo design to {write_design}.")
        return
    _check_outdir(outdir)
    design = _load(src)
    _run_and_print(design, outdir)


def _run_and_print(design, outdir: Path) -> None:
    from netgen.pipeline import run_design
    from netgen.results import format_table

    progress = _Progress(f"simulating {design.name}", enabled=True)
    try:
        result = run_design(design, outdir, progress=progress)
    finally:
        progress.done()
    click.echo(format_table(result.metrics))
    click.echo(f"Report: {result.files['report']}")
    click.echo(f"Metrics: {result.files['metrics']}  Waveforms: {result.files['waveforms']}  Netlist: {result.files['netlist']}")
    if not result.metrics.get("settled", False):
        click.echo("Warning: the simulation did NOT settle to periodic steady state; treat the numbers as provisional "
                   "(raise sim.max_cycles, or check the bias network).", err=True)


@cli.command()
@DESIGN_ARG
@click.option("-o", "--out", "outfile", type=click.Path(path_type=Path), required=True, help="Where to write the fully-valued design file.")
def size(design_file: Path, outfile: Path) -> None:
    """Compute every component value of DESIGN.toml with published formulas.

    Writes a fully-valued design file you can hand-edit; a comment beside each
    value says how it was obtained. Values given in [network.values] are kept.

    \b
    Example:
      netgen size sims/demo.toml -o sized.toml
    """
    from netgen.synthesis import size as size_design
    from netgen.synthesis import write_sized_toml

    sized = size_design(_load(design_file))
    write_sized_toml(sized, outfile)
    click.echo(f"Ropt = {sized.ropt_ohm:.4g} ohm; {len(sized.components)} components sized; wrote {outfile}.")


@cli.command()
@DESIGN_ARG
@click.option("-o", "--out", "outdir", type=click.Path(path_type=Path), required=True, help="Output folder for the netlists.")
@click.option("--dialect", type=click.Choice(["ngspice", "portable", "both"]), default="ngspice", show_default=True, help="ngspice, or the portable SPICE3 subset for other simulators.")
def render(design_file: Path, outdir: Path, dialect: str) -> None:
    """Size DESIGN.toml and write its netlists.

    Writes <name>.cir (transient with the device) and <name>_zdrain.cir (AC
    analysis of the passive network seen from the drain). Identical input
    gives byte-identical files.

    \b
    Example:
      netgen render sims/demo.toml -o out/ --dialect both
    """
    from netgen.netlist import render as render_netlist
    from netgen.pipeline import atomic_folder
    from netgen.synthesis import size as size_design

    sized = size_design(_load(design_file))
    _check_outdir(outdir)
    dialects = ["ngspice", "portable"] if dialect == "both" else [dialect]
    written = []
    with atomic_folder(outdir) as tmp:
        for d in dialects:
            suffix = "" if d == "ngspice" else "_portable"
            for mode, tag in (("tran", ""), ("ac", "_zdrain")):
                name = f"{sized.design.name}{tag}{suffix}.cir"
                (tmp / name).write_text(render_netlist(sized, mode=mode, dialect=d), encoding="utf-8")
                written.append(name)
    click.echo(f"Wrote {', '.join(written)} to {outdir}.")


@cli.command()
@DESIGN_ARG
@click.option("-o", "--out", "outdir", type=click.Path(path_type=Path), required=True, help="Output folder.")
@click.option("--backend", type=click.Choice(["shared", "batch"]), default=None, help="Override sim.backend: shared library (default) or the ngspice executable.")
def run(design_file: Path, outdir: Path, backend: str | None) -> None:
    """Size, render, simulate to periodic steady state and analyse DESIGN.toml.

    Writes metrics.json, waveforms.csv (two settled periods), PNG plots, the
    netlist, the sized design and report.html to the output folder, and prints
    a summary table.

    \b
    Example:
      netgen run sims/class_e.toml -o out/class_e
    """
    import dataclasses

    design = _load(design_file)
    _check_outdir(outdir)
    if backend:
        design = dataclasses.replace(design, sim=dataclasses.replace(design.sim, backend=backend))
    _run_and_print(design, outdir)


@cli.command()
def doctor() -> None:
    """Check the ngspice installation (executable, shared library, versions).

    Says what to fix when something is missing. See ngspice_setup.md.

    \b
    Example:
      netgen doctor
    """
    from netgen.simulator import doctor_report

    report = doctor_report()
    ok = True
    for item in report["checks"]:
        mark = "ok " if item["ok"] else "FAIL"
        click.echo(f"[{mark}] {item['what']}: {item['detail']}")
        if not item["ok"]:
            ok = False
            if item.get("fix"):
                click.echo(f"       fix: {item['fix']}")
    if not ok:
        raise NetgenError("ngspice is not fully usable; follow the fixes above (details in ngspice_setup.md).")
    click.echo("ngspice is ready.")


def _add_optional_commands() -> None:
    """Commands defined in their own modules (each imports no simulator at import time)."""
    import importlib

    for module, names in (("studies", ("sweep_command",)),
                          ("handoff", ("check_command", "diff_command", "export_command"))):
        try:
            mod = importlib.import_module(f".{module}", __package__)
        except ModuleNotFoundError as exc:  # that command module is absent: the others still work
            if exc.name != f"{__package__}.{module}":
                raise
            continue
        for name in names:
            cli.add_command(getattr(mod, name))


_add_optional_commands()


def _one_line(text: str) -> str:
    """The message on one line: line breaks and other control characters (say, from a file
    name) are shown escaped, so a user error is always exactly one ``Error:`` line."""
    return "".join(ch if ch.isprintable() else ch.encode("unicode_escape").decode("ascii") for ch in text)


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the CLI, turning user errors into one line and exit code 2."""
    from netgen.lifeline import EXIT_SIGTERM, Terminated, raise_on_sigterm

    if threading.current_thread() is threading.main_thread():
        raise_on_sigterm()  # SIGTERM unwinds like Ctrl-C: stores closed, children ended, temporary folders removed
    try:
        code = cli.main(args=argv, prog_name="netgen", standalone_mode=False)
    except click.exceptions.Abort as exc:  # click turns Ctrl-C (and so SIGTERM) into Abort
        if isinstance(exc.__cause__, Terminated):
            click.echo("Terminated.", err=True)
            sys.exit(EXIT_SIGTERM)
        click.echo("Aborted.", err=True)
        sys.exit(130)
    except click.UsageError as exc:  # one line, like every other user error
        where = f" (see 'netgen {exc.ctx.info_name} --help')" if exc.ctx is not None and exc.ctx.parent is not None else " (see 'netgen --help')"
        click.echo(f"Error: {_one_line(exc.format_message())}{where}", err=True)
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        click.echo(f"Error: {_one_line(exc.format_message())}", err=True)
        sys.exit(exc.exit_code)
    except NetgenError as exc:
        click.echo(f"Error: {_one_line(str(exc))}", err=True)
        sys.exit(exc.exit_code)
    except Terminated:
        click.echo("Terminated.", err=True)
        sys.exit(EXIT_SIGTERM)
    except KeyboardInterrupt:
        click.echo("Interrupted.", err=True)
        sys.exit(130)
    except Exception as exc:  # a bug of ours: say so plainly; the traceback only on request
        if os.environ.get("NETGEN_DEBUG"):
            raise
        click.echo(f"Internal error ({type(exc).__name__}: {exc}). This is a netgen bug; "
                   "re-run with NETGEN_DEBUG=1 for the traceback and report it.", err=True)
        sys.exit(1)
    sys.exit(code if isinstance(code, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()
