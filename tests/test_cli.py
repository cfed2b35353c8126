"""The command line as a user meets it: help everywhere, even without the simulator."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

COMMANDS = ["demo", "size", "render", "run", "sweep", "check", "diff", "export", "doctor"]


def _netgen(*args, env=None):
    return subprocess.run([sys.executable, "-m", "netgen.cli", *args], capture_output=True, text=True,
                          env=env, timeout=120)


def _no_simulator_env():
    env = dict(os.environ)
    env["NGSPICE_LIBRARY_PATH"] = "/nonexistent/libngspice.so"  # PySpice's own variable
    env["PATH"] = "/nonexistent"  # no ngspice executable either
    return env


def test_help_works_without_libngspice():
    res = _netgen("--help", env=_no_simulator_env())
    assert res.returncode == 0, res.stderr
    for cmd in COMMANDS:
        assert cmd in res.stdout


@pytest.mark.parametrize("cmd", COMMANDS)
def test_every_command_has_help_with_an_example(cmd):
    res = _netgen(cmd, "--help", env=_no_simulator_env())
    assert res.returncode == 0, res.stderr
    assert "Example" in res.stdout


def test_importing_the_cli_does_not_load_the_simulator():
    # only netgen.simulator.shared imports PySpice (DEVELOPERS.md), and only when a simulation runs
    code = "import sys, netgen.cli.root, netgen.pipeline, netgen.design.schema; print('PySpice' in sys.modules)"
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert res.stdout.strip() == "False", res.stderr


def test_version():
    res = _netgen("--version")
    assert res.returncode == 0 and "pashape" in res.stdout


def test_console_command_and_distribution_are_pashape():
    # the installed distribution and its console command carry the new name; `python -m netgen.cli`
    # (above) stays the module entry
    from importlib import metadata

    scripts = {ep.name: ep.value for ep in metadata.entry_points(group="console_scripts")
               if ep.value.startswith("netgen.")}
    assert scripts == {"pashape": "netgen.cli.root:main"}
    assert metadata.version("pashape")


def test_usage_error_names_the_command():
    res = _netgen("run", "--no-such-option")
    assert res.returncode == 2
    assert "see 'pashape run --help'" in res.stderr


def test_write_design_refuses_to_overwrite_without_force(tmp_path, netgen_cli):
    target = tmp_path / "my_pa.toml"
    target.write_text("# my own design\n", encoding="utf-8")
    code, out, err = netgen_cli("demo", "--write-design", target)
    assert code == 2 and err.startswith("Error: ") and "--force" in err and len(err.splitlines()) == 1
    assert target.read_text(encoding="utf-8") == "# my own design\n"  # left as it was
    code, out, err = netgen_cli("demo", "--write-design", target, "--force")
    assert code == 0 and "[design]" in target.read_text(encoding="utf-8")
    fresh = tmp_path / "new.toml"
    code, out, err = netgen_cli("demo", "--write-design", fresh)
    assert code == 0 and fresh.read_text(encoding="utf-8") == target.read_text(encoding="utf-8")


@pytest.mark.parametrize("command", ["demo", "run"])
def test_run_and_demo_print_one_caution_line_on_stderr(command, tmp_path, netgen_cli, monkeypatch):
    # the pipeline is replaced by a stand-in (this checks the command's printing, not a simulation)
    import types

    import netgen.pipeline

    def fake_run_design(design, outdir, progress=None):
        metrics = {"design": {"name": design.name, "topology": design.topology}, "settled": True, "harmonics": []}
        files = {k: outdir / f"{k}.x" for k in ("report", "metrics", "waveforms", "netlist")}
        return types.SimpleNamespace(metrics=metrics, files=files)

    monkeypatch.setattr(netgen.pipeline, "run_design", fake_run_design)
    from netgen.cli.root import _demo_path

    args = ["demo", "-o", tmp_path / "out"] if command == "demo" else ["run", _demo_path(), "-o", tmp_path / "out"]
    for _ in range(2):  # on every run, not once per session
        code, out, err = netgen_cli(*args)
        assert code == 0, err
        cautions = [line for line in err.splitlines() if line.startswith("Caution:")]
        assert len(cautions) == 1
        for needle in ("high voltages", "burns", "emission", "local codes and licensed practice"):
            assert needle in cautions[0]
        assert "Caution" not in out  # stdout keeps the table only
