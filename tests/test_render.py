"""Rendering: conventions, determinism, dialects, devices, user templates; ngspice runs the output."""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from numpy.testing import assert_allclose

from netgen.design.schema import design_from_dict, load_design
from netgen.errors import RenderError
from netgen.netlist.renderer import ac_grid, loss_elements, render
from netgen.synthesis.sizing import size

SIMS = Path(__file__).resolve().parents[1] / "sims"
EXAMPLES = sorted(SIMS.glob("*.toml"))


def make(topology="class_f_line", device=None, network=None, sim=None, **design):
    doc = {
        "design": {"name": "t", "topology": topology, "f0": "1 GHz", "vdd": "10 V", "load": "50 ohm", "ropt": "100 ohm", **design},
        "device": device or {"model": "switch"},
        "network": network or {},
        "sim": sim or {"points_per_cycle": 200, "max_cycles": 20},
    }
    return design_from_dict(doc)


def run_ngspice(netlist: str, tmp_path: Path) -> subprocess.CompletedProcess:
    """Run the ngspice executable in batch mode; results to a raw file."""
    exe = shutil.which("ngspice")
    assert exe, "ngspice executable not found (CI installs it)"
    cir = tmp_path / "net.cir"
    cir.write_text(netlist)
    return subprocess.run([exe, "-b", "-r", str(tmp_path / "out.raw"), str(cir)], capture_output=True, text=True, cwd=tmp_path)


def ngspice_ok(proc: subprocess.CompletedProcess) -> bool:
    log = proc.stdout + proc.stderr
    return proc.returncode == 0 and not re.search(r"(?i)\berror\b|timestep too small|singular", log)


# ------------------------------------------------------------ every example

@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_examples_render_all_modes(path):
    s = size(load_design(path))
    for dialect in ("ngspice", "portable"):
        for mode in ("tran", "ac", "op"):
            text = render(s, mode, dialect)
            assert text.startswith("* pashape ") and text.endswith(".end\n")
            assert "VDD vdd 0 DC " in text and re.search(r"^RLOAD load 0 ", text, re.M)


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_shipped_templates_render_the_same_outside_the_sandbox(path, monkeypatch):
    # the shipped templates render in a plain Jinja environment (package code, no per-call
    # checks); the text must be byte for byte what the sandbox gives, in every mode and dialect
    import netgen.netlist.renderer as renderer

    s = size(load_design(path))
    plain = {(m, dl): render(s, m, dl) for dl in ("ngspice", "portable") for m in ("tran", "ac", "op")}
    original = renderer._run_template
    monkeypatch.setattr(renderer, "_run_template", lambda d, ctx, name: original(d, ctx, name, sandbox=True))
    boxed = {(m, dl): render(s, m, dl) for dl in ("ngspice", "portable") for m in ("tran", "ac", "op")}
    assert plain == boxed
    assert renderer._package_environment() is not renderer._environment()


@pytest.mark.ngspice
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_examples_tran_runs_in_ngspice(path, tmp_path):
    d = load_design(path)
    s = size(d)
    text = render(s, "tran", tstop_s=20 * d.period_s, ic={"L_feed": s.idc_est_a})
    proc = run_ngspice(text, tmp_path)
    assert ngspice_ok(proc), proc.stdout[-2000:] + proc.stderr[-2000:]
    assert (tmp_path / "out.raw").stat().st_size > 1000


@pytest.mark.ngspice
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_portable_dialect_runs_in_ngspice(path, tmp_path):
    # Every example as the portable dialect writes it; the line topologies carry
    # .options minbreak=TMAX/100 (docs/simulator_notes.md, measured: without it ngspice 39 can stall on T lines in
    # switching circuits), the others no .options at all (docs/portable_dialect.md).
    d = load_design(path)
    s = size(d)
    text = render(s, "tran", "portable", tstop_s=10 * d.period_s, ic={"L_feed": s.idc_est_a})
    assert (".options minbreak=" in text) == bool(re.search(r"^T", text, re.M))
    proc = run_ngspice(text, tmp_path)
    assert ngspice_ok(proc), proc.stdout[-2000:]
    assert (tmp_path / "out.raw").stat().st_size > 1000


