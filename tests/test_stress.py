"""Stress on every part (netgen.results.stress) against analytical values."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from netgen.design.schema import load_design
from netgen.netlist.renderer import render
from netgen.periodic.steady import simulate
from netgen.results.analysis import analyse
from netgen.synthesis.sizing import size

SIMS = Path(__file__).resolve().parents[1] / "sims"


@pytest.fixture(scope="module")
def class_e_run():
    s = size(load_design(SIMS / "class_e.toml"))
    wf = simulate(s, backend="batch")
    return s, analyse(wf, s, render(s, "tran"))


@pytest.mark.ngspice
def test_class_e_series_capacitor_voltage(class_e_run):
    # Sokal & Sokal 1975 / Raab 1977: the series-tuned branch carries a sine of amplitude
    # I = sqrt(2 P/R) into the load resistance R, so the series capacitor C0 swings |I| X_C,
    # X_C = 1/(omega0 C0); it also holds the supply as a DC block (peak |v| = Vdd + |I| X_C).
    s, m = class_e_run
    x_c = 1.0 / (2 * math.pi * s.design.f0_hz * s.value("series_c"))
    i_load = math.sqrt(2.0 * m["pout_w"] / s.ropt_ohm)
    st = m["stress"]["C_series"]
    assert abs(st["v_ac_peak_v"] / (i_load * x_c) - 1.0) < 0.02, (st, i_load * x_c)
    assert abs(st["v_peak_v"] / (s.design.vdd_v + i_load * x_c) - 1.0) < 0.02
    # the same current through the series inductor (RMS = amplitude/sqrt 2 for a near sine)
    assert abs(m["stress"]["L_series"]["i_rms_a"] * math.sqrt(2) / i_load - 1.0) < 0.02


@pytest.mark.ngspice
def test_stress_covers_every_part_and_losses_match_budget(class_e_run):
    # every L and C of the netlist has an entry; each lossy part's dissipation is the loss
    # budget's figure for it (both mean(v_R^2)/R of its RLOSS resistor: a definition, Joule's law)
    _s, m = class_e_run
    names = {"L_feed", "C_shunt", "C_series", "L_series", "L_excess", "COUT"}
    assert names <= set(m["stress"])
    for comp in ("series_l", "excess_l", "series_c"):
        el = ("L_" if comp.endswith("_l") else "C_") + comp[:-2]
        assert abs(m["stress"][el]["p_loss_w"] - m["losses"][comp]) < 1e-9 * max(1.0, m["losses"][comp])
    assert m["stress_cap_v_peak_part"] == "C_series"


def test_buildability_flags_tiny_parts():
    # the example of unbuildable parts: a 5.8 GHz inverse F whose Cout compensator needs
    # ~0.2-0.5 nH inductors (below the smallest chip inductors, about 0.5 nH; common practice,
    # recalled from memory) is flagged part by part with what to do; a 6.78 MHz class E is not
    from netgen.design.schema import design_from_dict
    from netgen.results.stress import buildability_warnings

    d = design_from_dict({
        "design": {"name": "invf_5g8", "topology": "inverse_f_line", "f0": "5.8 GHz", "vdd": "12 V", "pout": "2 W"},
        "device": {"cout": "0.8 pF"},
    })
    warns = buildability_warnings(size(d))
    assert any(w.startswith("part comp1_l = ") and "transmission-line stub" in w for w in warns), warns
    assert buildability_warnings(size(load_design(SIMS / "class_e.toml"))) == []


def _srf_design(**srf):
    from netgen.design.schema import design_from_dict

    return design_from_dict({
        "design": {"name": "srf", "topology": "class_b_tuned", "f0": "900 MHz", "vdd": "12 V", "load": "50 ohm", "pout": "2 W"},
        "device": {"model": "gm"},
        "network": {"inductor_q": 50, "srf": srf},
    })


def test_srf_warning_below_twice_the_highest_harmonic():
    # common practice (recalled from memory): a part's self-resonant frequency should sit well above the
    # highest frequency it works at (SRF_MARGIN = 2 here); a tuned class B shorts every harmonic up to
    # sim.harmonics = 5, so its tank acts up to 5 f0 = 4.5 GHz and the threshold is 9 GHz
    from netgen.results.stress import SRF_MARGIN, acting_harmonic, buildability_warnings

    s = size(_srf_design(tank_l="4 GHz", tank_c="6 GHz", block_c="20 GHz"))
    assert acting_harmonic(s) == 5 and SRF_MARGIN == 2.0
    warns = [w for w in buildability_warnings(s) if "self-resonant" in w]
    assert len(warns) == 2, warns
    l_warn = next(w for w in warns if w.startswith("part tank_l"))
    assert "4000 MHz, below 5 f0 = 4500 MHz" in l_warn and "above 9000 MHz" in l_warn
    c_warn = next(w for w in warns if w.startswith("part tank_c"))
    assert "within a factor 2 of 5 f0" in c_warn
    # an SRF at 2 x the acting harmonic or above: no warning (block_c at 20 GHz, the rest unlisted)
    assert not any("self-resonant" in w for w in buildability_warnings(size(_srf_design(tank_l="9 GHz"))))


def test_srf_key_errors_are_one_sentence():
    # a name that is no inductor or capacitor of the sized network, and a value that is no frequency:
    # DesignError (exit code 2) naming the key
    from netgen.errors import DesignError

    with pytest.raises(DesignError, match=r"network\.srf\.tank_x: .*name one of feed_l, block_c, tank_l, tank_c"):
        size(_srf_design(tank_x="4 GHz"))
    with pytest.raises(DesignError, match=r"network\.srf\.tank_l"):
        _srf_design(tank_l="4 nH")


def test_srf_and_size_warnings_in_cli(tmp_path):
    # `pashape size` prints the buildability warnings (the same sentences `pashape run` puts in
    # metrics.json "warnings") on stderr and still writes the sized file, which keeps [network.srf]
    from click.testing import CliRunner

    from netgen.cli import cli
    from netgen.design.schema import load_design as load

    src = tmp_path / "d.toml"
    src.write_text('[design]\nname = "d"\ntopology = "class_b_tuned"\nf0 = "900 MHz"\nvdd = "12 V"\nload = "50 ohm"\n'
                   'pout = "2 W"\n[device]\nmodel = "gm"\n[network.srf]\ntank_l = "3 GHz"\n')
    out = tmp_path / "sized.toml"
    res = CliRunner().invoke(cli, ["size", str(src), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "Warning: part tank_l (inductor" in res.output and "self-resonant frequency of 3000 MHz" in res.output
    assert load(out).network.srf_hz == {"tank_l": 3e9}
