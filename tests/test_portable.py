"""Portable-netlist checker (netgen.netlist.portable).

The subset is the Berkeley SPICE3 input format (element letters, dot-cards,
source and B-source functions as listed in the SPICE3 user's guide, from
memory); each non-portable construct below is an ngspice or other-simulator
extension (ngspice user's manual: control blocks, .param/numparam, XSPICE
A-elements, .meas, B-source if()/ternary, in-line ';' comments).
"""

from __future__ import annotations

import pytest

from netgen.netlist.portable import check_portable, format_problems

# A small SPICE3 deck: class-F-like switch stage with a quarter-wave line (T element,
# SPICE3 syntax Z0= TD=), an S switch driven by PULSE, a B source, element ICs and uic.
GOOD = """portable test deck
* a class-F-like switch stage; element ICs give the warm start
VDD vdd 0 DC 10
L_feed vdd drain 1u IC=0.1
VIDRAIN drain dint DC 0
VISW dint dsw DC 0
S1 dsw 0 gate 0 SWMOD
VG gate 0 PULSE(0 1 0 1p 1p 0.5n 1n)
.model SWMOD SW(RON=0.2 ROFF=1e6 VT=0.5 VH=0)
C_block drain mid 100p IC=10
T_line mid 0 load 0 Z0=70.71 TD=0.25n
RLOAD load 0 50
BSENSE sense 0 V=v(load)*abs(i(VIDRAIN))+2*sin(6.283e9*time)
RSENSE sense 0 1k
.options reltol=1e-3 method=trap minbreak=1e-14
.tran 1p 20n 0 1p uic
.end
"""


def _whats(text: str) -> list[str]:
    return [p.what for p in check_portable(text)]


def test_good_deck_passes():
    assert check_portable(GOOD) == [], format_problems(check_portable(GOOD))


def _swap(old: str, new: str) -> str:
    assert old in GOOD
    return GOOD.replace(old, new, 1)


# Each case: one deliberate extension (ngspice user's manual names each as ngspice's or
# another simulator's), the line it sits on, and a word of the expected 'what'.
CASES = [
    ("control block", _swap(".end\n", ".control\nrun\n.endc\n.end\n"), ".control"),
    ("param card", _swap(".end\n", ".param rl=50\n.end\n"), ".param"),
    ("include card", _swap(".end\n", ".include models.lib\n.end\n"), ".include"),
    ("absolute path", _swap(".end\n", ".include /home/someone/models.lib\n.end\n"), "absolute path"),
    ("windows path", _swap("RSENSE sense 0 1k", "RSENSE sense 0 1k\n* see C:\\models\\x.lib"), None),
    ("meas card", _swap(".end\n", ".meas tran p avg i(VDD)\n.end\n"), ".meas"),
    ("xspice element", _swap("RSENSE sense 0 1k", "A1 sense out amp\nRSENSE sense 0 1k"), "A1"),
    ("ngspice option", _swap("minbreak=1e-14", "minbreak=1e-14 klu"), "option klu"),
    ("if in B source", _swap("V=v(load)", "V=if(v(load)>1,1,0)+v(load)"), "if("),
    ("ternary in B source", _swap("V=v(load)", "V=v(load)>1?1:0"), "?"),
    ("min in B source", _swap("V=v(load)", "V=min(v(load),1)"), "min("),
    ("brace expression", _swap("RLOAD load 0 50", "RLOAD load 0 {rl}"), "{...}"),
    ("semicolon comment", _swap("RLOAD load 0 50", "RLOAD load 0 50 ; the antenna"), "';' comment"),
    ("backslash continuation", _swap("RLOAD load 0 50", "RLOAD load 0 \\\n50"), "backslash continuation"),
    ("continuation after comment", _swap("RLOAD load 0 50", "RLOAD load 0\n* note\n+ 50"), "+ continuation"),
    ("long card", _swap("RLOAD load 0 50", "RLOAD load 0 50" + " " * 70 + "TC1=0"), "characters"),
    ("non-ascii", _swap("RLOAD load 0 50", "RLOAD load 0 50\n* 50 \u03a9 antenna"), "non-ASCII character"),
    ("no end", GOOD.replace(".end\n", ""), ".end"),
    ("trnoise source", _swap("RSENSE sense 0 1k", "VN n 0 TRNOISE(1m 1p 0 0)\nRSENSE sense 0 1k"), "TRNOISE("),
    ("ngspice model type", _swap(".model SWMOD", ".model MX VDMOS(VTO=1)\n.model SWMOD"), "model type vdmos"),
    ("gnd node", _swap("RLOAD load 0 50", "RLOAD load gnd 50"), "node gnd"),
    ("behavioural E source", _swap("RSENSE sense 0 1k", "E1 a 0 VALUE={v(load)*2}\nRSENSE sense 0 1k"), "VALUE"),
    ("card after end", GOOD + "R9 a 0 1\n", "R9"),
    ("element on title line", "R1 a 0 1k\nV1 a 0 DC 1\n.op\n.end\n", "R1 a 0 1k"),
]


@pytest.mark.parametrize("label,text,word", CASES, ids=[c[0] for c in CASES])
def test_each_extension_is_reported(label, text, word):
    problems = check_portable(text)
    assert problems, f"{label}: not reported"
    if word is not None:
        assert any(word.lower() in p.what.lower() for p in problems), format_problems(problems)
    for p in problems:  # every problem says why
        assert p.why and p.line >= 1


def test_line_numbers_point_at_the_card():
    text = _swap("RLOAD load 0 50", "RLOAD load 0 {rl}")
    (problem,) = check_portable(text)
    assert text.splitlines()[problem.line - 1].startswith("RLOAD")