# ------------------------------------------------------------ conventions

def test_conventions_tran_ac_op():
    s = size(make(network={"inductor_q": 50}))
    tran = render(s, "tran")
    for line in ("VIDRAIN drain dint DC 0", "VISW dint dsw DC 0", "L_feed vdd drain ", "C_block drain n1 ",
                 "T_line n1 0 load 0 Z0=70.71067812 TD=2.5e-10"):
        assert line in tran
    # abrupt S switch, fully off at t = 0: the control pulse starts at 0 V, below VT - VH
    assert "S_SW dsw 0 ctrl 0 SWMOD" in tran and "PULSE(0 1 0 " in tran
    # tmax = T/points_per_cycle, tstop = max_cycles periods, minbreak = 0.01 tmax (docs/simulator_notes.md)
    assert ".tran 5e-12 2e-08 0 5e-12 uic" in tran and "minbreak=5e-14" in tran
    assert "vdd#branch" in tran and "vidrain#branch" in tran and "visw#branch" in tran
    ac = render(s, "ac")
    assert "IPORT 0 drain AC 1" in ac and "VIDRAIN" not in ac and "S_SW" not in ac and ".ac lin" in ac
    op = render(s, "op", idc_a=0.25)
    assert "IPORT drain 0 DC 0.25" in op and ".op" in op


def test_ic_values_only_in_tran():
    s = size(make())
    tran = render(s, "tran", ic={"L_feed": 0.08, "C_block": 10.0})
    assert re.search(r"^L_feed vdd drain \S+ IC=0\.08$", tran, re.M)
    assert re.search(r"^C_block drain n1 \S+ IC=10$", tran, re.M)
    assert "IC=" not in render(s, "ac", ic={"L_feed": 0.08})


def test_deterministic_bytes():
    a = render(size(make()), "tran")
    b = render(size(make()), "tran")
    assert a == b
    assert render(size(load_design(SIMS / "demo.toml"))) == render(size(load_design(SIMS / "demo.toml")))


def test_header_lists_components_and_digest():
    s = size(make())
    text = render(s)
    from netgen import __version__

    assert f"pashape {__version__} netlist" in text.splitlines()[0]
    assert f"digest {s.digest()}" in text
    for name, c in s.components.items():
        assert f"*   {name} = " in text and c.how in text


def test_loss_elements_values():
    # inductor loss R = omega0 L / Q (definition of unloaded Q, Pozar ch. 6); ESR as given
    # (the fixed law: one resistor; the frequency laws are checked in tests/test_losses.py)
    s = size(make(network={"inductor_q": 40, "capacitor_esr": "0.1 ohm", "inductor_loss_law": "fixed"}))
    losses = {n: (a, b, r) for n, a, b, r in loss_elements(render(s))}
    w = 2 * math.pi * 1e9
    assert_allclose(losses["RLOSS_tank_l"][2], w * s.value("tank_l") / 40, rtol=1e-9)
    assert losses["RLOSS_block_c"][2] == 0.1 and losses["RLOSS_tank_c"][2] == 0.1
    assert "RLOSS_feed_l" not in losses  # the choke is lossless by design (its loss is DC resistance)
    assert ".save v(x_block_c)" in render(s)


def test_lossy_line_segments():
    # 2 equal resistors between 3 segments, each passing |S21| = 1/(1 + R/(2 Z0)) (Pozar), so
    # together 0.2 dB: R = 2 Z0 (10^(0.2/(20*2)) - 1) (network.line_plan)
    s = size(make(network={"line_loss": "0.2 dB", "line_loss_law": "fixed"}))
    text = render(s)
    segs = re.findall(r"^T_line_(\d) ", text, re.M)
    assert segs == ["1", "2", "3"]
    rs = [r for n, a, b, r in loss_elements(text) if n.startswith("RLOSS_line_")]
    assert_allclose(rs, [2 * s.value("line_z0") * (10 ** (0.2 / 40) - 1)] * 2, rtol=1e-8)


