"""The whole job for one design: size -> render -> steady state -> analyse -> outputs.

This module composes the stages and owns the output folder (written
atomically: everything goes to a hidden temporary folder beside the target and
is moved into place only when every file is complete).
"""

from __future__ import annotations

import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from netgen.design import Design, SizedDesign, Waveforms

from .errors import OutputError
from .fileio import atomic_write_text, current_umask

__all__ = ["RunResult", "evaluate", "run_design", "network_sweep", "write_outputs", "atomic_folder"]

ProgressFn = Callable[[int, float], None]


@dataclass(frozen=True)
class RunResult:
    """Everything one run produced. ``files`` lists the written outputs (empty without an outdir)."""

    sized: SizedDesign
    netlist: str
    waveforms: Waveforms
    metrics: dict
    z_f_hz: np.ndarray
    z_ohm: np.ndarray
    files: dict = field(default_factory=dict)


def network_sweep(sized: SizedDesign, n_max: int, points: int = 801) -> tuple[np.ndarray, np.ndarray]:
    """The passive network's drain impedance from 0.1 f0 to (n_max + 0.5) f0, n f0 points included.

    Computed in the frequency domain by :func:`netgen.synthesis.network.z_drain` (no simulator);
    with a Touchstone block replacing a named section, that section is the block's data
    terminated in RL (its fit above the file's last point; netgen.netlist.touchstone).
    """
    from netgen.netlist import design_block
    from netgen.synthesis import z_drain, z_drain_with_section

    f0 = sized.design.f0_hz
    f = np.linspace(0.1 * f0, (n_max + 0.5) * f0, points)
    f = np.unique(np.concatenate([f, f0 * np.arange(1, n_max + 1)]))
    block = design_block(sized.design)
    if block is not None and block.section in ("network", "match"):
        return f, np.asarray(z_drain_with_section(sized, f, block.section, block.z_in(f, sized.design.load_ohm)))
    return f, np.asarray(z_drain(sized, f))


def run_design(
    design: Design,
    outdir: str | Path | None = None,
    *,
    progress: ProgressFn | None = None,
    plots: bool = True,
) -> RunResult:
    """Size, render, simulate to periodic steady state and analyse one design.

    Parameters
    ----------
    design : Design
    outdir : path, optional
        Where to write netlist, sized design, metrics.json, waveforms.csv, plots
        and report.html. Nothing is written when None.
    progress : callable(cycles, relative_change), optional
        Called while the simulator runs.
    plots : bool
        Write the PNG plots and the HTML report (only with ``outdir``).
    """
    from netgen.netlist import render
    from netgen.periodic import simulate
    from netgen.results import analyse
    from netgen.synthesis import size

    sized = size(design)
    netlist = render(sized, mode="tran")
    waveforms = simulate(sized, progress=progress)
    metrics = analyse(waveforms, sized, netlist)
    f_hz, z_ohm = network_sweep(sized, design.sim.harmonics)
    result = RunResult(sized, netlist, waveforms, metrics, f_hz, z_ohm)
    if outdir is not None:
        files = write_outputs(result, Path(outdir), plots=plots)
        result = RunResult(sized, netlist, waveforms, metrics, f_hz, z_ohm, files)
    return result


def evaluate(design: Design, *, progress: ProgressFn | None = None) -> dict:
    """Metrics of one design (the metrics.json contract), nothing written. For sweeps and checks."""
    return run_design(design, None, progress=progress, plots=False).metrics


class atomic_folder:
    """Context manager: files go to a temporary folder beside ``target``; on success they are
    moved into ``target`` (created if needed), on failure the temporary folder is removed
    and ``target`` is left as it was."""

    def __init__(self, target: Path):
        self.target = Path(target)
        self.tmp: Path | None = None

    def __enter__(self) -> Path:
        parent = self.target.parent if str(self.target.parent) else Path(".")
        try:
            if self.target.exists() and not self.target.is_dir():
                raise OutputError(f"{self.target}: exists and is not a folder; choose another output folder with -o.")
            parent.mkdir(parents=True, exist_ok=True)
            self.tmp = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.tmp-", dir=parent))
        except PermissionError:
            raise OutputError(f"{self.target}: cannot write there (permission denied); choose another output folder with -o.") from None
        except OSError as exc:
            if isinstance(exc, OutputError):
                raise
            raise OutputError(f"{self.target}: cannot create the output folder ({exc.strerror}); choose another with -o.") from None
        return self.tmp

    def __exit__(self, exc_type, exc, tb):
        assert self.tmp is not None
        if exc_type is not None:
            shutil.rmtree(self.tmp, ignore_errors=True)
            if isinstance(exc, OutputError) and str(self.tmp) in str(exc):
                # name the folder the user asked for, not the hidden one the files went to first
                raise OutputError(str(exc).replace(str(self.tmp), str(self.target))) from None
            return False
        try:
            # mkdtemp makes a 0700 folder; the results folder is an ordinary one (the user's umask)
            os.chmod(self.tmp, 0o777 & ~current_umask())
            if not self.target.exists():  # one rename: the folder appears complete or not at all
                os.replace(self.tmp, self.target)
                return False
            for item in sorted(self.tmp.iterdir()):
                dest = self.target / item.name
                if dest.is_dir() and not dest.is_symlink():
                    shutil.rmtree(dest)
                os.replace(item, dest)
        except OSError as e:
            raise OutputError(f"{self.target}: cannot write the results ({e.strerror}); choose another output folder with -o.") from None
        finally:
            shutil.rmtree(self.tmp, ignore_errors=True)
        return False


def write_outputs(result: RunResult, outdir: Path, *, plots: bool = True) -> dict:
    """Write every output of a run into ``outdir`` atomically; return {kind: path}."""
    from netgen.results import write_metrics_json, write_waveforms_csv
    from netgen.synthesis import write_sized_toml

    names: dict[str, str] = {}
    with atomic_folder(outdir) as tmp:
        atomic_write_text(tmp / "netlist.cir", result.netlist)
        names["netlist"] = "netlist.cir"
        write_sized_toml(result.sized, tmp / "sized.toml")
        names["sized"] = "sized.toml"
        write_metrics_json(tmp / "metrics.json", result.metrics)
        names["metrics"] = "metrics.json"
        write_waveforms_csv(tmp / "waveforms.csv", result.waveforms)
        names["waveforms"] = "waveforms.csv"
        if plots:
            from netgen.results import plot_all, write_report

            made = plot_all(tmp, result.sized, result.waveforms, result.metrics, result.z_f_hz, result.z_ohm)
            for kind, path in made.items():
                names[f"plot_{kind}"] = Path(path).name
            write_report(tmp, result.sized, result.metrics, {k: Path(v).name for k, v in made.items()}, result.netlist)
            names["report"] = "report.html"
    return {kind: outdir / name for kind, name in names.items()}

