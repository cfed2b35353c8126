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


def gen_100k_keys(tmp):
    # 10^5 keys in a free-form section (0.9 MB, under the size limit): today a 60 s+ hang
    p = tmp / "many_keys.toml"
    p.write_text(_valid_text() + "[meta]\n" + "".join(f"k{i}=1\n" for i in range(100_000)))
    return p, ["many_keys.toml", "more than 5000 keys", "limit exceeded"]


def gen_deep_tables(tmp):
    # a dotted table header 3000 levels deep: was a RecursionError ("Internal error")
    p = tmp / "deep_tables.toml"
    p.write_text(_valid_text() + "[meta." + ".".join(f"t{i}" for i in range(3000)) + "]\n")
    return p, ["deep_tables.toml", "nested deeper than 8 levels", "limit exceeded"]


def gen_deep_arrays(tmp):
    # arrays nested 5000 deep: the TOML parser itself would recurse past Python's limit
    p = tmp / "deep_arrays.toml"
    p.write_text(_valid_text() + "[meta]\na = " + "[" * 5000 + "]" * 5000 + "\n")
    return p, ["deep_arrays.toml", "brackets nested", "limit", "exceeded"]


def gen_deep_inline_tables(tmp):
    p = tmp / "deep_inline.toml"
    p.write_text(_valid_text() + "[meta]\na = " + "{b = " * 3000 + "1" + "}" * 3000 + "\n")
    return p, ["deep_inline.toml", "brackets nested", "exceeded"]