def test_windows_path_is_absolute():
    text = _swap("RSENSE sense 0 1k", "RSENSE sense 0 1k\n* see C:\\models\\x.lib")
    assert "absolute path" in _whats(text)


def test_continuation_joins_the_card():
    # a '+' line directly after its card is SPICE3 continuation and is fine
    text = _swap("RLOAD load 0 50", "RLOAD load 0\n+ 50")
    assert check_portable(text) == []


# PySpice's parser (PySpice 1.5, PySpice.Spice.Parser.SpiceParser) does not read the SPICE3
# voltage-controlled switch card 'Sxx n+ n- nc+ nc- model' (it logs a parse error, and with
# ON/OFF it raises IndexError); every other card of our decks must be read with its nodes.
PYSPICE_UNREAD_LETTERS = {"S"}


def pyspice_read_check(text: str) -> None:
    """Assert that PySpice's SPICE parser reads every element card (name and nodes) and model."""
    from PySpice.Spice.Parser import Element, Model, SpiceParser

    parser = SpiceParser(source=text)
    read = {}
    models = set()
    for st in parser._statements:  # the parser's statement list (no public accessor in 1.5)
        if isinstance(st, Element):
            read[(st._prefix + st._name).upper()] = [n.lower() for n in st._nodes]
        elif isinstance(st, Model):
            models.add(st._name.upper())
    # our own reading of the same cards: name and the node fields by element letter (SPICE3 syntax)
    nodes_per_letter = {"R": 2, "C": 2, "L": 2, "V": 2, "I": 2, "B": 2, "D": 2, "T": 4, "E": 4, "G": 4}
    lines = text.splitlines()[1:]
    for line in lines:
        words = line.split()
        if not words or line[0] in "*+.":
            if words and words[0].lower() == ".model":
                assert words[1].upper() in models, f"PySpice did not read model {words[1]}"
            continue
        letter = words[0][0].upper()
        if letter in PYSPICE_UNREAD_LETTERS or letter not in nodes_per_letter:
            continue
        name = words[0].upper()
        assert name in read, f"PySpice did not read {words[0]}"
        assert read[name] == [w.lower() for w in words[1:1 + nodes_per_letter[letter]]], line


def test_pyspice_parser_reads_the_good_deck():
    pyspice_read_check(GOOD)


def test_pyspice_read_check_can_fail():
    # the helper notices a card PySpice did not take (a deck whose R card lost its value)
    with pytest.raises(AssertionError):
        pyspice_read_check(GOOD.replace("RLOAD load 0 50", "RLOAD load 0 50\nRBAD"))


def _sims_designs():
    from pathlib import Path

    return sorted((Path(__file__).resolve().parents[1] / "sims").glob("*.toml"))


@pytest.mark.parametrize("path", _sims_designs(), ids=lambda p: p.stem)
def test_render_portable_dialect_itself_is_portable(path):
    # what `pashape export` puts in a pack is render(dialect="portable") as it comes, with the
    # warm-start ICs; it must pass the checker and PySpice's parser (rendering needs no simulator)
    from netgen.design.schema import load_design
    from netgen.netlist.renderer import render
    from netgen.synthesis.sizing import size

    sized = size(load_design(path))
    ic = {"L_feed": sized.idc_est_a, "C_block": sized.design.vdd_v}
    text = render(sized, mode="tran", dialect="portable", tstop_s=20 / sized.design.f0_hz, ic=ic)
    assert check_portable(text) == [], format_problems(check_portable(text))
    pyspice_read_check(text)
    low = text.lower()
    assert ".save" not in low  # SPICE3 has no .save card; every node is kept by default
    # minbreak only where there is a T line (docs/simulator_notes.md: the breakpoint collapse of T lines),
    # placed before .tran at TMAX/100
    lines = text.splitlines()
    has_t = any(ln[:1] == "T" for ln in lines)
    opts = [ln for ln in lines if ln.lower().startswith(".options")]
    if has_t:
        tran = next(ln for ln in lines if ln.startswith(".tran")).split()
        assert opts == [f".options minbreak={float(tran[4]) / 100:.10g}"]
        assert lines.index(opts[0]) == lines.index(" ".join(tran)) - 1
    else:
        assert opts == []


def test_portable_cards_wraps_and_is_idempotent():
    # the three card rules of the portable dialect on a hand-made deck; the checker is the judge
    from netgen.netlist.portable import portable_cards

    long_b = "BX a 0 I=" + "+".join(f"1e-09*v(n{k})" for k in range(12))
    deck = GOOD.replace("RSENSE sense 0 1k", "RSENSE sense 0 1k\n" + long_b + "\n* " + "c" * 300)
    deck = deck.replace(".options reltol=1e-3 method=trap minbreak=1e-14\n", ".save v(load)\n")
    assert check_portable(deck)  # .save, an over-long card and an over-long comment
    out = portable_cards(deck)
    assert check_portable(out) == [], format_problems(check_portable(out))
    assert portable_cards(out) == out
    # minbreak = TMAX/100 (TMAX = 1p on the .tran card) because the deck has a T line
    assert ".options minbreak=1e-14\n.tran 1p 20n 0 1p uic" in out
    # the wrapped B source reads back as the same expression (continuations join with a space)
    joined, cur = [], None
    for ln in out.splitlines():
        if ln.startswith("+"):
            cur += ln[1:]
        else:
            if cur is not None:
                joined.append(cur)
            cur = ln
    joined.append(cur)
    bx = next(c for c in joined if c.startswith("BX"))
    assert bx.replace(" ", "") == long_b.replace(" ", "")
    # an exponent sign is never a split point
    assert not any(ln.rstrip().endswith(("e-", "e+")) for ln in out.splitlines())
