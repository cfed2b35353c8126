"""Compression points of a drive sweep (netgen.studies.compression) on synthetic curves with a
closed-form answer, and the drive sweep end to end."""

from __future__ import annotations

import math

import numpy as np
import pytest

from netgen.studies import compression_points, drive_compression


def _rapp_pout_dbm(pin_dbm, gain_db=20.0, psat_dbm=30.0, p=2.0):
    """Rapp's AM/AM model (C. Rapp, "Effects of HPA-nonlinearity on a 4-DPSK/OFDM-signal for a digital
    sound broadcasting system", 2nd European Conf. on Satellite Communications, 1991):
    A_out = G A / (1 + (G A / A_sat)^(2p))^(1/(2p)), written in power: x = P_lin / P_sat."""
    x = 10 ** ((np.asarray(pin_dbm) + gain_db - psat_dbm) / 10.0)
    return pin_dbm + gain_db - 10.0 * np.log10(1.0 + x**p) / p


def _rapp_pin_at(level_db, gain_db=20.0, psat_dbm=30.0, p=2.0):
    """Closed form: the gain drop 10 log10(1 + x^p)/p = n dB gives x^p = 10^(p n/10) - 1."""
    x = (10 ** (p * level_db / 10.0) - 1.0) ** (1.0 / p)
    return psat_dbm - gain_db + 10.0 * math.log10(x)


@pytest.mark.parametrize("p", [1.0, 2.0, 3.0])
def test_rapp_curve_p1db_p3db(p):
    pin = np.linspace(-40.0, 20.0, 241)  # from far below compression (x = 1e-5 at -40 dBm)
    out = compression_points(pin, _rapp_pout_dbm(pin, p=p))
    assert out["small_signal_gain_db"] == pytest.approx(20.0, abs=0.01)  # Rapp: linear gain G at low drive
    for level, key in ((1.0, "p1db"), (3.0, "p3db")):
        c = out[key]
        assert c is not None
        # linear interpolation on a 0.25 dB grid: within 0.02 dB of the closed form
        assert c["pin_dbm"] == pytest.approx(_rapp_pin_at(level, p=p), abs=0.02)
        assert c["pout_dbm"] == pytest.approx(c["pin_dbm"] + 20.0 - level, abs=0.02)


def test_not_reached_is_none_and_nan_points_are_skipped():
    pin = np.linspace(-40.0, 5.0, 46)
    pout = _rapp_pout_dbm(pin)
    pout[3] = np.nan  # a point without a result
    out = compression_points(pin, pout)
    assert out["p1db"] is not None or out["p3db"] is None
    assert out["p3db"] is None  # -10..5 dBm stays below 3 dB of compression (closed form: 12.3 dBm)
    assert compression_points([], [])["p1db"] is None


def test_gain_expansion_counts_from_the_peak():
    # a class-B-like curve: the gain rises 3 dB, then compresses like Rapp's model
    pin = np.linspace(-40.0, 20.0, 241)
    expansion = 3.0 * np.clip((pin + 40.0) / 30.0, 0.0, 1.0)
    pout = _rapp_pout_dbm(pin) + expansion
    peak = compression_points(pin, pout)
    low = compression_points(pin, pout, reference="low_drive")
    assert peak["reference_gain_db"] == pytest.approx(peak["peak_gain_db"])
    assert peak["small_signal_gain_db"] == pytest.approx(20.0, abs=1e-3)
    # counted from the low-drive gain, 1 dB of compression comes later than from the peak
    assert low["p1db"]["pin_dbm"] > peak["p1db"]["pin_dbm"]
    with pytest.raises(ValueError):
        compression_points(pin, pout, reference="other")


def test_drive_compression_reads_stored_rows():
    pin = np.linspace(-30.0, 20.0, 51)
    pout_w = 1e-3 * 10 ** (_rapp_pout_dbm(pin) / 10.0)
    rows = [{"inputs": {"axes": {"drive.pin": float(a)}}, "status": "ok", "metrics": {"pout_w": float(b)}}
            for a, b in zip(pin, pout_w)]
    rows.append({"inputs": {"axes": {"drive.pin": 21.0}}, "status": "failed", "metrics": None})
    out = drive_compression(rows)
    assert out["p1db"]["pin_dbm"] == pytest.approx(_rapp_pin_at(1.0), abs=0.05)
    assert drive_compression([{"inputs": {"axes": {"design.vdd": 12.0}}, "status": "ok", "metrics": {}}]) is None


@pytest.mark.ngspice
@pytest.mark.slow
def test_drive_sweep_end_to_end(tmp_path):
    # pashape sweep --vary drive.pin over the shipped angelov example: every point settles, PAE <= drain
    # efficiency (common practice), the summary carries the compression points and the drive plot is drawn
    import json
    from pathlib import Path

    from click.testing import CliRunner

    from netgen.cli import cli

    design = Path(__file__).resolve().parents[1] / "sims" / "class_b_angelov.toml"
    res = CliRunner().invoke(cli, ["sweep", str(design), "--vary", "drive.pin=-10dBm:14dBm:5", "-o", str(tmp_path)])
    assert res.exit_code == 0, res.output
    summary = json.loads((tmp_path / "summary.json").read_text())
    assert summary["ok"] == 5 and "compression" in summary
    assert summary["compression"]["p1db"] is not None  # the stage saturates near 34 dBm out (about 10 dBm in, behind its input match)
    assert (tmp_path / "drive_sweep.png").is_file()
    import csv

    rows = list(csv.DictReader((tmp_path / "sweep.csv").open()))
    for r in rows:
        assert float(r["pae"]) <= float(r["drain_efficiency"])
        assert r["am_pm_deg"] != "" and r["conduction_angle_deg"] != ""  # AM-PM and the conduction angle per point
