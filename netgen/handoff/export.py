"""Hand-off pack: everything a colleague on another simulator needs to reproduce a design.

``export_pack(design, outdir)`` writes, atomically (built in a temporary folder
beside the target, then renamed into place):

* ``<name>_portable.cir``: the transient netlist in the portable dialect
  (SPICE3 subset, models inline, no paths, no control block), checked by
  :func:`netgen.netlist.portable.check_portable`;
* ``<name>_ngspice.cir``: the netlist pashape itself runs;
* ``expected_metrics.json``: the metrics of pashape's settled run (the
  metrics.json contract) plus the pack's analysis settings;
* ``expected_waveforms.csv``: two settled periods (time from the start of the
  reading window);
* ``<name>_drain_z.s1p``: the output network's 1-port S-parameters at the drain
  (device removed, load attached) from 0.5 f0 to (N + 0.5) f0 in f0/20 steps,
  so every n f0 is a grid point; ``<name>_drain_z_harmonics.s1p``: the n f0
  points only. Computed from ngspice's AC analysis of the rendered ``ac``
  netlist, cross-checked against :func:`netgen.synthesis.network.z_drain`;
* ``README.md``: what is in the pack, the analysis settings, which window to
  read, how to compute the metrics, what to expect, and the safety cautions.

The portable netlist's ``TSTOP`` is chosen so that a plain transient run from
the pack's initial conditions is settled; with ``verify`` the pack re-runs the
portable netlist in ngspice and lengthens ``TSTOP`` until the last two periods
reproduce pashape's metrics within :data:`REPRODUCE_TOL`.
"""

from __future__ import annotations

import io
import json
import math
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from netgen import __version__
from netgen.errors import OutputError, SimulationError
from netgen.fileio import current_umask
from netgen.netlist import Unsupported
from netgen.periodic import estimate, with_initial_state

__all__ = [
    "Pack",
    "export_pack",
    "drain_impedance_ac",
    "touchstone_text",
    "waveforms_from_vectors",
    "reproduce_error",
    "pack_grid_hz",
    "REPRODUCE_TOL",
    "MANIFEST",
]

#: Relative agreement required between the portable run and pashape's metrics.
REPRODUCE_TOL = 5e-3
#: The file that marks a folder as a pashape pack (so an existing pack may be replaced).
MANIFEST = "pack_manifest.json"
#: Metrics compared when verifying a portable run.
_VERIFY_KEYS = ("pdc_w", "pout_w", "drain_efficiency")


@dataclass(frozen=True)
class Pack:
    """What :func:`export_pack` wrote.

    Attributes
    ----------
    outdir : Path
    files : list of str
        File names inside ``outdir``.
    tstop_s : float
        TSTOP of the portable netlist, s.
    settled : bool
        Whether pashape's own run settled.
    verify_note : str
        How the portable run compared (empty when not verified).
    metrics : dict
        The expected metrics written to the pack.
    """

    outdir: Path
    files: list
    tstop_s: float
    settled: bool
    verify_note: str = ""
    metrics: dict = field(default_factory=dict, repr=False)


