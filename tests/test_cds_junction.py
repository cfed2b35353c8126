"""The angelov device's voltage-dependent drain-source capacitance (device.cds_law = "junction",
docs/devices.md): its C-V in ngspice against the depletion law, the linear default unchanged line
for line, the periodic start with the junction, and a bad key refused in one line."""

from __future__ import annotations

import copy
import math
import subprocess
import sys
from pathlib import Path

import pytest
import tomllib

from netgen.design import design_from_dict
from netgen.errors import DesignError
from netgen.netlist import cds_junction, check_portable, read_cards, render
from netgen.synthesis import size

SIMS = Path(__file__).resolve().parents[1] / "sims"
DATA = Path(__file__).resolve().parent / "data" / "cds_linear"


def _example(**device):
    doc = tomllib.loads((SIMS / "class_b_angelov.toml").read_text())
    doc["device"].update(device)
    return doc


def _hv_class_e(**device):
    # the design the reference netlists in tests/data/cds_linear were rendered from (an invented
    # 100 MHz, 28 V class-E stage on the high-voltage preset)
    dev = {"model": "angelov", "preset": "hv_ldmos_30w", "vgate_bias": "2.8 V"}
    dev.update(device)
    return {"design": {"name": "hv_ref", "topology": "class_e", "f0": "100 MHz", "vdd": "28 V", "pout": "30 W"},
            "device": dev, "drive": {"pin": "30 dBm"}, "sim": {"points_per_cycle": 400}}


def _cds_law(vds_v, c_at_vdd_f, vdd_v, vj_v, m):
    """The depletion capacitance of a reverse-biased junction, C(V) = C0 / (1 + V/Vj)^M (S. M. Sze,
    "Physics of Semiconductor Devices", ch. 2, abrupt M = 1/2, linearly graded M = 1/3; recalled
    from memory), scaled so that C(Vdd) is the given value; written out by hand."""
    c0 = c_at_vdd_f * (1.0 + vdd_v / vj_v) ** m
    return c0 / (1.0 + vds_v / vj_v) ** m


def test_cds0_from_the_value_at_vdd_by_hand():
    # 0.6 pF at 12 V, Vj = 0.8 V, M = 1/2: C0 = 0.6 pF x sqrt(1 + 12/0.8) = 0.6 x 4 = 2.4 pF (hand arithmetic)
    assert cds_junction(0.6e-12, 12.0, 0.8, 0.5)["cj0_f"] == pytest.approx(2.4e-12, rel=1e-12)
    net = render(size(design_from_dict(_example(cds_law="junction"))))
    cards = {c.name.upper(): c for c in read_cards(net)}
    assert "COUT" not in cards and cards["DCDS"].tokens[1:4] == ["0", "dint", "DCDSMOD"]
    assert "CJO=2.4e-12" in net and "VJ=0.8 " in net and "M=0.5 " in net


@pytest.mark.ngspice
@pytest.mark.parametrize("vj, m", [(0.8, 0.5), (1.5, 0.33)])
def test_ngspice_ac_cv_of_the_rendered_junction_is_the_depletion_law(vj, m):
    # ngspice AC analysis of the rendered DCDS diode and its model card, biased at several drain
    # voltages: C = -Im(i(VB)) / omega (a source's branch current flows into its + node, ngspice
    # convention; a capacitor to ground draws i = j omega C v from it); against the law above within 2 %
    from netgen.simulator import run_ac

    vdd = 12.0
    net = render(size(design_from_dict(_example(cds_law="junction", cds_vj=f"{vj} V", cds_m=m))))
    lines = [ln for ln in net.splitlines() if ln.upper().startswith(("DCDS ", ".MODEL DCDSMOD"))]
    assert len(lines) == 2
    f_hz = 1e6
    for vds in (0.0, 3.0, 12.0, 30.0):
        cir = "\n".join(["cds c-v", f"VB dint 0 DC {vds} AC 1", *lines, f".ac lin 1 {f_hz} {f_hz}", ".end", ""])
        _, vec = run_ac(cir, backend="batch")
        c_f = -vec["vb#branch"][0].imag / (2 * math.pi * f_hz)
        assert c_f == pytest.approx(_cds_law(vds, 0.6e-12, vdd, vj, m), rel=0.02), vds
    # at Vdd it is device.cout (the key's meaning, docs/devices.md)
    assert _cds_law(vdd, 0.6e-12, vdd, vj, m) == pytest.approx(0.6e-12, rel=1e-12)


@pytest.mark.parametrize("name, doc", [("class_b_angelov", _example()), ("hv_class_e", _hv_class_e())])
@pytest.mark.parametrize("dialect", ["ngspice", "portable"])
def test_linear_law_renders_the_netlist_of_before_line_for_line(name, doc, dialect):
    # the reference files were rendered by the code before cds_law existed (commit 343b553; their
    # digest line since the angelov Idc estimate is rounded to 12 digits, the same on every CPU);
    # the default and an explicit "linear" give them back line for line (digest line included)
    ref = (DATA / f"{name}_{dialect}.cir").read_text().splitlines()
    explicit = copy.deepcopy(doc)
    explicit["device"]["cds_law"] = "linear"
    for d in (doc, explicit):
        assert render(size(design_from_dict(d)), dialect=dialect).splitlines() == ref