def test_portable_dialect_subset():
    s = size(make("class_b_tuned", device={"model": "gm", "vknee": "1 V"}))
    text = render(s, "tran", "portable")
    assert ".options" not in text and ".control" not in text and "minbreak" not in text
    b = [ln for ln in text.splitlines() if ln.startswith("BDEV")][0]
    # only SPICE3 B-source functions
    assert set(re.findall(r"([a-z]+)\(", b)) <= {"uramp", "tanh", "u", "abs", "v"}
    assert "VDRIVE gate 0 SIN(" in text and "RGIN gate 0 50" in text


def test_transition_switch_is_conductance_with_edges():
    s = size(make(device={"model": "switch", "transition": 0.02}))
    text = render(s)
    assert "S_SW" not in text and re.search(r"^BSW dsw 0 I=v\(dsw\)\*\(", text, re.M)
    assert "PULSE(0 1 0 2e-11 2e-11 4.8e-10 1e-09)" in text


def test_spice_device(tmp_path):
    model = tmp_path / "fet.lib"
    model.write_text(".subckt MYFET d g s\nG1 d s g s 0.5\nC1 d s 1p\n.ends MYFET\n")
    (tmp_path / "d.toml").write_text(
        '[design]\nname="x"\ntopology="class_b_tuned"\nf0="1 GHz"\nvdd="10 V"\nropt="50 ohm"\n'
        '[device]\nmodel="spice"\ninclude="fet.lib"\nsubckt="MYFET"\npins=["gate","drain","source"]\nvgate_amp="2 V"\n'
        '[sim]\npoints_per_cycle=200\nmax_cycles=10\n'
    )
    s = size(load_design(tmp_path / "d.toml"))
    ng = render(s)
    assert f'.include "{model.resolve()}"' in ng and "XDEV gate dsw 0 MYFET" in ng
    port = render(s, dialect="portable")
    assert ".include" not in port and str(tmp_path) not in port and "G1 d s g s 0.5" in port
    model.write_text(".control\nshell rm -rf /\n.endc\n")
    for dialect in ("portable", "ngspice"):  # ngspice runs .control blocks of included files
        with pytest.raises(RenderError, match=r"^device\.include: model file .*fet\.lib line 1: '\.control' starts an ngspice control command"):
            render(s, dialect=dialect)


def test_user_template(tmp_path):
    (tmp_path / "mine.j2").write_text(
        '{# sizing: class_f_line #}\n{% import "devices.j2" as dev with context %}\n{{ dev.header() }}\n'
        '{{ dev.supply() }}\n{{ dev.lossy_l(comp.feed_l, "vdd", "drain") }}\n'
        '{{ dev.lossy_c(comp.block_c, "drain", "load") }}\nRLOAD load 0 {{ design.load_ohm|n }}\n'
        '{{ dev.device_block() }}\n{{ dev.analysis() }}\n'
    )
    doc = '[design]\nname="u"\ntopology="{}"\nf0="1 GHz"\nvdd="10 V"\nropt="50 ohm"\n'
    (tmp_path / "d.toml").write_text(doc.format("mine.j2"))
    text = render(size(load_design(tmp_path / "d.toml")))
    assert "C_block drain load" in text and "S_SW" in text
    (tmp_path / "bad.j2").write_text('{# sizing: class_f_line #}\n{{ nothing_here }}\n')
    (tmp_path / "d2.toml").write_text(doc.format("bad.j2"))
    with pytest.raises(RenderError, match="nothing_here"):
        render(size(load_design(tmp_path / "d2.toml")))
    (tmp_path / "evil.j2").write_text("{# sizing: class_f_line #}\n{{ design.__class__.__mro__ }}\n")
    (tmp_path / "d3.toml").write_text(doc.format("evil.j2"))
    with pytest.raises(RenderError):
        render(size(load_design(tmp_path / "d3.toml")))
    (tmp_path / "notag.j2").write_text("* nothing\n")
    (tmp_path / "d4.toml").write_text(doc.format("notag.j2"))
    with pytest.raises(RenderError, match=r"sizing: class_f_line"):
        size(load_design(tmp_path / "d4.toml"))


