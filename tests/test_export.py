"""Hand-off pack (netgen.handoff.export) and `pashape export`.

Outside references: the pack's portable netlist is re-run by the ngspice
executable in its SPICE3 compatibility mode (ngspice user's manual,
"Compatibility": `set ngbehavior=...` in .spiceinit; ngspice 39 accepts `s3`
and reports "Compatibility modes selected: s3", checked below) and analysed by
the same analysis code; the Touchstone file is read back by scikit-rf and its
S11 converted to Z = Z0 (1 + S11) / (1 - S11) (Pozar, "Microwave Engineering",
reflection coefficient), compared with the network's impedance.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from netgen.handoff.export import pack_grid_hz, reproduce_error, touchstone_text, waveforms_from_vectors

SIMS = Path(__file__).resolve().parents[1] / "sims"
DESIGN = SIMS / "class_f_line.toml"


def test_pack_grid_holds_every_harmonic():
    f0 = 915e6
    f = pack_grid_hz(f0, 5)
    assert f[0] == pytest.approx(0.5 * f0) and f[-1] == pytest.approx(5.5 * f0)
    for n in range(1, 6):
        assert np.min(np.abs(f - n * f0)) <= 1e-9 * f0


def test_touchstone_round_trip_through_scikit_rf(tmp_path):
    import skrf

    # a 50 ohm load in parallel with 1 nH at 1-5 GHz: Z = jwL R / (R + jwL) (circuit theory)
    f = np.array([1e9, 2e9, 3e9])
    w = 2 * np.pi * f
    z = 1j * w * 1e-9 * 50 / (50 + 1j * w * 1e-9)
    path = tmp_path / "t.s1p"
    path.write_text(touchstone_text(f, z, 50.0, "t", "test"), encoding="utf-8")
    ntw = skrf.Network(str(path))
    np.testing.assert_allclose(ntw.f, f)
    np.testing.assert_allclose(ntw.z[:, 0, 0], z, rtol=1e-9)  # skrf's s2z (Pozar)


def test_reproduce_error_is_relative():
    assert reproduce_error({"pdc_w": 1.0, "pout_w": 1.0, "drain_efficiency": 1.0},
                           {"pdc_w": 1.004, "pout_w": 1.0, "drain_efficiency": 0.99}) == pytest.approx(0.01)


def _raw_vectors(raw_path: Path) -> dict:
    """ngspice raw-file names -> the engine's names (v(x) -> x, i(x) -> x#branch)."""
    from netgen.simulator.rawfile import read_raw

    plot = read_raw(raw_path)[-1]
    out = {}
    for name, data in plot.data.items():
        low = name.lower()
        if low.startswith("v(") and low.endswith(")"):
            out[low[2:-1]] = data
        elif low.startswith("i(") and low.endswith(")"):
            out[low[2:-1] + "#branch"] = data
        else:
            out[low] = data
    return out


@pytest.fixture(scope="module")
def pack(tmp_path_factory):
    from netgen.design.schema import load_design
    from netgen.handoff.export import export_pack

    out = tmp_path_factory.mktemp("packs") / "pack"
    design = load_design(DESIGN)
    result = export_pack(design, out, verify=False)
    return design, result


@pytest.mark.ngspice
@pytest.mark.slow
def test_pack_contents(pack):
    from netgen.netlist.portable import check_portable, format_problems
    from test_portable import pyspice_read_check

    design, result = pack
    names = set(result.files)
    stem = design.name
    assert {f"{stem}_portable.cir", f"{stem}_ngspice.cir", "README.md", "expected_metrics.json",
            "expected_waveforms.csv", f"{stem}_drain_z.s1p", f"{stem}_drain_z_harmonics.s1p",
            "pack_manifest.json"} <= names
    portable = (result.outdir / f"{stem}_portable.cir").read_text()
    assert check_portable(portable) == [], format_problems(check_portable(portable))
    pyspice_read_check(portable)
    assert str(Path.home()) not in portable and "/tmp" not in portable
    readme = (result.outdir / "README.md").read_text()
    for words in ("TSTEP", "TMAX", "TSTOP", "Initial conditions", "Which window to read", "Safety cautions"):
        assert words in readme
    # the full cautions: high voltage, RF burns and exposure, emission limits, codes and licensed practice
    for words in ("High voltage", "RF burns and exposure", "Emission limits", "local codes", "licensed practice"):
        assert words in readme
    # every IC= line of the README names its element (transmission lines are folded cards)
    ic_items = [line for line in readme.splitlines() if line.startswith("  - `") and "IC=" in line]
    assert ic_items and all(re.match(r"  - `[A-Za-z]\w*[ :]", line) for line in ic_items)
    wave = np.loadtxt(result.outdir / "expected_waveforms.csv", delimiter=",", skiprows=1)
    assert wave.shape[0] == 2 * design.sim.points_per_cycle  # two periods
    # no temporary folder is left beside the pack
    assert [p.name for p in result.outdir.parent.iterdir()] == ["pack"]


