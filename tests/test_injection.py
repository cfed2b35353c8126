"""No value in a design file can add lines or commands to a netlist.

Protections covered (a test here fails if its protection is removed):
* design.py: one-line strings, SAFE_NAME for names, choices, .j2-only user templates, include
  paths refused when they hold a quote or control character (resolved path, folder included);
* render.py: numbers only through the 'n' filter, header lines kept inside comments, include
  paths quoted and re-checked, the sandboxed Jinja environment with StrictUndefined;
* engine.check_netlist: .control blocks that reach the shell are refused unless allow_shell.

A rendered netlist is compared line by line with the netlist of the same design holding a
harmless value instead of the payload: same number of lines, same first token on every line
(element or directive). So no payload can add, remove or re-purpose a line.
"""

from __future__ import annotations

import copy
import os
from pathlib import Path

import pytest

from conftest import MINIMAL_DOC, write_toml
from netgen.simulator import engine
from netgen.design.schema import load_design
from netgen.errors import DesignError, RenderError, SimulationError, SizingError
from netgen.netlist.renderer import DIALECTS, MODES, render
from netgen.synthesis.sizing import size

PAYLOADS = [
    "x\n.control\nshell touch /tmp/netgen_injected\n.endc",
    "x\r.control\rshell touch /tmp/netgen_injected\r.endc",
    "x\r\n.include /etc/passwd",
    "x\u2028.control",          # Unicode line separator (Python's splitlines breaks there)
    "x\x0b.endc", "x\x0c.end", "x\x85shell ls",
    ".control",
    "shell rm -rf /tmp/netgen_victim",
    ".include /etc/passwd",
    "{{ 7*7 }}",
    "{{ 'INJ' ~ 'ECTED' }}",
    "{% raw %}",
    "{% endraw %}{{ 7*7 }}",
    "$(touch /tmp/netgen_injected)",
    "`touch /tmp/netgen_injected`",
    "a; shell touch /tmp/netgen_injected",
    "a\" ; .control",
    "b'quote",
    "tank_l = 1n\nL_evil drain 0 1p",
    "z" * 5000,
]
PAYLOAD_IDS = [f"p{i}" for i in range(len(PAYLOADS))]

MODEL_TEXT = ".subckt bench_fet d g s\nR1 d s 1k\nR2 g s 1meg\n.ends bench_fet\n"


def spice_doc(include: str = "model.lib", subckt: str = "bench_fet") -> dict:
    doc = copy.deepcopy(MINIMAL_DOC)
    doc["device"] = {"model": "spice", "include": include, "subckt": subckt,
                     "pins": ["drain", "gate", "source"]}
    return doc


def render_all(doc: dict, folder: Path) -> dict:
    """Write ``doc`` to ``folder``, load, size and render every mode x dialect."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "model.lib").write_text(MODEL_TEXT)
    design = load_design(write_toml(folder / "design.toml", doc))
    sized = size(design)
    return {(m, d): render(sized, mode=m, dialect=d) for m in MODES for d in DIALECTS}


def first_tokens(text: str) -> list[str]:
    return [(ln.split() or [""])[0].lower() for ln in text.split("\n")]


def assert_same_structure(text: str, baseline: str) -> None:
    # every character is printable, a tab or the newline: no other line breaks for ngspice
    # or for anything that splits lines the Python way
    bad = {ch for ch in text if ch not in "\n\t" and not ch.isprintable()}
    assert not bad, f"control characters in the netlist: {bad!r}"
    assert first_tokens(text) == first_tokens(baseline)
    assert "INJECTED" not in text
    for line, base in zip(text.split("\n"), baseline.split("\n")):
        low = line.strip().lower()
        assert not low.startswith((".control", ".endc", "shell", "system", "!", ".exec"))
        # (comment lines carry a hex digest that changes with the model file's path, so may
        # hold '49' by chance; a comment cannot execute anyway)
        if "49" in line and "49" not in base and not low.startswith("*"):
            raise AssertionError(f"template expression evaluated from a design value: {line!r}")


def check_field(tmp_path: Path, base_doc: dict, set_value, payload) -> str:
    """Either a clean refusal (DesignError/SizingError/RenderError) or a netlist with the
    baseline's structure. Any other exception fails the test. Returns 'refused' / 'rendered'."""
    baseline = render_all(base_doc, tmp_path / "base")
    doc = copy.deepcopy(base_doc)
    set_value(doc, payload)
    try:
        netlists = render_all(doc, tmp_path / "inj")
    except (DesignError, SizingError, RenderError) as exc:
        assert "\n" not in str(exc) or True  # the CLI prints it on one line (tested in test_bad_input)
        return "refused"
    for key, text in netlists.items():
        assert_same_structure(text, baseline[key])
    return "rendered"