def pack_grid_hz(f0_hz: float, n_max: int, steps_per_f0: int = 20) -> np.ndarray:
    """Frequency grid 0.5 f0 .. (n_max + 0.5) f0 in f0/steps_per_f0 steps (n f0 on the grid), Hz."""
    k = np.arange(steps_per_f0 // 2, steps_per_f0 * n_max + steps_per_f0 // 2 + 1)
    return f0_hz * k / steps_per_f0


def drain_impedance_ac(sized, f_hz: np.ndarray, *, backend: str = "shared", timeout_s: float = 120.0) -> np.ndarray:
    """Drain impedance of the output network from ngspice's AC analysis, ohm.

    The ``ac`` netlist injects 1 A at the drain (docs/netlist_conventions.md),
    so Z(f) = v(drain). The simulator's frequencies must match ``f_hz``.

    Raises
    ------
    SimulationError
        If ngspice fails or returns other frequencies than asked.
    """
    from netgen.netlist import render
    from netgen.simulator import run_ac

    netlist = render(sized, mode="ac", ac_freqs_hz=np.asarray(f_hz, dtype=float))
    freq, vec = run_ac(netlist, backend=backend, timeout_s=timeout_s)
    z = np.asarray(vec["drain"], dtype=np.complex128)
    if freq.shape != np.shape(f_hz) or not np.allclose(freq, f_hz, rtol=1e-9, atol=0.0):
        # the ac card may carry its own grid; take our points from it
        idx = np.searchsorted(freq, f_hz)
        idx = np.clip(idx, 0, len(freq) - 1)
        if not np.allclose(freq[idx], f_hz, rtol=1e-9):
            raise SimulationError("The AC analysis did not return the requested frequency grid; check render(mode='ac').")
        z = z[idx]
    return z


def touchstone_text(f_hz: np.ndarray, z_ohm: np.ndarray, z0_ohm: float, name: str, comments: str = "") -> str:
    """A 1-port Touchstone (v1.0, RI) text for impedances ``z_ohm`` at ``f_hz``.

    S11 = (Z - Z0) / (Z + Z0) (Pozar, "Microwave Engineering", reflection
    coefficient of a load). Written by scikit-rf's ``Network.write_touchstone``.
    """
    import skrf

    s = ((z_ohm - z0_ohm) / (z_ohm + z0_ohm)).reshape(-1, 1, 1)
    freq = skrf.Frequency.from_f(np.asarray(f_hz, dtype=float), unit="Hz")
    ntw = skrf.Network(frequency=freq, s=s, z0=z0_ohm, name=name, comments=comments)
    return ntw.write_touchstone(return_string=True, form="ri", skrf_comment=False)


def waveforms_from_vectors(vectors, f0_hz: float, points_per_cycle: int, periods: int = 2):
    """Resample the last ``periods`` periods of a transient run onto a uniform grid.

    Returns a :class:`netgen.design.records.Waveforms` with time starting at 0 (the
    start of the window), voltages by node name and the currents of the
    netlist conventions: ``drain`` (``vidrain#branch``), ``switch``
    (``visw#branch``), ``supply`` (minus ``vdd#branch``), ``gate`` (minus
    ``vdrive#branch``) where present.
    """
    from netgen.design import Waveforms

    t = np.asarray(vectors["time"], dtype=float)
    period = 1.0 / f0_hz
    t_end = t[-1]
    n = periods * points_per_cycle
    grid = t_end - periods * period + np.arange(n) * (period / points_per_cycle)
    if grid[0] < t[0] - 1e-6 * period:
        raise SimulationError(f"The run is shorter than {periods} periods; raise TSTOP.")
    v, i = {}, {}
    for key in list(vectors.keys()):
        if key == "time":
            continue
        data = np.interp(grid, t, np.asarray(vectors[key], dtype=float))
        if key.endswith("#branch"):
            el = key[: -len("#branch")]
            if el == "vidrain":
                i["drain"] = data
            elif el == "visw":
                i["switch"] = data
            elif el == "vdd":
                i["supply"] = -data
            elif el == "vdrive":
                i["gate"] = -data
        else:
            v[key.lower()] = data
    return Waveforms(f0_hz=f0_hz, t_s=grid - grid[0], v=v, i=i, settled=True, cycles=int(round(t_end / period)))


def reproduce_error(expected: dict, got: dict) -> float:
    """Largest relative deviation of Pdc, Pout and efficiency between two metric dicts."""
    worst = 0.0
    for key in _VERIFY_KEYS:
        a, b = expected.get(key), got.get(key)
        if a is None or b is None:
            return math.inf
        worst = max(worst, abs(b - a) / max(abs(a), 1e-30))
    return worst


def _warm_ic(sized, backend: str) -> dict:
    """Initial conditions of the pack's run: the DC state of chokes and blocks.

    The same warm start pashape's steady-state run uses
    (:func:`netgen.periodic.steady.dc_initial_conditions`: a DC operating point of the
    passive network sinking the estimated Idc at the drain).
    """
    from netgen.netlist import render
    from netgen.periodic import dc_initial_conditions

    op = render(sized, mode="op", idc_a=sized.idc_est_a)
    tran = render(sized, mode="tran")
    return dc_initial_conditions(op, tran, backend=backend, timeout_s=sized.design.sim.timeout_s)


def _periodic_state(sized):
    """The periodic steady state pashape starts its own run on (:mod:`netgen.periodic.estimator`), or None
    where the netlist is outside what it models (the pack then starts from the DC state)."""
    from netgen.netlist import BLOCK_SUBCKT, design_block, render

    try:
        block = design_block(sized.design)
        return estimate(render(sized, mode="tran"), sized.design.f0_hz, sized.design.sim.points_per_cycle,
                        blocks={BLOCK_SUBCKT: block} if block is not None else None)
    except Unsupported:
        return None


def _tran_settings(netlist: str) -> dict:
    for line in netlist.splitlines():
        words = line.split()
        if words and words[0].lower() == ".tran":
            out = {"card": line.strip(), "tstep": words[1] if len(words) > 1 else "", "tstop": words[2] if len(words) > 2 else ""}
            rest = [w for w in words[3:] if w.lower() != "uic"]
            out["tstart"] = rest[0] if len(rest) > 0 else "0"
            out["tmax"] = rest[1] if len(rest) > 1 else "(simulator default)"
            out["uic"] = any(w.lower() == "uic" for w in words)
            return out
    raise SimulationError("The rendered transient netlist has no .tran card; check the template.")


def _ic_lines(netlist: str) -> list[str]:
    """The netlist's initial conditions, one entry per element, each naming its element.

    A card folded onto ``+`` continuation lines (a transmission line's four values) is read as
    one card and shown as ``<element>: IC=...`` (for a ``T`` line, the port-1 voltage and
    current, then port 2's).
    """
    cards: list[str] = []
    for line in netlist.splitlines():
        s = line.strip()
        if not s or s.startswith("*"):
            continue
        if s.startswith("+") and cards:
            cards[-1] += " " + s
        else:
            cards.append(s)
    out = []
    for card in cards:
        low = card.lower()
        if low.startswith(".ic"):
            out.append(card)
        elif " ic=" in low:
            if " + " in card:  # folded: the element's name and its IC= part
                at = low.index(" ic=")
                out.append(f"{card.split()[0]}: {card[at + 1:]}")
            else:
                out.append(card)
    return out


def _run_portable(portable: str, sized, backend: str, timeout_s: float) -> dict:
    from netgen.results import analyse
    from netgen.simulator import run_transient

    f0 = sized.design.f0_hz
    period = 1.0 / f0
    vec = run_transient(portable, backend=backend, timeout_s=timeout_s, keep_s=2.2 * period)
    wf = waveforms_from_vectors(vec, f0, sized.design.sim.points_per_cycle)
    return analyse(wf, sized, portable)


def _waveforms_csv(wf) -> str:
    cols = [("t_s", wf.t_s)]
    for node in ("drain", "load", "vdd", "gate"):
        if node in wf.v:
            cols.append((f"v_{node}_v", wf.v[node]))
    for name in ("drain", "switch", "supply", "gate"):
        if name in wf.i:
            cols.append((f"i_{name}_a", wf.i[name]))
    buf = io.StringIO()
    buf.write(",".join(c[0] for c in cols) + "\n")
    data = np.column_stack([np.asarray(c[1], dtype=float) for c in cols])
    np.savetxt(buf, data, delimiter=",", fmt="%.9e")
    return buf.getvalue()


def _check_target(target: Path) -> None:
    """An existing target must be a folder that is empty or an earlier pack."""
    if target.exists():
        if not target.is_dir():
            raise OutputError(f"{target}: exists and is not a folder; choose another pack folder with -o.")
        if any(target.iterdir()) and not (target / MANIFEST).is_file():
            raise OutputError(f"{target}: exists and is not a pashape pack (no {MANIFEST}); "
                              "choose an empty or new folder with -o so nothing of yours is replaced.")


def _safe_replace(tmp: Path, target: Path) -> None:
    """Move the finished pack into place; an existing target must be a pack or empty."""
    if target.exists():
        _check_target(target)
        old = target.with_name(f".{target.name}.old-{os.getpid()}")
        os.replace(target, old)
        try:
            os.replace(tmp, target)
        except OSError:
            os.replace(old, target)
            raise
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(tmp, target)


def export_pack(design, outdir: str | Path, *, z0_ohm: float = 50.0, verify: bool = True,
                backend: str | None = None, result=None) -> Pack:
    """Write the hand-off pack of ``design`` into ``outdir`` (replacing an earlier pack).

    Parameters
    ----------
    design : netgen.design.schema.Design
    outdir : path
        The pack folder. An existing folder is replaced only if it is empty or
        an earlier pack (it holds :data:`MANIFEST`).
    z0_ohm : float
        Reference impedance of the Touchstone files, ohm (default 50).
    verify : bool
        Re-run the portable netlist in ngspice and lengthen TSTOP until its
        last two periods reproduce pashape's Pdc, Pout and efficiency within
        :data:`REPRODUCE_TOL`.
    backend : {"shared", "batch"}, optional
        Simulator path (default: the design's ``sim.backend``).
    result : netgen.pipeline.RunResult, optional
        A run of this design already made (saves simulating it again).

    Raises
    ------
    OutputError
        The folder cannot be written or is not a pack.
    SimulationError
        ngspice failed, or the portable netlist did not reproduce the metrics
        within the longest allowed run (``sim.max_cycles``).
    RenderError
        The portable netlist is not portable (a template bug; the message lists the problems).

    Length: the pack's files in the order the receiver reads them (netlists in both dialects,
    the state they start on, expected metrics and waveforms, Touchstone, README, manifest), all
    written into one atomic folder.
    """
    from netgen.errors import RenderError
    from netgen.netlist import check_portable, format_problems, portable_cards, render
    from netgen.pipeline import run_design

    outdir = Path(outdir)
    _check_target(outdir)  # before any simulation
    backend = backend or design.sim.backend
    if result is None:
        result = run_design(design, None, plots=False)
    sized, metrics, wf = result.sized, result.metrics, result.waveforms
    f0 = design.f0_hz
    period = 1.0 / f0
    n_max = int(design.sim.harmonics)

    state = _periodic_state(sized) if design.sim.warm_start and design.sim.periodic_start else None
    ic = _warm_ic(sized, backend) if design.sim.warm_start and state is None else {}
    cycles = max(int(wf.cycles), int(design.sim.min_cycles), int(design.sim.average_periods)) + 2
    verify_note = ""
    while True:
        tstop = cycles * period
        portable = render(sized, mode="tran", dialect="portable", tstop_s=tstop, ic=ic)
        if state is not None:
            portable = portable_cards(with_initial_state(portable, state))
        problems = check_portable(portable)
        if problems:
            raise RenderError("The portable netlist is not portable (a template problem):\n" + format_problems(problems))
        if not verify:
            break
        got = _run_portable(portable, sized, backend, design.sim.timeout_s)
        err = reproduce_error(metrics, got)
        if err <= REPRODUCE_TOL:
            verify_note = (f"Portable netlist re-run in ngspice: Pdc, Pout and efficiency within {100 * err:.3f} % "
                           f"of pashape's run (TSTOP = {cycles} periods).")
            break
        if cycles >= design.sim.max_cycles:
            raise SimulationError(
                f"The portable netlist did not reproduce the metrics within {100 * REPRODUCE_TOL:g} % "
                f"after {cycles} periods (worst {100 * err:.2f} %).",
                hint="raise sim.max_cycles, or export with --no-verify and say so to the receiver.")
        cycles = min(2 * cycles, int(design.sim.max_cycles))
    ngspice_net = render(sized, mode="tran", dialect="ngspice", tstop_s=tstop, ic=ic)
    if state is not None:
        ngspice_net = with_initial_state(ngspice_net, state)

    f_hz = pack_grid_hz(f0, n_max)
    z_ac = drain_impedance_ac(sized, f_hz, backend=backend)
    from netgen.synthesis import z_drain

    z_np = np.asarray(z_drain(sized, f_hz), dtype=np.complex128)
    z_dev = float(np.max(np.abs(z_ac - z_np) / np.maximum(np.abs(z_np), 1e-12)))
    harm = np.isin(np.round(f_hz / f0 * 20).astype(int), 20 * np.arange(1, n_max + 1))

    name = design.name
    tran = _tran_settings(portable)
    expected = dict(metrics)
    expected["pack"] = {
        "pashape_version": __version__,
        "sized_digest": sized.digest(),
        "portable_netlist": f"{name}_portable.cir",
        "tstop_s": tstop,
        "periods": cycles,
        "read_window_s": [tstop - 2 * period, tstop],
        "touchstone_z0_ohm": z0_ohm,
        "ac_vs_network_max_rel_dev": z_dev,
        "verify": verify_note,
    }
    comment = (f"pashape {__version__} design {name}: 1-port at the drain, device removed, load attached; "
               f"reference impedance {z0_ohm:g} ohm; digest {sized.digest()}")
    files = {
        f"{name}_portable.cir": portable,
        f"{name}_ngspice.cir": ngspice_net,
        "expected_metrics.json": json.dumps(expected, indent=2, default=_json_default) + "\n",
        "expected_waveforms.csv": _waveforms_csv(wf),
        f"{name}_drain_z.s1p": touchstone_text(f_hz, z_ac, z0_ohm, f"{name}_drain_z", comment),
        f"{name}_drain_z_harmonics.s1p": touchstone_text(f_hz[harm], z_ac[harm], z0_ohm, f"{name}_drain_z_harmonics", comment),
    }
    block_files = _block_files(sized)
    files.update(block_files)
    files["README.md"] = _readme(design, sized, metrics, tran, portable, tstop, cycles, z0_ohm, z_dev,
                                 verify_note, f_hz, z_ac, harm, list(files))
    if block_files:
        files["README.md"] += _block_readme(block_files)
    files[MANIFEST] = json.dumps({"pashape_version": __version__, "design": name, "files": sorted(files)}, indent=2) + "\n"

    parent = outdir.parent if str(outdir.parent) else Path(".")
    try:
        parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{outdir.name}.tmp-", dir=parent))
        os.chmod(tmp, 0o777 & ~current_umask())  # mkdtemp's 0700 -> an ordinary folder (the user's umask)
    except OSError as exc:
        raise OutputError(f"{outdir}: cannot create the pack folder ({exc.strerror}); choose another with -o.") from None
    try:
        for fname, text in files.items():
            (tmp / fname).write_text(text, encoding="utf-8")
        _safe_replace(tmp, outdir)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise OutputError(f"{outdir}: cannot write the pack ({exc.strerror}); choose another folder with -o.") from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return Pack(outdir, sorted(files), tstop, bool(metrics.get("settled")), verify_note, expected)


def _block_files(sized) -> dict[str, str]:
    """A design with a Touchstone block: the original file and the fitted subcircuit (handoff.blocks)."""
    from netgen.netlist import design_block

    from .blocks import block_pack_files

    block = design_block(sized.design)
    return {} if block is None else block_pack_files(block, sized.design.name)


def _block_readme(block_files: dict) -> str:
    original, fit = sorted(block_files, key=lambda n: n.endswith(".sub"))
    return ("\n## Touchstone block\n\n"
            f"- `{original}`: the Touchstone file the design names in [block], as it was read.\n"
            f"- `{fit}`: its rational fit as a SPICE subcircuit (`NGBLOCK`); both netlists carry the same "
            "subcircuit inline at their end. The fit's order, worst error from DC to N f0 and passivity are in its "
            "first line and in `expected_metrics.json` (key `block`).\n")


def _json_default(obj):
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def _readme(design, sized, metrics, tran, portable, tstop, cycles, z0_ohm, z_dev, verify_note,
            f_hz, z_ac, harm, names) -> str:
    """
    Length: mostly the text of the receiver's README (cautions, files, how to run, what to
    compare).
    """
    f0 = design.f0_hz
    period = 1.0 / f0
    name = design.name
    ics = _ic_lines(portable)
    eff = metrics.get("drain_efficiency")
    lines = [
        f"# Hand-off pack: {name}",
        "",
        f"Made by pashape {__version__} from the design `{name}` (topology `{design.topology}`, "
        f"f0 = {f0 / 1e6:.6g} MHz, Vdd = {design.vdd_v:g} V, RL = {design.load_ohm:g} ohm, "
        f"Ropt = {sized.ropt_ohm:.5g} ohm; sized-design digest `{sized.digest()}`).",
        "",
        *_cautions_section(metrics),
        "## What is in the pack",
        "",
        f"- `{name}_portable.cir`: the circuit for any SPICE3-compatible simulator: every model inline, no file "
        "references, no control block, one transient analysis.",
        f"- `{name}_ngspice.cir`: the same circuit as pashape runs it in ngspice (for comparison).",
        "- `expected_metrics.json`: the metrics pashape obtained (key `pack` holds the settings below).",
        "- `expected_waveforms.csv`: two settled periods: time from the start of the reading window (s), "
        "drain/load/supply voltages (V), drain, switch and supply currents (A).",
        f"- `{name}_drain_z.s1p`: S11 of the passive output network seen from the drain (device removed, load "
        f"attached), {f_hz[0] / 1e6:.6g} to {f_hz[-1] / 1e6:.6g} MHz in {(f_hz[1] - f_hz[0]) / 1e6:.6g} MHz steps "
        f"(every harmonic n f0 is a grid point); `{name}_drain_z_harmonics.s1p`: the n f0 points only. "
        f"Touchstone 1.0, real/imaginary, reference impedance {z0_ohm:g} ohm.",
        f"- `{MANIFEST}`: the list of files.",
        "",
        "## Analysis settings",
        "",
        f"- Card: `{tran['card']}`",
        f"- TSTEP = {tran['tstep']}, TSTOP = {tran['tstop']} ({cycles} periods of {period * 1e9:.6g} ns), "
        f"TSTART = {tran['tstart']}, TMAX = {tran['tmax']} (the largest step; keep it: a coarser step changes "
        "the switching losses).",
        f"- Initial conditions: {'`uic` with the element IC= values below' if tran['uic'] else 'none (DC operating point)'}:",
    ]
    lines += [f"  - `{s}`" for s in ics] or ["  - (none)"]
    if any(s.lower().startswith("t") for s in ics):
        lines.append("  - A transmission line's `IC=v1,i1,v2,i2` is the voltage and current at its first port, "
                     "then at its second.")
    if any(ln.startswith(("Vhist_", "Ihist_")) for ln in portable.splitlines()):
        lines += [
            "- Line history: the sources `Vhist_*` (in series with each transmission-line port) and `Ihist_*` "
            "(into each port) give every line the waves it carries in the periodic steady state during its first "
            "delay, and are zero from then on, so that the circuit is the plain one after that. With them and "
            "the IC= values the run starts on the periodic state pashape computed and needs only a few periods. "
            "To start from zero instead, delete them, the IC= values and `uic`, and run several hundred periods.",
        ]
    lines += [
        "",
        "## Which window to read",
        "",
        f"Read the last two periods: t = {(tstop - 2 * period) * 1e9:.6g} ns to {tstop * 1e9:.6g} ns. "
        "Resample onto a uniform grid (the CSV uses "
        f"{design.sim.points_per_cycle} points a period) with the window start as t = 0; the switch drive starts "
        "at t = 0, so the window starts on a period boundary and the phases match the CSV.",
        "",
        "## How to compute the metrics",
        "",
        "- Fourier coefficients over the two periods: X_n = (2/N) sum x_k exp(-j n w0 t_k) for n >= 1, X_0 = mean.",
        "- DC power Pdc = Vdd x mean(supply current) (the supply current is minus the `VDD` branch current).",
        "- Output power Pout = |V_1(load)|^2 / (2 RL), the fundamental power in `RLOAD`.",
        "- Drain efficiency = Pout / Pdc. Harmonic level n: |V_n(load)|^2 / |V_1(load)|^2 in dB (dBc).",
        "- Harmonic impedance at the drain: Z_n = V_n(drain) / (-I_n(drain)), with the drain current the "
        "`VIDRAIN` branch current (into the device).",
        "- Peak drain voltage over Vdd: max v(drain) / Vdd over the window.",
        "",
        "## What to expect",
        "",
        "| metric | value |",
        "| --- | --- |",
        f"| settled (pashape) | {metrics.get('settled')} after {metrics.get('cycles')} cycles |",
        f"| Pdc | {_fmt(metrics.get('pdc_w'))} W |",
        f"| Pout (fundamental) | {_fmt(metrics.get('pout_w'))} W |",
        f"| drain efficiency | {_fmt(None if eff is None else 100 * eff)} % |",
        f"| peak v(drain) / Vdd | {_fmt(metrics.get('peak_vd_over_vdd'))} |",
        f"| peak drain current | {_fmt(metrics.get('peak_id_a'))} A |",
    ]
    for h in metrics.get("harmonics", []):
        z = "-" if h.get("z_re_ohm") is None else f"{h['z_re_ohm']:.4g} {'+' if h['z_im_ohm'] >= 0 else '-'} j{abs(h['z_im_ohm']):.4g} ohm"
        lines.append(f"| harmonic {h['n']}: level, Z at drain | {_fmt(h.get('pload_dbc'))} dBc, {z} |")
    lines += [
        "",
        "A run that agrees within 0.5 % on Pdc, Pout and efficiency reproduces the design. The peak drain "
        "voltage is the maximum of sampled points on a switching spike; expect a few per cent from time-step "
        "placement.",
        verify_note or "The portable netlist was not re-run at export (--no-verify).",
        "",
        "Network impedance at the harmonics (from the Touchstone data):",
        "",
        "| n | Re Z (ohm) | Im Z (ohm) |",
        "| --- | --- | --- |",
    ]
    for f, z in zip(f_hz[harm], z_ac[harm]):
        lines.append(f"| {f / f0:.0f} | {z.real:.5g} | {z.imag:.5g} |")
    lines += [
        "",
        f"The AC analysis agrees with pashape's frequency-domain network model within {100 * z_dev:.3g} % over the grid.",
        "",
    ]
    return "\n".join(lines)


def _cautions_section(metrics: dict) -> list[str]:
    """The pack README's full safety cautions (the same texts as the report's, netgen.results.cautions)."""
    from netgen.results import caution_texts

    peak = metrics.get("peak_vd_over_vdd")
    return ["## Safety cautions", "",
            "The circuit in this pack, once built, can hurt people. Read these before building or powering it:", "",
            *[f"- {text}" for text in caution_texts(peak if isinstance(peak, (int, float)) else None)], ""]


def _fmt(x) -> str:
    return "-" if x is None else f"{x:.5g}"