def test_junction_is_portable_and_the_line_variant_keeps_the_series_resistance():
    # the portable dialect carries a SPICE3 junction diode (docs/portable_dialect.md)
    net = render(size(design_from_dict(_hv_class_e(cds_law="junction"))), dialect="portable")
    assert check_portable(net) == []
    assert any(c.name.upper() == "DCDS" for c in read_cards(net))
    # class F on lines: Cout has its series RLOSS_cout (netgen.netlist.renderer.cout_series_ohm); the
    # diode sits in its place, anode at the resistor's node
    doc = tomllib.loads((SIMS / "class_f_line.toml").read_text())
    doc["device"] = {"model": "angelov", "preset": "lv_gan_2w", "vgate_bias": "-2.7 V", "cds_law": "junction"}
    doc["design"]["vdd"] = "12 V"
    cards = {c.name.upper(): c for c in read_cards(render(size(design_from_dict(doc))))}
    assert cards["DCDS"].tokens[1:3] == ["x_cout", "dint"]
    assert cards["RLOSS_COUT"].tokens[1:3] == ["x_cout", "0"]


@pytest.mark.parametrize("device, key", [
    ({"cds_law": "exponential"}, "device.cds_law"),
    ({"cds_law": "junction", "cds_vj": "0 V"}, "device.cds_vj"),
    ({"cds_law": "junction", "cds_m": 1.5}, "device.cds_m"),
    ({"cds_law": "junction", "cout": "0 F"}, "device.cds_law"),
])
def test_bad_value_is_one_sentence_naming_the_key(device, key):
    with pytest.raises(DesignError) as err:
        design_from_dict(_example(**device))
    text = str(err.value)
    assert text.startswith(key + ":") and "\n" not in text


def test_junction_on_another_model_is_refused():
    doc = {"design": {"name": "e", "topology": "class_e", "f0": "13.56 MHz", "vdd": "12 V", "pout": "5 W"},
           "device": {"model": "switch", "cout": "100 pF", "cds_law": "junction"}}
    with pytest.raises(DesignError, match=r"^device\.cds_law: 'junction' applies to device\.model"):
        design_from_dict(doc)


def test_cli_error_is_one_line_exit_2(tmp_path):
    text = (SIMS / "class_b_angelov.toml").read_text().replace('preset = "lv_gan_2w"', 'preset = "lv_gan_2w"\ncds_law = "curved"')
    path = tmp_path / "bad.toml"
    path.write_text(text)
    out = subprocess.run([sys.executable, "-m", "netgen.cli", "size", str(path), "-o", str(tmp_path / "out")],
                         capture_output=True, text=True)
    assert out.returncode == 2 and not (tmp_path / "out").exists()
    assert out.stderr.strip().count("\n") == 0 and "device.cds_law" in out.stderr and "Traceback" not in out.stderr


@pytest.mark.ngspice
@pytest.mark.slow
@pytest.mark.parametrize("doc", [
    _example(cds_law="junction"),
    # the class E of the reference files, where the junction swings from 0 to about 3.7 Vdd
    {**_hv_class_e(cds_law="junction"), "sim": {"points_per_cycle": 400, "max_cycles": 600}},
], ids=["class_b_angelov", "hv_class_e"])
def test_junction_cds_estimate_agrees_with_ngspice_and_settles_in_few_cycles(doc):
    # as tests/test_collocation.py for the linear example: the estimate (now with DCDS among the
    # device's junctions) against ngspice's settled answer from the independent DC start (judged to
    # sim.settle_tol = 0.1 %): Pdc and load power within 0.1 %; started on the estimate, ngspice settles
    # in <= 10 cycles and lands on the same answer
    from test_collocation import periodic_and_dc_start

    periodic_and_dc_start(size(design_from_dict(doc)))


def test_sizing_absorbs_c_at_vdd_and_reports_the_swing():
    # sizing absorbs device.cout = C(Vdd) whatever the law (the same network as the linear Cout);
    # the derived values by hand for 0.6 pF at 12 V, Vj = 0.8 V, M = 1/2: Cds0 = 2.4 pF,
    # C(0)/C(24 V) = sqrt(1 + 24/0.8) = sqrt(31) = 5.568, Q(24 V) = 2.4 pF x 0.8 V x (sqrt(31) - 1)/0.5
    # = 17.54 pC, Q/24 V = 0.7308 pF (the charge of the depletion law, the integral of C dV)
    lin = size(design_from_dict(_example()))
    jun = size(design_from_dict(_example(cds_law="junction")))
    assert {k: c.value for k, c in lin.components.items()} == {k: c.value for k, c in jun.components.items()}
    assert jun.derived["cds0_f"][0] == pytest.approx(2.4e-12, rel=1e-12)
    assert jun.derived["cds_cv_ratio"][0] == pytest.approx(math.sqrt(31.0), rel=1e-12)
    assert jun.derived["cds_charge_equiv_f"][0] == pytest.approx(2.4e-12 * 0.8 * (math.sqrt(31.0) - 1) / 0.5 / 24.0, rel=1e-12)
    assert "cds0_f" not in lin.derived