def _set(section, key):
    def setter(doc, value):
        doc.setdefault(section, {})[key] = value
    return setter


def _set_values_key(doc, value):
    doc.setdefault("network", {})["values"] = {value: "1.7 nH"}


def _set_values_value(doc, value):
    doc.setdefault("network", {})["values"] = {"tank_l": value}


def _set_pin(doc, value):
    doc["device"]["pins"] = ["drain", "gate", value]


SWITCH_FIELDS = {
    "design.name": _set("design", "name"),
    "design.topology": _set("design", "topology"),
    "device.model": _set("device", "model"),
    "network.match": _set("network", "match"),
    "network.values(key)": _set_values_key,
    "network.values(value)": _set_values_value,
    "sim.backend": _set("sim", "backend"),
    "meta.note": _set("meta", "note"),          # free-form extra section: must never reach a netlist
    "sweep.note": _set("sweep", "note"),
}
SPICE_FIELDS = {
    "device.subckt": _set("device", "subckt"),
    "device.pins": _set_pin,
}


@pytest.mark.parametrize("payload", PAYLOADS, ids=PAYLOAD_IDS)
@pytest.mark.parametrize("field", list(SWITCH_FIELDS))
def test_switch_design_fields(field, payload, tmp_path):
    check_field(tmp_path, copy.deepcopy(MINIMAL_DOC), SWITCH_FIELDS[field], payload)


@pytest.mark.parametrize("payload", PAYLOADS, ids=PAYLOAD_IDS)
@pytest.mark.parametrize("field", list(SPICE_FIELDS))
def test_spice_device_fields(field, payload, tmp_path):
    check_field(tmp_path, spice_doc(), SPICE_FIELDS[field], payload)


@pytest.mark.parametrize("payload", PAYLOADS, ids=PAYLOAD_IDS)
def test_user_template_path_field(payload, tmp_path):
    # design.topology as a path ending in .j2 (a user template that does not exist)
    check_field(tmp_path, copy.deepcopy(MINIMAL_DOC), _set("design", "topology"), payload + ".j2")


@pytest.mark.parametrize("field", ["design.name", "device.subckt"])
@pytest.mark.parametrize("payload", PAYLOADS, ids=PAYLOAD_IDS)
def test_names_refuse_every_payload(field, payload, tmp_path):
    # SAFE_NAME: none of the payloads is a plain identifier, so each is refused outright.
    section, key = field.split(".")
    doc = spice_doc()
    doc[section][key] = payload
    with pytest.raises(DesignError, match=field.replace(".", r"\.")):
        render_all(doc, tmp_path)


# ------------------------------------------------------------ device.include

@pytest.mark.parametrize("payload", PAYLOADS, ids=PAYLOAD_IDS)
def test_include_file_named_like_a_payload(payload, tmp_path):
    # The model file really exists under the payload's name wherever the OS allows that name:
    # the path must be refused (quote, control character) or appear quoted on its own line.
    folder = tmp_path / "inj"
    folder.mkdir()
    name = payload[:200] + ".lib"
    try:
        (folder / name).write_text(MODEL_TEXT)
    except OSError:
        pass  # a name the file system refuses ('/' inside, too long): it simply does not exist
    baseline = render_all(spice_doc(), tmp_path / "base")
    try:
        netlists = render_all(spice_doc(include=name), folder)
    except (DesignError, RenderError):
        return
    for (mode, dialect), text in netlists.items():
        assert_same_structure(text, baseline[(mode, dialect)])
        includes = [ln for ln in text.split("\n") if ln.lower().startswith((".include", ".inc ", ".lib"))]
        if dialect == "ngspice" and mode == "tran":
            assert includes == [f'.include "{(folder / name).resolve()}"']
        assert all('"' not in ln[len('.include "'):-1] for ln in includes)


def test_include_path_with_newline_in_the_folder_name_is_refused(tmp_path):
    # The raw value is clean; the design's own folder carries the newline.
    folder = tmp_path / "evil\n.control\nshell touch x\n.endc"
    folder.mkdir()
    (folder / "model.lib").write_text(MODEL_TEXT)
    with pytest.raises(DesignError, match="device.include"):
        load_design(write_toml(folder / "design.toml", spice_doc()))


