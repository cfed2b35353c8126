"""Golden-metric regression (netgen.handoff.regress), `pashape check` / `pashape diff`, and the pytest plugin.

Synthetic metrics come from published closed forms (docs/check_values.md): ideal class F,
square drain voltage with half-sine current (Raab 1997; Cripps): V1 = (4/pi) Vdd,
Pout = 8 Vdd^2 / (pi^2 Ropt), efficiency 100 %; its drain-voltage harmonics
V3 = V1/3, V5 = V1/5 (Fourier series of a square wave).
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from netgen.handoff import diff as design_diff
from netgen.handoff import regress
from netgen.errors import DesignError

pytest_plugins = ["pytester"]

SIMS = Path(__file__).resolve().parents[1] / "sims"


def class_f_metrics(vdd_v: float = 10.0, ropt_ohm: float = 100.0, settled: bool = True) -> dict:
    """Metrics of an ideal class-F stage (Raab 1997; Fourier series of a square wave)."""
    v1 = 4 / math.pi * vdd_v
    pout = 8 * vdd_v**2 / (math.pi**2 * ropt_ohm)  # Raab/Cripps: Pout = 8 Vdd^2/(pi^2 Ropt)
    harmonics = []
    for n in range(1, 6):
        vn = v1 / n if n % 2 else 0.0
        harmonics.append({"n": n, "vd_v": vn, "vd_deg": 0.0, "id_a": 0.0, "id_deg": 0.0,
                          "z_re_ohm": ropt_ohm if n == 1 else (1e6 if n % 2 else 1e-3), "z_im_ohm": 0.0,
                          "pload_w": pout if n == 1 else 0.0,
                          "pload_dbc": 0.0 if n == 1 else -200.0 + n})
    return {"design": {"name": "t"}, "settled": settled, "cycles": 40, "pdc_w": pout, "pout_w": pout,
            "pload_total_w": pout, "drain_efficiency": 1.0, "pae": None, "peak_vd_v": 2 * vdd_v,
            "peak_vd_over_vdd": 2.0, "peak_id_a": math.pi * pout / vdd_v, "harmonics": harmonics}


def test_select_metrics_flattens_the_contract():
    m = class_f_metrics()
    sel = regress.select_metrics(m)
    # Raab 1997: Pout = 8 Vdd^2 / (pi^2 Ropt) = 0.8106 W at 10 V, 100 ohm
    assert sel["pout_w"] == pytest.approx(0.81057, rel=1e-4)
    assert sel["z1_ohm"] == pytest.approx(100.0)
    assert set(k for k in sel if k.startswith("h")) == {"h2_dbc", "h3_dbc", "h4_dbc", "h5_dbc"}
    assert "h1_dbc" not in sel


def test_five_percent_ropt_change_fails_on_power_not_efficiency():
    # Pout ~ 1/Ropt (Raab 1997), so a 5 % higher Ropt lowers Pout by 4.8 %: outside 1 %.
    golden = regress.make_golden(Path("x.toml"), class_f_metrics(ropt_ohm=100.0), "d1")
    rows = regress.compare(golden, class_f_metrics(ropt_ohm=105.0))
    failed = {r.metric for r in rows if not r.ok}
    assert "pout_w" in failed and "pdc_w" in failed and "z1_ohm" in failed
    assert "drain_efficiency" not in failed
    row = next(r for r in rows if r.metric == "pout_w")
    assert row.deviation.endswith("(-4.76%)")


def test_dbc_deviation_is_a_difference_in_db():
    # a level in dBc differs from another by a number of dB; a percentage of a logarithm means
    # nothing (common practice): -30 dBc -> -28.5 dBc is +1.5 dB
    tol = regress.Tolerance(abs=1.0, floor=-60.0)
    row = regress.Row("h3_dbc", -30.0, -28.5, tol, tol.allows(-30.0, -28.5))
    assert row.deviation == "+1.5 dB" and "%" not in row.deviation and not row.ok
    assert tol.describe("dB", "dBc") == "+/-1 dB (<= -60 dBc equal)"
    assert regress.Row("pout_w", 2.0, 1.9, regress.Tolerance(rel=0.01), False).deviation == "-0.1 (-5.00%)"
    result = regress.CheckResult(Path("a.toml"), Path("a.expect.json"), (row,), True, None, (), None)
    line = next(x for x in regress.format_result(result).splitlines() if "h3_dbc" in x)
    assert "+1.5 dB" in line and "+/-1 dB (<= -60 dBc equal)" in line and "%" not in line


def test_half_percent_change_passes():
    golden = regress.make_golden(Path("x.toml"), class_f_metrics(ropt_ohm=100.0), "d1")
    rows = regress.compare(golden, class_f_metrics(ropt_ohm=100.5))
    assert all(r.ok for r in rows), [r for r in rows if not r.ok]


def test_tolerance_rules():
    tol = regress.Tolerance(abs=0.005)  # efficiency +/- 0.5 points
    assert tol.allows(0.90, 0.9049) and not tol.allows(0.90, 0.906)
    floor = regress.Tolerance(abs=1.0, floor=-60.0)
    assert floor.allows(-90.0, -70.0)  # both below -60 dBc: both absent
    assert not floor.allows(-90.0, -40.0)
    assert floor.allows(-30.0, -30.9) and not floor.allows(-30.0, -31.5)
    ceil = regress.Tolerance(rel=0.02, ceiling=1000.0)
    assert ceil.allows(3000.0, 8000.0) and not ceil.allows(3000.0, 500.0)
    assert not regress.Tolerance(rel=1.0).allows(1.0, float("nan"))


def test_golden_round_trip_and_hand_tolerance_kept(tmp_path):
    path = tmp_path / "a.expect.json"
    golden = regress.make_golden(tmp_path / "a.toml", class_f_metrics(), "abc")
    golden["metrics"]["pout_w"] = {"value": golden["metrics"]["pout_w"]["value"], "rel": 0.1}
    regress.write_golden(path, golden)
    back = regress.read_golden(path)
    assert back == golden
    again = regress.make_golden(tmp_path / "a.toml", class_f_metrics(ropt_ohm=101.0), "abd", old=back)
    assert again["metrics"]["pout_w"]["rel"] == 0.1
    assert again["metrics"]["pdc_w"]["rel"] == 0.01


def test_golden_of_the_earlier_format_tag_still_loads(tmp_path):
    # goldens written before the command was renamed carry "netgen-expect-1" and "netgen_version"
    path = tmp_path / "a.expect.json"
    golden = regress.make_golden(tmp_path / "a.toml", class_f_metrics(), "abc")
    assert golden["format"] == "pashape-expect-1" and regress.VERSION_KEY in golden
    old = {**{k: v for k, v in golden.items() if k != regress.VERSION_KEY},
           "format": "netgen-expect-1", "netgen_version": "0.0.9"}
    path.write_text(json.dumps(old), encoding="utf-8")
    back = regress.read_golden(path)
    assert back["format"] == regress.GOLDEN_FORMAT and back[regress.VERSION_KEY] == "0.0.9"
    assert back["metrics"] == golden["metrics"]


def test_bad_golden_names_the_file(tmp_path):
    path = tmp_path / "a.expect.json"
    path.write_text("{not json", encoding="utf-8")
    with pytest.raises(DesignError, match=r"a\.expect\.json: not a readable golden file"):
        regress.read_golden(path)
    path.write_text(json.dumps({"format": "other"}), encoding="utf-8")
    with pytest.raises(DesignError, match="not a golden file of format"):
        regress.read_golden(path)


def test_find_designs(tmp_path):
    (tmp_path / "a.toml").write_text("", encoding="utf-8")
    (tmp_path / "b.toml").write_text("", encoding="utf-8")
    regress.write_golden(tmp_path / "a.expect.json", regress.make_golden(tmp_path / "a.toml", class_f_metrics(), "x"))
    assert regress.find_designs([tmp_path]) == [tmp_path / "a.toml"]
    with pytest.raises(DesignError, match=r"b\.toml: no golden file b\.expect\.json; create it with 'pashape check --accept"):
        regress.find_designs([tmp_path / "b.toml"])
    assert regress.find_designs([tmp_path / "b.toml"], include_new=True) == [tmp_path / "b.toml"]
    with pytest.raises(DesignError, match="no such file or folder"):
        regress.find_designs([tmp_path / "missing"])


def _fake_runner_factory(metrics_by_name):
    def runner(path: str) -> dict:
        return {"metrics": metrics_by_name[Path(path).stem], "digest": "d", "error": None}
    return runner


def test_unsettled_run_fails_even_within_tolerance(tmp_path):
    (tmp_path / "a.toml").write_text("", encoding="utf-8")
    regress.write_golden(tmp_path / "a.expect.json", regress.make_golden(tmp_path / "a.toml", class_f_metrics(), "d"))
    runner = _fake_runner_factory({"a": class_f_metrics(settled=False)})
    (res,) = regress.check_designs([tmp_path], jobs=1, runner=runner)
    assert all(r.ok for r in res.rows) and not res.ok
    assert "did not settle" in regress.format_result(res)


def test_accept_reports_changes_and_refuses_unsettled(tmp_path):
    (tmp_path / "a.toml").write_text("", encoding="utf-8")
    regress.write_golden(tmp_path / "a.expect.json", regress.make_golden(tmp_path / "a.toml", class_f_metrics(), "d"))
    runner = _fake_runner_factory({"a": class_f_metrics(ropt_ohm=105.0)})
    results = regress.check_designs([tmp_path], jobs=1, accept=True, runner=runner)
    line, note = regress.accept(results)  # a runner without a second run: the step dependence is not measured
    assert note == "  step dependence not measured: no second run (a runner without one)"
    assert line.startswith("a.toml: updated:") and "pout_w 0.810569 -> 0.771971" in line
    assert regress.read_golden(tmp_path / "a.expect.json")["metrics"]["pout_w"]["value"] == pytest.approx(0.771971, rel=1e-6)
    runner = _fake_runner_factory({"a": class_f_metrics(settled=False)})
    (line,) = regress.accept(regress.check_designs([tmp_path], jobs=1, accept=True, runner=runner))
    assert line == "a.toml: not accepted (the run did not settle)"


def test_table_lists_metric_golden_new_deviation_tolerance(tmp_path):
    (tmp_path / "a.toml").write_text("", encoding="utf-8")
    regress.write_golden(tmp_path / "a.expect.json", regress.make_golden(tmp_path / "a.toml", class_f_metrics(), "d"))
    runner = _fake_runner_factory({"a": class_f_metrics(ropt_ohm=105.0)})
    (res,) = regress.check_designs([tmp_path], jobs=1, runner=runner)
    text = regress.format_result(res, only_failures=True)
    header = text.splitlines()[1].split()
    assert header == ["metric", "golden", "new", "deviation", "tolerance", "result"]
    assert text.startswith("FAIL") and "pout_w" in text and "drain_efficiency" not in text


def test_check_command_user_error_exit_2(tmp_path):
    from netgen.cli.handoff import check_command

    (tmp_path / "b.toml").write_text("", encoding="utf-8")
    out = CliRunner().invoke(check_command, [str(tmp_path / "b.toml")])
    assert out.exit_code == 2
    assert "Error: " in out.output and "no golden file b.expect.json" in out.output
    out = CliRunner().invoke(check_command, [str(tmp_path)])
    assert out.exit_code == 2 and "no design with a golden file" in out.output


# ---------------------------------------------------------------- with the real pipeline


def _design_folder(tmp_path: Path) -> tuple[Path, str]:
    """sims/class_f_line.toml and its golden copied, plus a copy with line_z0 raised 5 %."""
    from netgen.design.schema import load_design
    from netgen.synthesis.sizing import size

    folder = tmp_path / "designs"
    folder.mkdir()
    src = SIMS / "class_f_line.toml"
    shutil.copy(src, folder / "ref.toml")
    shutil.copy(regress.golden_path(src), folder / "ref.expect.json")
    z0 = size(load_design(src)).value("line_z0")
    text = src.read_text(encoding="utf-8") + f'\n[network.values]\nline_z0 = "{1.05 * z0:.6g} ohm"\n'
    (folder / "bumped.toml").write_text(text, encoding="utf-8")
    shutil.copy(regress.golden_path(src), folder / "bumped.expect.json")
    return folder, f"{1.05 * z0:.6g}"


@pytest.mark.ngspice
@pytest.mark.slow
def test_five_percent_component_change_fails_check_and_names_the_metric(tmp_path):
    from netgen.cli.handoff import check_command

    folder, _ = _design_folder(tmp_path)
    out = CliRunner().invoke(check_command, [str(folder), "-j", "1"])
    assert out.exit_code == 1, out.output
    blocks = {b.splitlines()[0]: b for b in out.output.split("\n\n") if b.strip()}
    ref = next(b for h, b in blocks.items() if h.endswith("ref.toml"))
    bumped = next(b for h, b in blocks.items() if h.endswith("bumped.toml"))
    assert ref.startswith("PASS")
    assert bumped.startswith("FAIL") and "sized design changed since the golden" in bumped
    # a quarter-wave line presents Z0^2/RL (Pozar): +5 % Z0 is +10 % Ropt, so Pout drops ~9 % (Raab: Pout ~ 1/Ropt)
    pout_line = next(line for line in bumped.splitlines() if line.strip().startswith("pout_w"))
    assert pout_line.rstrip().endswith("FAIL")
    assert "1 of 2 designs pass; failed: bumped.toml" in out.output


@pytest.mark.ngspice
@pytest.mark.slow
def test_pytest_plugin_runs_a_design_folder(pytester, tmp_path):
    folder, _ = _design_folder(tmp_path)
    result = pytester.runpytest(f"--pashape-designs={folder}", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines(["*FAIL*bumped.toml*", "*pout_w*FAIL*"])
    # the option's name before the rename still works
    result = pytester.runpytest(f"--netgen-designs={folder}", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=1)
    # without the option the plugin collects nothing
    result = pytester.runpytest(str(folder), "-p", "no:cacheprovider")
    result.assert_outcomes()


@pytest.mark.ngspice
@pytest.mark.slow
def test_all_sims_designs_pass_check():
    results = regress.check_designs([SIMS], jobs=2)
    assert len(results) >= 6
    bad = [regress.format_result(r, only_failures=True) for r in results if not r.ok]
    assert not bad, "\n\n".join(bad)


def test_diff_no_run_lists_component_changes(tmp_path):
    # sizing is pure Python (no simulator): the overridden line Z0 shows +5 %, the rest 0 %
    folder, value = _design_folder(tmp_path)
    diff = design_diff.diff_designs(str(folder / "ref.toml"), str(folder / "bumped.toml"), run=False)
    rows = {c.name: c for c in diff.components}
    assert rows["line_z0"].change_pct == pytest.approx(5.0, abs=1e-3)
    assert rows["line_z0"].b == pytest.approx(float(value))
    others = [c for c in diff.components if c.name != "line_z0"]
    assert others and all(abs(c.change_pct or 0.0) < 1e-9 for c in others)
    text = design_diff.format_diff(diff, changed_only=True)
    assert "line_z0" in text and "+5.00%" in text
