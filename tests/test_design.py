"""Design-file loading and quantity parsing: values, units and the messages users see."""

from __future__ import annotations

import math

import pytest

from netgen.design.schema import SCHEMA, design_from_dict, load_design
from netgen.design.keys import reference_markdown, set_dotted
from netgen.errors import DesignError
from netgen.design.quantities import format_quantity, parse_quantity


def base_doc(**design):
    d = {"name": "bench_stage", "topology": "class_f_line", "f0": "915 MHz", "vdd": "24 V", "pout": "8 W"}
    d.update(design)
    return {"design": d}


@pytest.mark.parametrize(
    "text, unit, expected",
    [
        # SI prefixes (BIPM, The International System of Units, 9th ed., table 7)
        ("915 MHz", "Hz", 915e6),
        ("2.2nH", "H", 2.2e-9),
        ("50 ohm", "ohm", 50.0),
        ("100 Ω", "ohm", 100.0),
        ("1.2 kohm", "ohm", 1200.0),
        ("24 V", "V", 24.0),
        ("8 W", "W", 8.0),
        ("2.2 µH", "H", 2.2e-6),
        # SPICE scale suffixes with the unit implied (SPICE3 user's manual, common practice)
        ("1.5p", "F", 1.5e-12),
        ("10u", "H", 10e-6),
        ("1meg", "ohm", 1e6),
        ("1MEG", "ohm", 1e6),
        ("2.5megohm", "ohm", 2.5e6),
        ("1e-9 F", "F", 1e-9),
    ],
)
def test_parse_quantity_values(text, unit, expected):
    assert parse_quantity(text, unit, "k") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    "value, unit, message",
    [
        ("24", "V", "design.vdd: '24' has no unit; write it with its unit, e.g. \"24 V\"."),
        (24, "V", "design.vdd: 24 has no unit; write it with its unit, e.g. \"24 V\"."),
        ("24 A", "V", "design.vdd: '24 A' is in 'A' but this key takes V; write e.g. \"24 V\"."),
        ("nan V", "V", "design.vdd: 'nan V' is not a finite number; give a finite value."),
        ("inf V", "V", "design.vdd: 'inf V' is not a finite number; give a finite value."),
        ("", "V", "design.vdd: the value is empty; write e.g. \"24 V\"."),
        ("twenty volts", "V", "design.vdd: cannot read 'twenty volts' as a quantity; write e.g. \"24 V\"."),
    ],
)
def test_parse_quantity_errors_name_the_key(value, unit, message):
    with pytest.raises(DesignError) as err:
        parse_quantity(value, unit, "design.vdd")
    assert str(err.value) == message


def test_format_quantity_round_trips():
    for value, unit in [(2.533e-9, "H"), (1.5e-12, "F"), (915e6, "Hz"), (70.71, "ohm")]:
        text = format_quantity(value, unit)
        assert parse_quantity(text, unit, "k") == pytest.approx(value, rel=1e-3)


def test_minimal_design_gets_defaults():
    d = design_from_dict(base_doc())
    assert d.f0_hz == 915e6 and d.vdd_v == 24.0 and d.pout_w == 8.0
    assert d.load_ohm == 50.0 and d.device.model == "switch"
    assert math.isinf(d.network.inductor_q)
    assert d.sim.settle_tol == 1e-3


def test_unknown_key_suggests_the_closest():
    with pytest.raises(DesignError) as err:
        design_from_dict(base_doc(lod="50 ohm"))
    assert str(err.value) == "design.lod: unknown key; did you mean 'load'?"


def test_unknown_section_suggests_the_closest():
    doc = base_doc()
    doc["devise"] = {}
    with pytest.raises(DesignError) as err:
        design_from_dict(doc)
    assert "unknown section [devise]; did you mean 'device'?" in str(err.value)


def test_missing_required_key():
    doc = base_doc()
    del doc["design"]["f0"]
    with pytest.raises(DesignError) as err:
        design_from_dict(doc)
    assert str(err.value).startswith("design.f0: missing; add it to [design]")


def test_pout_or_ropt_required():
    doc = base_doc()
    del doc["design"]["pout"]
    with pytest.raises(DesignError, match="give either design.pout"):
        design_from_dict(doc)


def test_out_of_range_names_the_limit():
    with pytest.raises(DesignError) as err:
        design_from_dict(base_doc(f0="1 Hz"))
    assert str(err.value) == "design.f0: 1 is out of range; it must be >= 1000 Hz."


def test_unsafe_name_rejected():
    with pytest.raises(DesignError, match="is not a safe name"):
        design_from_dict(base_doc(name="pa .control"))
    with pytest.raises(DesignError, match="design.name: must be on one line"):
        design_from_dict(base_doc(name="pa\n.control"))


def test_load_design_file_errors(tmp_path):
    missing = tmp_path / "nope.toml"
    with pytest.raises(DesignError, match="no such design file"):
        load_design(missing)
    bad = tmp_path / "bad.toml"
    bad.write_text("[design\nname = 1\n")
    with pytest.raises(DesignError, match="TOML syntax error"):
        load_design(bad)
    binary = tmp_path / "bin.toml"
    binary.write_bytes(b"\xff\xfe[design]\n")
    with pytest.raises(DesignError, match="not UTF-8"):
        load_design(binary)
    empty = tmp_path / "empty.toml"
    empty.write_text("  \n")
    with pytest.raises(DesignError, match="the file is empty"):
        load_design(empty)


def test_set_dotted_validates_path():
    doc = base_doc()
    new = set_dotted(doc, "design.vdd", "28 V")
    assert new["design"]["vdd"] == "28 V" and doc["design"]["vdd"] == "24 V"
    with pytest.raises(DesignError, match="did you mean 'vdd'"):
        set_dotted(doc, "design.vd", "28 V")


def test_reference_page_lists_every_key():
    page = reference_markdown()
    for section, keys in SCHEMA.items():
        assert f"## [{section}]" in page
        for key in keys:
            assert f"| `{key}` |" in page