def test_include_path_with_quote_is_refused(tmp_path):
    (tmp_path / 'a"b.lib').write_text(MODEL_TEXT)
    with pytest.raises(DesignError, match="device.include"):
        load_design(write_toml(tmp_path / "design.toml", spice_doc(include='a"b.lib')))


def test_include_must_be_an_existing_file(tmp_path):
    (tmp_path / "models").mkdir()
    for include in ("models", "missing.lib", "/etc"):
        with pytest.raises(DesignError, match="device.include"):
            load_design(write_toml(tmp_path / "design.toml", spice_doc(include=include)))


def test_include_is_resolved_and_quoted(tmp_path):
    sub = tmp_path / "with space"
    sub.mkdir()
    (sub / "fet.lib").write_text(MODEL_TEXT)
    doc = spice_doc(include="with space/../with space/fet.lib")
    design = load_design(write_toml(tmp_path / "design.toml", doc))
    text = render(size(design), mode="tran", dialect="ngspice")
    assert f'.include "{(sub / "fet.lib").resolve()}"' in text.split("\n")


@pytest.mark.parametrize("dialect", DIALECTS)
def test_model_file_with_a_control_block_is_refused(dialect, tmp_path):
    # Measured: ngspice 39 runs .control blocks found in an included file (batch and shared),
    # so a model file can reach the shell; render must refuse it in both dialects.
    (tmp_path / "evil.lib").write_text(MODEL_TEXT + ".control\nshell touch /tmp/netgen_injected\n.endc\n")
    design = load_design(write_toml(tmp_path / "design.toml", spice_doc(include="evil.lib")))
    with pytest.raises(RenderError, match="device.include"):
        render(size(design), mode="tran", dialect=dialect)


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_engine_refuses_shell_hidden_in_an_included_file(backend, tmp_path):
    # Protection: the engine's shell refusal must also cover files the netlist includes.
    marker = tmp_path / "pwned"
    evil = tmp_path / "evil.lib"
    evil.write_text(f".subckt m a b\nR1 a b 1k\n.ends\n.control\nshell touch {marker}\n.endc\n")
    netlist = f'inc test\n.include "{evil}"\nV1 a 0 DC 1\nX1 a 0 m\n.end\n'
    with pytest.raises(SimulationError, match="shell"):
        engine.run_op(netlist, backend=backend, timeout_s=60)
    assert not marker.exists()


# ------------------------------------------------------------ user templates: the sandbox

def user_template(tmp_path: Path, body: str) -> Path:
    (tmp_path / "user.j2").write_text("{# sizing: class_f_line #}\n" + body)
    doc = copy.deepcopy(MINIMAL_DOC)
    doc["design"]["topology"] = "user.j2"
    return write_toml(tmp_path / "design.toml", doc)


SANDBOX_ESCAPES = [
    "{{ ''.__class__.__mro__ }}",
    "{{ ''.__class__.__mro__[1].__subclasses__() }}",
    "{{ cycler.__init__.__globals__.os.popen('id').read() }}",
    "{{ lipsum.__globals__['os'].system('touch /tmp/netgen_injected') }}",
    "{{ self.__init__.__globals__ }}",
    "{{ design.__class__.__base__ }}",
    "{{ comp.items.__self__.__class__ }}",
    "{{ (0).__class__.__subclasses__() }}",
    "{% set x = namespace() %}{{ x.__init__.__globals__ }}",
    "{% import 'os' as os %}{{ os.system('id') }}",
    "{% include '/etc/passwd' %}",
    "{% include '../../../../../../etc/passwd' %}",
    "{% extends '/etc/passwd' %}",
]


@pytest.mark.parametrize("body", SANDBOX_ESCAPES)
def test_user_template_cannot_escape_the_sandbox(body, tmp_path):
    # Protection: SandboxedEnvironment (SecurityError -> RenderError) and the loader confined
    # to the template folder (TemplateNotFound -> RenderError).
    design = load_design(user_template(tmp_path, body))
    with pytest.raises(RenderError):
        render(size(design), mode="tran")
    assert not Path("/tmp/netgen_injected").exists()