GENERATED = [gen_100k_keys, gen_deep_tables, gen_deep_arrays, gen_deep_inline_tables, gen_empty, gen_whitespace_only, gen_not_utf8, gen_utf16, gen_nul_byte, gen_huge, gen_missing,
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


# ------------------------------------------------------------ every corpus case, every command

@pytest.mark.parametrize("command", ["render", "run", "sweep"])
def test_every_bad_case_exits_2_without_internal_error(command, tmp_path, netgen_cli):
    # An internal error is a bug: each file of tests/data/bad gives exit code 2 and one
    # 'Error:' line through every command that reads a design.
    extra = ["--vary", "design.vdd=20V:28V:3", "--list"] if command == "sweep" else []
    for case in CORPUS:
        out_dir = tmp_path / case.stem
        code, out, err = netgen_cli(command, case, *extra, "-o", out_dir)
        assert "Internal error" not in err, (case.name, err)
        assert_clean_error(code, out, err, [])
        assert not out_dir.exists(), case.name


# ------------------------------------------------------------ studies: options and stores

STUDY_DOC = {"design": {"name": "bench_b", "topology": "class_b_tuned", "f0": "915 MHz", "vdd": "24 V",
                        "ropt": "36 ohm"}, "device": {"model": "gm"}}
#: the closed-form evaluator of tests/test_sweep.py (no simulator)
FAKE = ["--evaluator", "test_sweep:tuned_b_eval", "--quiet", "--no-plots", "--workers", "1"]


@pytest.mark.parametrize("args, fragments", [
    (["--tolerance", "C*=5%", "--seed", "-1"], ["--seed -1", "0 to 9223372036854775807"]),
    (["--tolerance", "C*=5%", "--seed", str(10**24)], ["--seed 1000000000000000000000000"]),
    (["--tolerance", "C*=5%", "--samples", str(10**12)], ["--samples 1000000000000", "limit of 1000000"]),
    (["--vary", "design.vdd=20V:28V:1000000"], ["design.vdd", "1000000 points", "limit of 10000"]),
    (["--vary", "design.vdd=20V:28V:5000", "--vary", "design.f0=800MHz:900MHz:5000"],
     ["25000000 points", "limit of 1000000"]),
    (["--vswr", "2:100000"], ["--vswr", "limit of 10000"]),
    (["--vary", "design.vdd=20V:28V:3", "--spec", "drain_efficiency>=nan"], ["--spec", "not a finite number"]),
    (["--vary", "design.vdd=20V:28V:3", "--spec", "pout_w>=inf"], ["--spec", "not a finite number"]),
    (["--vary", "design.vdd=20V:28V:3", "--spec", "drain_efficiency>=nan%"], ["--spec", "not a finite number"]),
])
def test_bad_study_options(args, fragments, tmp_path, netgen_cli):
    # Each was an internal error (ValueError, OverflowError, MemoryError) or a hang before.
    design = write_toml(tmp_path / "d.toml", STUDY_DOC)
    code, out, err = netgen_cli("sweep", design, *args, *FAKE, "-o", tmp_path / "o")
    assert_clean_error(code, out, err, fragments)
    assert not (tmp_path / "o").exists()


def _stored_sweep(tmp_path, netgen_cli):
    design = write_toml(tmp_path / "d.toml", STUDY_DOC)
    args = [design, "--vary", "design.vdd=20V:28V:3", *FAKE, "-o", tmp_path / "o"]
    code, out, err = netgen_cli("sweep", *args)
    assert code == 0, err
    return args, tmp_path / "o" / "sweep.sqlite"


@pytest.mark.parametrize("damage, fragments", [
    ("UPDATE points SET inputs = '{not json' WHERE idx = 1", ["point 1", "not JSON"]),
    ("UPDATE points SET metrics = '[1, 2]' WHERE idx = 0", ["point 0", "wrong kind"]),
    ("UPDATE points SET inputs = '42' WHERE idx = 2", ["point 2", "wrong kind"]),
    ("UPDATE points SET seconds = 'slow' WHERE idx = 0", ["point 0", "run time"]),
    ("UPDATE points SET error = x'00ff' WHERE idx = 0", ["point 0", "wrong kind"]),
])
def test_damaged_store_rows(damage, fragments, tmp_path, netgen_cli):
    import sqlite3

    args, db = _stored_sweep(tmp_path, netgen_cli)
    con = sqlite3.connect(db)
    con.execute(damage)
    con.commit()
    con.close()
    code, out, err = netgen_cli("sweep", *args)  # resumes: every point stored, then reads them back
    assert_clean_error(code, out, err, ["sweep.sqlite", *fragments])


def test_store_rows_with_null_inputs(tmp_path, netgen_cli):
    # A store whose points table allows NULL inputs (another writer's schema, same columns).
    import sqlite3

    args, db = _stored_sweep(tmp_path, netgen_cli)
    con = sqlite3.connect(db)
    cols = "sweep_id, idx, inputs, status, metrics, drain_efficiency, pout_w, pdc_w, peak_vd_v, peak_vd_over_vdd, settled, error, seconds"
    con.executescript(f"CREATE TABLE p2 AS SELECT {cols} FROM points; DROP TABLE points; ALTER TABLE p2 RENAME TO points;"
                      "UPDATE points SET inputs = NULL WHERE idx = 0;")
    con.commit()
    con.close()
    code, out, err = netgen_cli("sweep", *args)
    assert_clean_error(code, out, err, ["sweep.sqlite", "point 0"])


@pytest.mark.parametrize("script, fragments", [
    ("CREATE TABLE sweeps (x TEXT); INSERT INTO sweeps VALUES ('a');", ["not a pashape sweep store", "'sweeps'"]),
    ("CREATE TABLE points (idx INTEGER, value REAL);", ["not a pashape sweep store", "'points'"]),
    ("PRAGMA user_version = 7;", None),  # an empty SQLite file becomes a store: no error
])
def test_foreign_sqlite_file(script, fragments, tmp_path, netgen_cli):
    import sqlite3

    (tmp_path / "o").mkdir()
    con = sqlite3.connect(tmp_path / "o" / "sweep.sqlite")
    con.executescript(script)
    con.close()
    design = write_toml(tmp_path / "d.toml", STUDY_DOC)
    code, out, err = netgen_cli("sweep", design, "--vary", "design.vdd=20V:28V:3", *FAKE, "-o", tmp_path / "o")
    if fragments is None:
        assert code == 0, err
    else:
        assert_clean_error(code, out, err, fragments)


def test_garbage_store_file(tmp_path, netgen_cli):
    (tmp_path / "o").mkdir()
    (tmp_path / "o" / "sweep.sqlite").write_bytes(b"this is not a database\n" * 100)
    design = write_toml(tmp_path / "d.toml", STUDY_DOC)
    code, out, err = netgen_cli("sweep", design, "--vary", "design.vdd=20V:28V:3", *FAKE, "-o", tmp_path / "o")
    assert_clean_error(code, out, err, ["sweep.sqlite"])


# ------------------------------------------------------------ disk full, file permissions

def _disk_fills_after(monkeypatch, n_ok: int) -> None:
    """Simulate ENOSPC: netgen.fileio.write_chunks (where every output byte goes) fails after n_ok files.

    Measured on a real full disk too (a 4k-400k tmpfs, docs/reliability.md); this stands in for
    it where mounting is not possible.
    """
    import errno

    from netgen import fileio

    real = fileio.write_chunks
    calls = {"n": 0}

    def write(fh, data, chunk=1 << 20):
        calls["n"] += 1
        if calls["n"] > n_ok:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(fh, data, chunk)

    monkeypatch.setattr(fileio, "write_chunks", write)


@pytest.mark.parametrize("n_ok", [0, 1])  # render writes two netlists
def test_disk_full_during_render_leaves_no_folder(n_ok, tmp_path, netgen_cli, monkeypatch):
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    _disk_fills_after(monkeypatch, n_ok)
    code, out, err = netgen_cli("render", design, "-o", tmp_path / "out")
    line = assert_clean_error(code, out, err, ["No space left on device"])
    assert str(tmp_path / "out") in line and ".tmp-" not in line  # names the folder asked for
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ok.toml"]  # no folder, no temporary file


def test_disk_full_during_size_leaves_no_file(tmp_path, netgen_cli, monkeypatch):
    # Before the fix sized.toml's own writer left its '.sized.toml.*.tmp' file behind.
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    _disk_fills_after(monkeypatch, 0)
    code, out, err = netgen_cli("size", design, "-o", tmp_path / "sized.toml")
    assert_clean_error(code, out, err, ["sized.toml", "No space left on device"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ok.toml"]


@pytest.mark.ngspice
@pytest.mark.parametrize("n_ok", [0, 2, 5])
def test_disk_full_during_run_leaves_no_folder(n_ok, tmp_path, netgen_cli, monkeypatch):
    # netlist.cir, sized.toml, metrics.json, waveforms.csv, then the plots and report.html
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    _disk_fills_after(monkeypatch, n_ok)
    code, out, err = netgen_cli("run", design, "-o", tmp_path / "out")
    assert_clean_error(code, out, err, [str(tmp_path / "out"), "No space left on device"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ok.toml"]


@pytest.fixture
def umask_027():
    old = os.umask(0o027)
    try:
        yield 0o027
    finally:
        os.umask(old)


@pytest.mark.ngspice
def test_run_outputs_follow_the_umask(tmp_path, netgen_cli, umask_027):
    # Common practice (open(2) with mode 0666, mkdir 0777, less the umask): before the fix every
    # file but netlist.cir was 0600 (mkstemp) and the folder 0700 (mkdtemp).
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    code, out, err = netgen_cli("run", design, "-o", tmp_path / "out")
    assert code == 0, err
    files = sorted((tmp_path / "out").iterdir())
    assert {"report.html", "metrics.json", "sized.toml", "netlist.cir", "waveforms.csv"} <= {p.name for p in files}
    assert any(p.suffix == ".png" for p in files)
    for p in files:
        assert p.stat().st_mode & 0o777 == 0o640, p.name
    assert (tmp_path / "out").stat().st_mode & 0o777 == 0o750


def test_size_and_render_outputs_follow_the_umask(tmp_path, netgen_cli, umask_027):
    design = write_toml(tmp_path / "ok.toml", MINIMAL_DOC)
    assert netgen_cli("size", design, "-o", tmp_path / "sized.toml")[0] == 0
    assert (tmp_path / "sized.toml").stat().st_mode & 0o777 == 0o640
    assert netgen_cli("render", design, "-o", tmp_path / "r")[0] == 0
    assert (tmp_path / "r").stat().st_mode & 0o777 == 0o750
    assert all(p.stat().st_mode & 0o777 == 0o640 for p in (tmp_path / "r").iterdir())