def test_bad_mode_and_dialect():
    s = size(make())
    with pytest.raises(RenderError, match=r"^mode: 'dc'"):
        render(s, "dc")
    with pytest.raises(RenderError, match=r"^dialect: 'zorb'"):
        render(s, dialect="zorb")


def test_ac_grid_contains_harmonics_exactly():
    f0 = 915e6
    n, f1, f2 = ac_grid([k * f0 for k in range(1, 6)])
    step = (f2 - f1) / (n - 1)
    assert (n, f1, f2) == (5, f0, 5 * f0)
    assert_allclose(f1 + 2 * step, 3 * f0, rtol=1e-15)
    n, f1, f2 = ac_grid([1e9, 1.5e9, 2.2e9])
    assert n == 13 and f1 == 1e9 and f2 == 2.2e9
    s = size(make())
    assert ".ac lin 250 20000000 5000000000" in render(s, "ac")  # f0/50 steps up to 5 f0


@pytest.mark.ngspice
def test_ac_grid_of_two_frequencies_returns_both():
    # Measured with ngspice 39: ".ac lin 2 f1 f2" gives only f1; the grid then takes 3 points.
    from netgen.simulator.engine import run_ac

    assert ac_grid([1e9, 2e9]) == (3, 1e9, 2e9)
    s = size(make())
    freq, vec = run_ac(render(s, "ac", ac_freqs_hz=[s.design.f0_hz, 2 * s.design.f0_hz]))
    assert_allclose(freq[[0, -1]], [s.design.f0_hz, 2 * s.design.f0_hz], rtol=1e-12)
    assert len(vec["drain"]) == 3


@pytest.mark.ngspice
@pytest.mark.parametrize("device", [
    {"model": "switch", "transition": 0.02},
    {"model": "gm", "vknee": "1 V", "conduction_angle": "220 deg"},
    {"model": "switch", "cout": "1 pF", "duty": 0.4},
], ids=["transition", "gm", "cout"])
def test_device_variants_run_in_ngspice(device, tmp_path):
    s = size(make("class_f_lumped", device=device, network={"inductor_q": 60}))
    proc = run_ngspice(render(s, "tran", tstop_s=10e-9), tmp_path)
    assert ngspice_ok(proc), proc.stdout[-2000:]


@pytest.mark.ngspice
def test_spice_device_runs_in_ngspice(tmp_path):
    (tmp_path / "fet.lib").write_text(".subckt MYFET d g s\nG1 d s g s 0.5\nC1 d s 1p\n.ends MYFET\n")
    (tmp_path / "d.toml").write_text(
        '[design]\nname="x"\ntopology="class_b_tuned"\nf0="1 GHz"\nvdd="10 V"\nropt="50 ohm"\n'
        '[device]\nmodel="spice"\ninclude="fet.lib"\nsubckt="MYFET"\npins=["drain","gate","source"]\n'
        '[sim]\npoints_per_cycle=200\nmax_cycles=10\n'
    )
    s = size(load_design(tmp_path / "d.toml"))
    for dialect in ("ngspice", "portable"):
        proc = run_ngspice(render(s, "tran", dialect), tmp_path)
        assert ngspice_ok(proc), proc.stdout[-2000:]


@pytest.mark.ngspice
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_op_mode_choke_carries_idc(path):
    # KCL: at DC every capacitor is open, so the port's DC current flows through the feed choke
    # and the supply alone (docs/netlist_conventions.md, op mode).
    from netgen.simulator.engine import run_op

    s = size(load_design(path))
    op = run_op(render(s, "op", idc_a=0.3), backend="batch")
    assert_allclose(op["l_feed#branch"], 0.3, rtol=1e-6)
    assert_allclose(-op["vdd#branch"], 0.3, rtol=1e-6)