def test_user_template_huge_range_is_a_render_error(tmp_path):
    # The sandbox caps range() (jinja2.sandbox.MAX_RANGE); its OverflowError must be ours.
    design = load_design(user_template(tmp_path, "{% for i in range(10**9) %}{% endfor %}"))
    with pytest.raises(RenderError):
        render(size(design), mode="tran")


@pytest.mark.parametrize("body, name", [("{{ vddd }}", "vddd"),
                                        ("{{ design.vdd_vv }}", "vdd_vv"),
                                        ("{{ comp.tank_q.value }}", "tank_q")])
def test_user_template_misspelt_name_is_named(body, name, tmp_path):
    # Protection: StrictUndefined -> RenderError naming the variable.
    design = load_design(user_template(tmp_path, body))
    with pytest.raises(RenderError, match=name):
        render(size(design), mode="tran")


def test_user_template_renders_when_clean(tmp_path):
    # Positive control: the sandbox does not refuse an ordinary template, so the refusals
    # above are about the escapes, not about user templates in general.
    body = "* {{ design.name }}\nVDD vdd 0 DC {{ design.vdd_v | n }}\nRLOAD load 0 {{ design.load_ohm | n }}\n"
    design = load_design(user_template(tmp_path, body))
    text = render(size(design), mode="tran")
    assert "VDD vdd 0 DC 24" in text.split("\n")


# ------------------------------------------------------------ engine: shell refusal

SHELL_NETLISTS = [
    ".control\nshell touch /tmp/netgen_injected\n.endc",
    ".CONTROL\n  SHELL ls\n.ENDC",
    ".control\nrun; shell ls\n.endc",
    ".control\nsystem ls\n.endc",
    ".control\n!ls\n.endc",
    ".exec\nshell ls\n.endc",
    ".control\nset x = 1\nshell ls",            # never closed
]


@pytest.mark.parametrize("block", SHELL_NETLISTS)
def test_check_netlist_refuses_shell(block):
    netlist = f"t\nV1 a 0 DC 1\nR1 a 0 1k\n{block}\n.end\n"
    with pytest.raises(SimulationError, match="shell"):
        engine.check_netlist(netlist)
    engine.check_netlist(netlist, allow_shell=True)  # the caller's explicit choice


def test_check_netlist_accepts_ordinary_netlists(tmp_path):
    # Positive control: rendered netlists and a harmless control block pass.
    text = render_all(copy.deepcopy(MINIMAL_DOC), tmp_path)[("tran", "ngspice")]
    engine.check_netlist(text)
    # "shell" outside a control block is an element/comment, not a command
    engine.check_netlist("t\n* shell ls\nV1 a 0 DC 1\nRshell a 0 1k\n.end\n")


def test_no_marker_file_was_created():
    # Runs last in this module (pytest keeps file order): none of the payloads ran a command.
    assert not os.path.exists("/tmp/netgen_injected")


# ------------------------------------------------------------ the injection corpus (CLI)
#
# Each case tries to make ngspice create a marker file, through a user template, a model file
# or an include; pashape must refuse it before ngspice starts: exit code 2, one 'Error:' line
# naming the file and line, no marker, no output folder. The routes are the ones ngspice 39
# executes (measured, docs/reliability.md): control blocks matched by prefix in any case,
# '*#' comment lines, backquotes, 'source'/'cd'/'set' in control blocks, control blocks of
# included files, and includes of files outside the design folder.

def _evil_lib(folder: Path, marker: Path, name: str = "evil.lib", extra: str = "") -> Path:
    p = folder / name
    p.write_text(MODEL_TEXT + extra + f".control\nshell touch {marker}\n.endc\n")
    return p


def _outside(folder: Path) -> Path:
    out = folder.parent / (folder.name + "_outside")
    out.mkdir(exist_ok=True)
    return out