@pytest.mark.ngspice
@pytest.mark.slow
def test_portable_netlist_reproduces_in_spice3_mode(pack, tmp_path):
    from netgen.results.analysis import analyse
    from netgen.synthesis.sizing import size

    design, result = pack
    exe = shutil.which("ngspice")
    assert exe, "the ngspice executable is needed (CI installs it)"
    run = tmp_path / "run"
    shutil.copytree(result.outdir, run)
    (run / ".spiceinit").write_text("set ngbehavior=s3\n", encoding="ascii")
    cir = f"{design.name}_portable.cir"
    proc = subprocess.run([exe, "-b", "-r", "out.raw", cir], cwd=run, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-2000:]
    assert "Compatibility modes selected: s3" in proc.stdout + proc.stderr
    vec = _raw_vectors(run / "out.raw")
    wf = waveforms_from_vectors(vec, design.f0_hz, design.sim.points_per_cycle)
    portable = (run / cir).read_text()
    got = analyse(wf, size(design), portable)
    expected = json.loads((run / "expected_metrics.json").read_text())
    for key in ("pdc_w", "pout_w", "drain_efficiency", "pload_total_w"):
        assert got[key] == pytest.approx(expected[key], rel=5e-3), key  # the pack's promise: 0.5 %
    # fundamental drain voltage and impedance too (the sampled peak of a switching spike depends on
    # where the time points fall, so it is not part of the promise)
    assert got["harmonics"][0]["vd_v"] == pytest.approx(expected["harmonics"][0]["vd_v"], rel=5e-3)
    assert got["harmonics"][0]["z_re_ohm"] == pytest.approx(expected["harmonics"][0]["z_re_ohm"], rel=5e-3)


@pytest.mark.ngspice
@pytest.mark.slow
def test_touchstone_matches_network_impedance(pack):
    import skrf

    from netgen.handoff.export import drain_impedance_ac
    from netgen.synthesis.network import z_drain
    from netgen.synthesis.sizing import size

    design, result = pack
    sized = size(design)
    ntw = skrf.Network(str(result.outdir / f"{design.name}_drain_z.s1p"))
    assert float(np.real(ntw.z0[0, 0])) == pytest.approx(50.0)
    z_file = ntw.z[:, 0, 0]  # Z = Z0 (1 + S) / (1 - S) (Pozar)
    z_ac = drain_impedance_ac(sized, ntw.f)  # a fresh ngspice AC analysis of the rendered ac netlist
    np.testing.assert_allclose(z_file, z_ac, rtol=5e-3)
    np.testing.assert_allclose(z_file, z_drain(sized, ntw.f), rtol=5e-3)
    # quarter-wave line (Pozar): the drain sees Ropt at f0 through the line, within the tank's detuning
    k1 = int(np.argmin(np.abs(ntw.f - design.f0_hz)))
    assert abs(z_file[k1]) == pytest.approx(sized.ropt_ohm, rel=0.1)


def test_export_command_refuses_a_foreign_folder(tmp_path):
    from click.testing import CliRunner

    from netgen.cli.handoff import export_command

    target = tmp_path / "mine"
    target.mkdir()
    (target / "notes.txt").write_text("keep me", encoding="utf-8")
    out = CliRunner().invoke(export_command, [str(DESIGN), "-o", str(target), "--no-verify"])
    assert out.exit_code == 2, out.output
    assert "is not a pashape pack" in out.output
    assert (target / "notes.txt").read_text() == "keep me"


def test_ic_lines_name_the_element_of_folded_line_cards():
    from netgen.handoff.export import _ic_lines

    netlist = ("* a line folded onto a continuation card\n"
               "L_feed vdd drain 6e-07 IC=0.33\n"
               "T_line_1 a 0 b 0 Z0=53.7 TD=9.1e-11\n"
               "+ IC=25.0,0.31,12.2,-0.51\n"
               "RLOAD b 0 50\n")
    assert _ic_lines(netlist) == ["L_feed vdd drain 6e-07 IC=0.33", "T_line_1: IC=25.0,0.31,12.2,-0.51"]


def test_pack_readme_cautions_in_full_even_after_the_report_module_loaded():
    # the report module loaded first (as in a run) must not shadow the caution texts the pack uses
    import netgen.results.report  # noqa: F401
    from netgen.handoff.export import _cautions_section

    text = "\n".join(_cautions_section({"peak_vd_over_vdd": 3.56}))
    for words in ("High voltage", "3.56 x Vdd", "RF burns and exposure", "Emission limits", "local codes",
                  "licensed practice"):
        assert words in text


@pytest.mark.ngspice
def test_pack_folder_and_files_follow_the_umask(tmp_path):
    # the pack is an ordinary folder: 0777/0666 less the user's umask (common practice for files a
    # program writes), not mkdtemp's private 0700
    import os
    import stat

    from netgen.design.schema import load_design
    from netgen.handoff.export import export_pack

    old = os.umask(0o027)
    try:
        out = tmp_path / "pack"
        export_pack(load_design(DESIGN), out, verify=False)
    finally:
        os.umask(old)
    assert stat.S_IMODE(out.stat().st_mode) == 0o750
    assert {stat.S_IMODE(f.stat().st_mode) for f in out.iterdir()} == {0o640}
