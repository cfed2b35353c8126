"""Bad input never crashes pashape: exit code 2, one ``Error:`` line naming the key or file, no
traceback, no output folder.

Protections covered (a test here fails if its protection is removed):
* schema validation in netgen/design/schema.py (unknown keys with the closest valid one, units,
  ranges, types, required keys, file checks: missing, folder, FIFO, size limit, UTF-8, empty),
* quantity parsing in netgen/design/quantities.py (bare numbers, NaN/inf, wrong unit),
* ``[network.values]`` checks in netgen/synthesis/sizers.py,
* the CLI's error mapping in netgen/cli/root.py (NetgenError -> one line on stderr, exit code 2),
* atomic outputs (netgen/fileio.py, pipeline.atomic_folder): a failed command leaves no folder.

The corpus is tests/data/bad/*.toml; the first line of each file says what the message must
contain: ``# expect: fragment | fragment``. Cases that cannot be files (bytes, sizes, file
kinds) are generated below.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import MINIMAL_DOC, write_toml

BAD_DIR = Path(__file__).parent / "data" / "bad"
CORPUS = sorted(BAD_DIR.glob("*.toml"))
_EXPECT = re.compile(r"^# expect: (.+)$")


def expected_fragments(path: Path) -> list[str]:
    first = path.read_text(encoding="utf-8").splitlines()[0]
    m = _EXPECT.match(first)
    assert m, f"{path.name}: the first line must be '# expect: ...'"
    return [part.strip() for part in m.group(1).split(" | ")]


def assert_clean_error(code: int, out: str, err: str, fragments: list[str]) -> str:
    """Exit code 2, exactly one line on stderr starting 'Error:', containing every fragment."""
    assert "Traceback" not in err and "Traceback" not in out
    lines = err.strip("\n").split("\n")
    assert code == 2, f"exit code {code}; stderr: {err!r}"
    assert len(lines) == 1, f"expected one stderr line, got {lines!r}"
    line = lines[0]
    assert line.startswith("Error: "), line
    for fragment in fragments:
        assert fragment in line, f"{fragment!r} not in {line!r}"
    return line


def test_corpus_is_large_enough():
    # The task asks for at least 40 cases; the generated ones below come on top.
    assert len(CORPUS) >= 40


@pytest.mark.parametrize("case", CORPUS, ids=[p.stem for p in CORPUS])
def test_bad_design_file_size_command(case, tmp_path, netgen_cli):
    # Protection: validation + CLI mapping + no output written on failure.
    out_dir = tmp_path / "out"
    code, out, err = netgen_cli("size", case, "-o", out_dir / "sized.toml")
    assert_clean_error(code, out, err, expected_fragments(case))
    assert not out_dir.exists()


# A few representative cases through the commands that write folders (render, run): the
# error must come before any folder is made.
REPRESENTATIVE = ["syntax_unclosed_string", "unknown_key_typo", "wrong_unit_vdd", "toml_nan_loaded_q",
                  "spice_missing_include", "values_unknown_component"]


@pytest.mark.parametrize("command", ["render", "run"])
@pytest.mark.parametrize("stem", REPRESENTATIVE)
def test_bad_design_folder_commands(stem, command, tmp_path, netgen_cli):
    case = BAD_DIR / f"{stem}.toml"
    out_dir = tmp_path / "out"
    code, out, err = netgen_cli(command, case, "-o", out_dir)
    assert_clean_error(code, out, err, expected_fragments(case))
    assert not out_dir.exists()


def test_existing_output_folder_is_left_unchanged(tmp_path, netgen_cli):
    # Protection: atomic_folder; an error leaves an existing folder exactly as it was.
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    (out_dir / "keep.txt").write_text("earlier results\n")
    case = BAD_DIR / "wrong_unit_vdd.toml"
    code, out, err = netgen_cli("render", case, "-o", out_dir)
    assert_clean_error(code, out, err, expected_fragments(case))
    assert sorted(p.name for p in out_dir.iterdir()) == ["keep.txt"]
    assert (out_dir / "keep.txt").read_text() == "earlier results\n"


# ------------------------------------------------------------ generated cases (file level)

def _valid_text() -> str:
    return ('[design]\nname = "bench_stage"\ntopology = "class_f_line"\n'
            'f0 = "915 MHz"\nvdd = "24 V"\npout = "8 W"\n')


def gen_empty(tmp):
    p = tmp / "empty.toml"
    p.write_bytes(b"")
    return p, ["empty.toml", "empty"]


def gen_whitespace_only(tmp):
    p = tmp / "blank.toml"
    p.write_bytes(b"  \n\n\t\n")
    return p, ["blank.toml", "empty"]


def gen_not_utf8(tmp):
    p = tmp / "latin1.toml"
    p.write_bytes(_valid_text().replace("bench_stage", "b\xe9nch").encode("latin-1"))
    return p, ["latin1.toml", "UTF-8"]


def gen_utf16(tmp):
    p = tmp / "utf16.toml"
    p.write_bytes(_valid_text().encode("utf-16"))
    return p, ["utf16.toml", "UTF-8"]


def gen_nul_byte(tmp):
    p = tmp / "nul.toml"
    p.write_bytes(_valid_text().replace('"24 V"', '"24\x00 V"').encode())
    return p, ["nul.toml", "TOML syntax error"]


def gen_huge(tmp):
    # 1.2 MB of comments: valid TOML, but no design file is that big (design.MAX_FILE_BYTES)
    p = tmp / "huge.toml"
    p.write_text(_valid_text() + ("# padding padding padding padding\n" * 36_000))
    assert p.stat().st_size > 1_000_000
    return p, ["huge.toml", "bytes"]


def gen_missing(tmp):
    return tmp / "no_such_design.toml", ["no_such_design.toml", "no such design file"]


def gen_folder(tmp):
    p = tmp / "a_folder.toml"
    p.mkdir()
    return p, ["a_folder.toml", "folder"]


def gen_fifo(tmp):
    # A FIFO exists and is not a folder; reading it would block for ever without a writer.
    p = tmp / "pipe.toml"
    os.mkfifo(p)
    return p, ["pipe.toml", "not a regular file"]


def gen_name_too_long(tmp):
    p = tmp / ("d" * 300 + ".toml")  # longer than NAME_MAX (255) on Linux file systems
    return p, ["ddd", "cannot read"]


def gen_newline_in_file_name(tmp):
    p = tmp / "two\nlines.toml"  # the message stays on one line
    return p, ["two\\nlines.toml", "no such design file"]


def gen_symlink_loop(tmp):
    p = tmp / "loop.toml"
    p.symlink_to(tmp / "loop.toml")
    return p, ["loop.toml"]


def gen_spice_include_is_folder(tmp):
    (tmp / "models.lib").mkdir()
    text = _valid_text() + ('[device]\nmodel = "spice"\ninclude = "models.lib"\n'
                            'subckt = "bench_fet"\npins = ["drain", "gate", "source"]\n')
    p = tmp / "inc_folder.toml"
    p.write_text(text)
    return p, ["device.include", "models.lib"]


def gen_spice_include_name_too_long(tmp):
    text = _valid_text() + ('[device]\nmodel = "spice"\ninclude = "' + "m" * 5000 + '.lib"\n'
                            'subckt = "bench_fet"\npins = ["drain", "gate", "source"]\n')
    p = tmp / "inc_long.toml"
    p.write_text(text)
    return p, ["device.include"]


GENERATED = [gen_empty, gen_whitespace_only, gen_not_utf8, gen_utf16, gen_nul_byte, gen_huge, gen_missing,
             gen_folder, gen_fifo, gen_name_too_long, gen_newline_in_file_name, gen_symlink_loop,
             gen_spice_include_is_folder, gen_spice_include_name_too_long]


@pytest.mark.parametrize("make", GENERATED, ids=[g.__name__[4:] for g in GENERATED])
def test_generated_bad_file(make, tmp_path, netgen_cli):
    path, fragments = make(tmp_path)
    out_dir = tmp_path / "out"
    code, out, err = netgen_cli("size", path, "-o", out_dir / "sized.toml")
    assert_clean_error(code, out, err, fragments)
    assert not out_dir.exists()


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="running as root: chmod 000 does not stop root from reading; "
                           "the folder and FIFO cases cover unreadable paths")
def test_unreadable_file(tmp_path, netgen_cli):
    # Protection: load_design's PermissionError branch.
    p = write_toml(tmp_path / "locked.toml", MINIMAL_DOC)
    p.chmod(0)
    try:
        code, out, err = netgen_cli("size", p, "-o", tmp_path / "out" / "sized.toml")
    finally:
        p.chmod(0o644)
    assert_clean_error(code, out, err, ["locked.toml", "permission denied"])
    assert not (tmp_path / "out").exists()


# ------------------------------------------------------------ unwritable outputs

def test_output_under_a_regular_file_size(tmp_path, netgen_cli):
    # Protection: fileio.atomic_write_bytes maps the OS error to OutputError naming the path.
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    blocker = tmp_path / "somefile"
    blocker.write_text("not a folder\n")
    code, out, err = netgen_cli("size", design, "-o", blocker / "out" / "sized.toml")
    assert_clean_error(code, out, err, ["somefile/out/sized.toml"])
    assert blocker.read_text() == "not a folder\n"


@pytest.mark.parametrize("command", ["render", "run"])
def test_output_folder_under_a_regular_file(command, tmp_path, netgen_cli):
    # Protection: pipeline.atomic_folder refuses before any simulation result is lost.
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    blocker = tmp_path / "somefile"
    blocker.write_text("not a folder\n")
    code, out, err = netgen_cli(command, design, "-o", blocker / "out")
    assert_clean_error(code, out, err, ["somefile/out"])
    assert blocker.read_text() == "not a folder\n"


def test_output_folder_is_a_file(tmp_path, netgen_cli):
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    blocker = tmp_path / "results"
    blocker.write_text("x\n")
    code, out, err = netgen_cli("render", design, "-o", blocker)
    assert_clean_error(code, out, err, ["results"])
    assert blocker.read_text() == "x\n"


# ------------------------------------------------------------ the real executable

@pytest.mark.parametrize("stem", ["syntax_bad_escape", "unknown_section", "values_wrong_unit"])
def test_real_process_prints_one_line(stem, tmp_path):
    # The installed entry point, in its own process: stderr is exactly one Error: line.
    case = BAD_DIR / f"{stem}.toml"
    proc = subprocess.run([sys.executable, "-m", "netgen.cli", "size", str(case), "-o", str(tmp_path / "o" / "s.toml")],
                          capture_output=True, text=True, cwd=tmp_path,
                          env={**os.environ, "PASHAPE_DEBUG": "", "NETGEN_DEBUG": ""})
    assert_clean_error(proc.returncode, proc.stdout, proc.stderr, expected_fragments(case))
    assert not (tmp_path / "o").exists()