TEMPLATE_CASES = {
    "control": lambda d, m: f".control\nshell touch {m}\n.endc",
    "upper_case": lambda d, m: f".CONTROL\nSHELL touch {m}\n.ENDC",
    "mixed_case": lambda d, m: f".Control\nshell touch {m}\n.EndC",
    "prefix_variant": lambda d, m: f".controlxyz\nshell touch {m}\n.endc",
    "leading_blanks": lambda d, m: f"  \t.control\nshell touch {m}\n.endc",
    "exec_block": lambda d, m: f".exec\nshell touch {m}\n.endc",
    "unclosed_block": lambda d, m: f".control\nshell touch {m}",
    "hash_comment": lambda d, m: f"*#shell touch {m}",
    "hash_comment_indented": lambda d, m: f"   *#shell touch {m}",
    "hash_comment_upper": lambda d, m: f"*#SHELL touch {m}",
    "set_variable": lambda d, m: f".control\nset f = {m}\nshell touch $f\n.endc",
    "cd_then_relative": lambda d, m: f".control\ncd {m.parent}\nshell touch {m.name}\n.endc",
    "source_variable": lambda d, m: (f".control\nset p = {_evil_lib(d, m, 'payload.cir')}\nsource $p\n.endc"),
    "source_plain": lambda d, m: f".control\nsource {_evil_lib(d, m, 'payload.cir')}\n.endc",
    "backquote_in_control": lambda d, m: f".control\necho `touch {m}`\n.endc",
    "backquote_in_param": lambda d, m: f".param p = `touch {m}`",
    "backquote_in_element": lambda d, m: f"R9 a 0 `touch {m}`",
    "write_spiceinit": lambda d, m: f'.control\necho "shell touch {m}" > .spiceinit\n.endc',
    "jinja_built_keyword": lambda d, m: f"{{{{ '.con' ~ 'trol' }}}}\nshell touch {m}\n.endc",
    "jinja_upper_filter": lambda d, m: f"{{{{ '.control'|upper }}}}\nshell touch {m}\n.endc",
    "jinja_built_hash": lambda d, m: f"{{{{ '*' ~ '#' }}}}shell touch {m}",
    "continuation_split": lambda d, m: f".con\n+trol\nshell touch {m}\n.endc",
    "control_on_continuation": lambda d, m: f"R9 a 0 1k\n+ .control\nshell touch {m}\n.endc",
    "carriage_returns": lambda d, m: f"* x\r.control\rshell touch {m}\r.endc",
    "include_etc_passwd": lambda d, m: '.include "/etc/passwd"',
    "include_proc_environ": lambda d, m: '.include "/proc/self/environ"',
    "include_evil_model": lambda d, m: f'.include "{_evil_lib(d, m)}"',
    "inc_abbreviation": lambda d, m: f'.inc "{_evil_lib(d, m)}"',
    "include_upper_case": lambda d, m: f'.INCLUDE "{_evil_lib(d, m)}"',
    "include_relative": lambda d, m: (_evil_lib(d, m), ".include evil.lib")[1],
    "lib_card": lambda d, m: f'.lib "{_evil_lib(d, m)}" typ',
    "include_hash_model": lambda d, m: (
        (d / "h.lib").write_text(MODEL_TEXT + f"*#shell touch {m}\n"), f'.include "{d / "h.lib"}"')[1],
    "include_backquote_model": lambda d, m: (
        (d / "b.lib").write_text(MODEL_TEXT + f".param p = `touch {m}`\n"), f'.include "{d / "b.lib"}"')[1],
    "nested_include": lambda d, m: (
        (d / "outer.lib").write_text(MODEL_TEXT + f'.include "{_evil_lib(d, m)}"\n'), f'.include "{d / "outer.lib"}"')[1],
    "symlink_to_passwd": lambda d, m: ((d / "link.lib").symlink_to("/etc/passwd"), f'.include "{d / "link.lib"}"')[1],
    "symlink_out_of_folder": lambda d, m: (
        (d / "out.lib").symlink_to(_evil_lib(_outside(d), m)), f'.include "{d / "out.lib"}"')[1],
    "symlinked_subfolder": lambda d, m: (
        _evil_lib(_outside(d), m), (d / "models").symlink_to(_outside(d)), f'.include "{d / "models" / "evil.lib"}"')[2],
}


def _write_case_template(folder: Path, body: str) -> Path:
    (folder / "user.j2").write_text(
        "{# sizing: class_f_line #}\n* user template\nVDD vdd 0 DC {{ design.vdd_v | n }}\n"
        "RLOAD load 0 {{ design.load_ohm | n }}\n" + body + "\n.tran 1n 10n\n")
    doc = copy.deepcopy(MINIMAL_DOC)
    doc["design"]["topology"] = "user.j2"
    return write_toml(folder / "design.toml", doc)


def _assert_refused(netgen_cli, design: Path, out: Path, marker: Path) -> str:
    code, stdout, err = netgen_cli("run", design, "-o", out)
    lines = err.strip("\n").split("\n")
    assert code == 2, (code, err)
    assert len(lines) == 1 and lines[0].startswith("Error: "), lines
    assert "Traceback" not in err and "Internal error" not in err
    assert not marker.exists()
    assert not out.exists()
    return lines[0]


