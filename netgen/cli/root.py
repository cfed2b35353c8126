"""The ``pashape`` command line: parse, call the pipeline, print. No physics here.

Every error a user can cause ends as one ``Error: ...`` line on stderr and exit
code 2, with no traceback and no half-written output. A run that finished but did not reach
periodic steady state exits with code 3 (``NOT_SETTLED_EXIT_CODE``), its outputs written.
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
from netgen.errors import NOT_SETTLED_EXIT_CODE, NetgenError
from netgen.fileio import atomic_write_text

__all__ = ["cli", "main"]

DEMO_DESIGN = "demo.toml"


def _demo_path() -> Path:
    """The embedded demo design (shipped in the wheel as netgen.sims/demo.toml)."""
    return Path(str(resources.files("netgen.sims").joinpath(DEMO_DESIGN)))


def _load(path: Path):
    from netgen.design import load_design

    return load_design(path)


class _Progress:
    """A one-line progress indicator on stderr while the simulator runs, on a terminal only.

    Quiet for the first ``QUIET_S`` seconds (a short run prints nothing extra); after that the line
    shows the last message from the run (cycles, powers, the change still seen) and the elapsed
    time, redrawn every second even while the simulator is between messages.
    """

    QUIET_S = 2.0

    def __init__(self, label: str, enabled: bool):
        import threading

        self.label = label
        self.enabled = enabled and sys.stderr.isatty()
        self.t0 = time.monotonic()
        self.shown = False
        self.text = "starting"
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._ticker = None
        if self.enabled:
            self._ticker = threading.Thread(target=self._tick, name="netgen-progress", daemon=True)
            self._ticker.start()

    def _tick(self) -> None:
        while not self._stop.wait(1.0):
            self._draw()

    def _draw(self) -> None:
        elapsed = time.monotonic() - self.t0
        if not self.enabled or elapsed < self.QUIET_S:
            return
        with self._lock:
            if self._stop.is_set():
                return
            msg = f"\r{self.label}: {self.text[:60]}, {elapsed:.0f} s"
            click.echo(msg.ljust(79), nl=False, err=True)
            self.shown = True

    def __call__(self, *args) -> None:
        # netgen.periodic.steady reports one message string; (cycles, change) is accepted too
        if not self.enabled:
            return
        if len(args) == 2 and not isinstance(args[0], str):
            self.text = f"{args[0]} cycles simulated, last change {args[1]:.2e}"
        else:
            self.text = " ".join(str(a) for a in args)
        self._draw()

    def done(self) -> None:
        self._stop.set()
        if self._ticker is not None:
            self._ticker.join(timeout=2.0)
        with self._lock:
            if self.shown:
                click.echo("\r" + " " * 79 + "\r", nl=False, err=True)


# Paths are checked by pashape itself (design.load_design, fileio, pipeline.atomic_folder), so
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
@click.version_option(__version__, prog_name="pashape")
def cli() -> None:
    """pashape: size, render and simulate RF power-amplifier output networks.

    \b
    Typical use:
      pashape demo                         # the whole pipeline on the built-in example
      pashape size my_pa.toml -o sized.toml
      pashape render my_pa.toml -o out/
      pashape run my_pa.toml -o out/       # metrics.json, waveforms.csv, plots, report.html
      pashape sweep my_pa.toml --vary design.vdd=20V:28V:5 -o sweep/
      pashape check sims/                  # regression against golden metrics
      pashape export my_pa.toml -o pack/   # hand-off pack for other simulators
      pashape doctor                       # is ngspice installed and usable?
    """


@cli.command()
@click.option("-o", "--out", "outdir", type=click.Path(path_type=Path), default=Path("pashape-demo"), show_default=True, help="Output folder.")
@click.option("--write-design", type=click.Path(path_type=Path, dir_okay=False), default=None, help="Only copy the demo design file to this path (a starting point for your own) and stop.")
@click.option("--force", is_flag=True, help="With --write-design: replace the file if it exists.")
def demo(outdir: Path, write_design: Path | None, force: bool) -> None:
    """Run the whole pipeline on the built-in demo design.

    The demo is an invented 8 W, 915 MHz class-F stage for a field-telemetry
    transmitter (24 V supply, 50 ohm antenna port). It is sized, rendered,
    simulated to periodic steady state and analysed; the report is written
    to the output folder.

    \b
    Example:
      pashape demo -o demo-out/
      pashape demo --write-design my_pa.toml
    """
    src = _demo_path()
    if write_design is not None:
        from netgen.errors import OutputError

        if (write_design.exists() or write_design.is_symlink()) and not force:
            raise OutputError(f"{write_design}: exists; choose another file name, or add --force to replace it.")
        atomic_write_text(write_design, src.read_text(encoding="utf-8"))
        click.echo(f"Wrote the demo design to {write_design}.")
        return
    _check_outdir(outdir)
    design = _load(src)
    _run_and_print(design, outdir)


def _run_and_print(design, outdir: Path) -> None:
    from netgen.pipeline import run_design
    from netgen.results import CAUTION_LINE, format_table

    progress = _Progress(f"simulating {design.name}", enabled=True)
    try:
        result = run_design(design, outdir, progress=progress)
    finally:
        progress.done()
    # on every run that produced results (a user error stays one 'Error:' line); on stderr, so
    # the table on stdout stays clean
    click.echo(CAUTION_LINE, err=True)
    click.echo(format_table(result.metrics))
    click.echo(f"Report: {result.files['report']}")
    click.echo(f"Metrics: {result.files['metrics']}  Waveforms: {result.files['waveforms']}  Netlist: {result.files['netlist']}")
    if not result.metrics.get("settled", False):
        note = (result.metrics.get("settle_note") or "").strip()
        note = note[:1].upper() + note[1:]
        click.echo("Warning: the simulation did NOT settle to periodic steady state; the outputs are written but "
                   f"every number is provisional. {note}", err=True)
        click.get_current_context().exit(NOT_SETTLED_EXIT_CODE)


@cli.command()
@DESIGN_ARG
@click.option("-o", "--out", "outfile", type=click.Path(path_type=Path), required=True, help="Where to write the fully-valued design file.")
def size(design_file: Path, outfile: Path) -> None:
    """Compute every component value of DESIGN.toml with published formulas.

    Writes a fully-valued design file you can hand-edit; a comment beside each
    value says how it was obtained. Values given in [network.values] are kept.

    \b
    Example:
      pashape size sims/demo.toml -o sized.toml
    """
    from netgen.synthesis import size as size_design
    from netgen.synthesis import write_sized_toml

    from netgen.results import buildability_warnings

    sized = size_design(_load(design_file))
    write_sized_toml(sized, outfile)
    click.echo(f"Ropt = {sized.ropt_ohm:.4g} ohm; {len(sized.components)} components sized; wrote {outfile}.")
    for text in buildability_warnings(sized):  # the same sentences `pashape run` puts in metrics.json warnings
        click.echo(f"Warning: {text}", err=True)


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
      pashape render sims/demo.toml -o out/ --dialect both
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
                atomic_write_text(tmp / name, render_netlist(sized, mode=mode, dialect=d))
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
      pashape run sims/class_e.toml -o out/class_e
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
      pashape doctor
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

    for module, names in (("studies", ("sweep_command",)), ("closure", ("tune_command", "loadpull_command")),
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
        code = cli.main(args=argv, prog_name="pashape", standalone_mode=False)
    except click.exceptions.Abort as exc:  # click turns Ctrl-C (and so SIGTERM) into Abort
        if isinstance(exc.__cause__, Terminated):
            click.echo("Terminated.", err=True)
            sys.exit(EXIT_SIGTERM)
        click.echo("Aborted.", err=True)
        sys.exit(130)
    except click.UsageError as exc:  # one line, like every other user error
        where = f" (see 'pashape {exc.ctx.info_name} --help')" if exc.ctx is not None and exc.ctx.parent is not None else " (see 'pashape --help')"
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
        if os.environ.get("PASHAPE_DEBUG") or os.environ.get("NETGEN_DEBUG"):  # the latter: name before the rename
            raise
        click.echo(f"Internal error ({type(exc).__name__}: {exc}). This is a pashape bug; "
                   "re-run with PASHAPE_DEBUG=1 for the traceback and report it.", err=True)
        sys.exit(1)
    sys.exit(code if isinstance(code, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()