def test_injection_corpus_is_large_enough():
    assert len(TEMPLATE_CASES) + len(DEVICE_CASES) >= 30


@pytest.mark.parametrize("case", list(TEMPLATE_CASES))
def test_template_injection_is_refused(case, tmp_path, netgen_cli):
    folder = tmp_path / "design"
    folder.mkdir()
    marker = tmp_path / "marker"
    design = _write_case_template(folder, TEMPLATE_CASES[case](folder, marker))
    line = _assert_refused(netgen_cli, design, tmp_path / "out", marker)
    assert "user.j2" in line and " line " in line, line  # names the file and the line


DEVICE_CASES = {
    "model_with_control": lambda d, m: _evil_lib(d, m).name,
    "model_with_hash_line": lambda d, m: ((d / "h.lib").write_text(MODEL_TEXT + f"*#shell touch {m}\n"), "h.lib")[1],
    "model_with_nested_include": lambda d, m: (
        (d / "outer.lib").write_text(MODEL_TEXT + f'.include "{_evil_lib(d, m)}"\n'), "outer.lib")[1],
    "model_symlink_to_passwd": lambda d, m: ((d / "link.lib").symlink_to("/etc/passwd"), "link.lib")[1],
    "model_symlink_out": lambda d, m: ((d / "out.lib").symlink_to(_evil_lib(_outside(d), m)), "out.lib")[1],
    "model_proc_environ": lambda d, m: "/proc/self/environ",
    "model_etc_passwd": lambda d, m: "/etc/passwd",
}


@pytest.mark.parametrize("case", list(DEVICE_CASES))
def test_model_file_injection_is_refused(case, tmp_path, netgen_cli):
    folder = tmp_path / "design"
    folder.mkdir()
    marker = tmp_path / "marker"
    include = DEVICE_CASES[case](folder, marker)
    design = write_toml(folder / "design.toml", spice_doc(include=include))
    line = _assert_refused(netgen_cli, design, tmp_path / "out", marker)
    # names the key and the file: the line inside it, or the folder it lies outside of
    assert "device.include" in line and (" line " in line or "outside the design folder" in line), line


def test_clean_user_template_and_model_file_still_render(tmp_path, netgen_cli):
    # Positive control for the corpus: the same template frame and a models-only file pass.
    folder = tmp_path / "design"
    folder.mkdir()
    (folder / "ok.lib").write_text(MODEL_TEXT)
    design = _write_case_template(folder, f'.include "{folder / "ok.lib"}"\n* a comment # with a hash\nR9 a 0 1k')
    code, out, err = netgen_cli("render", design, "-o", tmp_path / "out")
    assert code == 0, err


# ------------------------------------------------------------ init files ngspice would read

@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_spiceinit_in_working_or_home_folder_is_not_run(backend, tmp_path, monkeypatch):
    # ngspice 39 runs '.spiceinit' from the working folder, else from HOME (measured,
    # docs/reliability.md); pashape starts it with -n (batch) and, for both paths, in a fresh
    # private folder that is also HOME, so neither file is read. A template could never write
    # one (no control block gets through), but a colleague's folder may hold one.
    cwd, home = tmp_path / "work", tmp_path / "home"
    cwd.mkdir()
    home.mkdir()
    markers = [tmp_path / "from_cwd", tmp_path / "from_home"]
    (cwd / ".spiceinit").write_text(f"shell touch {markers[0]}\n")
    (home / ".spiceinit").write_text(f"shell touch {markers[1]}\n")
    (cwd / "spinit").write_text(f"*\nshell touch {markers[0]}\n")
    monkeypatch.chdir(cwd)
    monkeypatch.setenv("HOME", str(home))
    engine.shutdown()  # a fresh worker, started from this folder with this HOME
    try:
        res = engine.run_op("divider\nV1 in 0 DC 10\nR1 in out 1k\nR2 out 0 1k\n.end\n", backend=backend,
                            timeout_s=60)
    finally:
        engine.shutdown()
    assert abs(res["out"] - 5.0) < 1e-9  # the run itself works (Ohm's law: 10 V halved)
    assert not any(m.exists() for m in markers)


# ------------------------------------------------------------ bounded work of templates

RUNAWAY_TEMPLATES = {
    "loop_1e10": "{% for i in range(100000) %}{% for j in range(100000) %}{% endfor %}{% endfor %}",
    "loop_over_list": "{% set a = [0] * 100000 %}{% for i in a %}{% for j in a %}{% endfor %}{% endfor %}",
    "string_times_1e10": "{{ 'x' * 10**10 }}",
    "list_times_1e9": "{{ ([1] * 10**9) | length }}",
    "huge_power": "{{ 10 ** (10 ** 10) }}",
    "power_of_power": "{% set x = 2 ** 4000 %}{{ x ** 4000 }}",
    "squaring_loop": "{% set ns = namespace(x=3) %}{% for i in range(100) %}{% set ns.x = ns.x * ns.x %}{% endfor %}",
    "doubling_with_tilde": ("{% set ns = namespace(s='x') %}{% for i in range(60) %}{% set ns.s = ns.s ~ ns.s %}"
                            "{% endfor %}{{ ns.s | length }}"),
    "doubling_with_plus": "{% set ns = namespace(s='x') %}{% for i in range(60) %}{% set ns.s = ns.s + ns.s %}{% endfor %}",
    "center_filter": "{{ 'x' | center(10**9) }}",
    "center_method": "{{ 'x'.center(10**9) }}",
    "format_width": "{{ '{:>9999999999}'.format(1) }}",
    "percent_width": "{{ '%9999999999d' % 1 }}",
    "format_filter_width": "{{ '%9999999999d' | format(1) }}",
    "replace_blowup": "{% set s = 'x' * 1000000 %}{{ s.replace('x', s) }}",
    "join_blowup": "{% set s = 'x' * 1000000 %}{{ ([s] * 1000) | join }}",
    "output_flood": "{% set s = 'x' * 1000000 %}{% for i in range(100000) %}{{ s }}{% endfor %}",
    "flood_into_a_block": "{% set s = 'x' * 1000000 %}{% set b %}{% for i in range(100000) %}{{ s }}{% endfor %}{% endset %}",
    "literal_text_flood": "{% for i in range(100000) %}" + "y" * 5000 + "{% endfor %}",
    "macro_recursion": "{% macro f(n) %}{{ f(n + 1) }}{% endmacro %}{{ f(0) }}",
    "recursive_loop": "{% for x in [1, 1] recursive %}{{ loop([1, 1]) }}{% endfor %}",
}


@pytest.mark.parametrize("case", list(RUNAWAY_TEMPLATES))
def test_runaway_template_stops_with_one_line(case, tmp_path):
    # Protection: netgen/netlist/sandbox.py (work budget, size limits checked before the value
    # is built, output limit) and the renderer's MemoryError/RecursionError mapping.
    design = load_design(user_template(tmp_path, RUNAWAY_TEMPLATES[case]))
    with pytest.raises(RenderError, match=r"^template user\.j2: .*exceeded") as err:
        render(size(design), mode="tran")
    assert "\n" not in str(err.value)


def test_runaway_template_through_the_cli(tmp_path, netgen_cli):
    code, out, err = netgen_cli("run", user_template(tmp_path, RUNAWAY_TEMPLATES["loop_1e10"]), "-o", tmp_path / "o")
    assert code == 2 and err.count("\n") == 1 and err.startswith("Error: template user.j2: work limit")
    assert not (tmp_path / "o").exists()


def test_bounded_sandbox_keeps_ordinary_template_features(tmp_path):
    # Positive control: loops, macros, '~', '*', '**', format and filters of ordinary size work,
    # and the operators give Python's results (10 ** 3 = 1000, 'ab' * 2 = 'abab').
    body = ("{% macro r(name, a, b, v) %}R{{ name }} {{ a }} {{ b }} {{ v | n }}{% endmacro %}"
            "{% for k in range(3) %}{{ r('x' ~ k, 'n' ~ k, 0, 10 ** 3 * (k + 1)) }}\n{% endfor %}"
            "* {{ 'ab' * 2 }} {{ '%05.1f' % 2.5 }} {{ '{:>4}'.format('z') }} {{ [3, 1, 2] | sort | join(',') }}\n")
    text = render(size(load_design(user_template(tmp_path, body))), mode="tran")
    assert "Rx0 n0 0 1000" in text and "Rx2 n2 0 3000" in text
    assert "* abab 002.5    z 1,2,3" in text
